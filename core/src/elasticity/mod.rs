//! Stress from strain for a linear isotropic elastic material.
//!
//! - [`hooke`]: the elastic constants ([`Isotropic`]), 3D Hooke's law and its inverse,
//!   plane stress and plane strain, principal stresses and von Mises stress.
//! - [`materials`]: material presets with published constants (Eurocode clauses).
//!
//! Units: stress and moduli in pascals (Pa) inside core; strain dimensionless;
//! thermal expansion coefficients in 1/K. Tension positive. Tensor shear components
//! (`sxy` of the stress tensor, `exy` of the strain tensor, never engineering `gxy`)
//! unless a name says otherwise.
//!
//! Every result that carries a stress also carries [`CAUTION`].

pub mod hooke;
pub mod materials;

pub use hooke::{
    Isotropic, PlaneStrainResult, PlaneStressResult, Stress3, principal_stresses_3d, von_mises,
};
pub use materials::{ConcreteClass, Material, concrete_ecm, material, material_ids, presets};

/// Caution carried by every stress result.
pub const CAUTION: &str = "Assumes a homogeneous, isotropic, linear elastic material. \
Not a structural assessment.";
