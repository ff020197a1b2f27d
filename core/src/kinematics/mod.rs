//! Kinematics of one displacement gradient `G = ∂u/∂x`, 2D and 3D.
//!
//! | module | holds |
//! |---|---|
//! | [`small`] | small strain ε, rotation W / ω / w, volumetric, deviator, invariants |
//! | [`eigen`] | bounded symmetric eigen-solver (closed form 2D, bounded QR 3D) |
//! | [`principal`] | principal strains, maximum shear and its planes, octahedral, von Mises |
//! | [`finite`] | F, J, Green–Lagrange, Euler–Almansi, polar decomposition, stretches, Hencky |
//! | [`adequacy`] | is small strain adequate at the caller's resolution, and why not |
//! | [`directional`] | strain along a direction, shear between directions / on a plane, frames |
//! | [`mohr`] | Mohr-circle data |
//! | [`report`] | the aggregates [`Kinematics2`] / [`Kinematics3`] from [`analyze2`] / [`analyze3`] |
//!
//! Conventions: `G[i][j] = ∂u_i/∂x_j`, strain dimensionless, angles radians
//! counter-clockwise from +x (2D) or by the right-hand rule (3D); tensor shear `exy`
//! and engineering shear `gxy = 2·exy` are always named apart; principal values are
//! sorted descending and equal values are flagged, never given an arbitrary direction.
//!
//! These are kinematic estimates from one gradient, not a structural assessment.

pub mod adequacy;
pub mod directional;
pub mod eigen;
pub mod finite;
pub mod mohr;
pub mod principal;
pub mod report;
pub mod small;

/// The nalgebra version the kinematics API is written against (`Matrix2`, `Matrix3`),
/// re-exported so callers build their inputs with the same types.
pub use nalgebra;

pub use adequacy::{Adequacy, AdequacyReason, adequacy2, adequacy3};
pub use directional::{
    PlaneStrain2, PlaneStrain3, ShearBetween, frame2, frame3, normal_strain, on_plane2, on_plane3,
    shear_between, transform2, transform3,
};
pub use eigen::{Degeneracy3, SymEigen2, SymEigen3, sym_eigen2, sym_eigen3};
pub use finite::{FiniteStrain2, FiniteStrain3, finite2, finite3};
pub use mohr::{Mohr2, Mohr3, MohrCircle, MohrPoint, mohr2, mohr3};
pub use principal::{
    MaxShear2, MaxShear3, Octahedral, Principal2, Principal3, max_shear2, max_shear3, octahedral,
    principal2, principal3, von_mises_equivalent,
};
pub use report::{Kinematics2, Kinematics3, analyze2, analyze3};
pub use small::{Invariants, Strain2, Strain3};

use crate::CoreError;

/// A 2×2 matrix as row-major nested arrays (`m[row][column]`), for serialisation.
pub type Mat2 = [[f64; 2]; 2];
/// A 3×3 matrix as row-major nested arrays (`m[row][column]`), for serialisation.
pub type Mat3 = [[f64; 3]; 3];

/// Largest accepted magnitude of a gradient entry. Larger values are not a
/// displacement gradient of a monitored structure and would overflow derived values.
pub const MAX_GRADIENT_ENTRY: f64 = 1e6;

/// Options of [`analyze2`] / [`analyze3`].
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct KinematicsOptions {
    /// Smallest strain the caller cares about (dimensionless, > 0); default `1e-6`
    /// (one microstrain). Drives the small-strain adequacy verdict.
    pub strain_resolution: f64,
    /// Absolute strain tolerance (≥ 0) under which two principal values count as
    /// equal (no direction reported); default `1e-10` (10⁻⁴ microstrain): far below any
    /// survey-derived strain, far above rounding noise for strains up to order one.
    pub degenerate_tol: f64,
}

impl Default for KinematicsOptions {
    fn default() -> Self {
        Self {
            strain_resolution: 1e-6,
            degenerate_tol: 1e-10,
        }
    }
}

impl KinematicsOptions {
    /// Checks the options.
    ///
    /// # Errors
    /// [`CoreError::InvalidParameter`] naming `strain_resolution` (must be finite
    /// and > 0) or `degenerate_tol` (must be finite and ≥ 0).
    pub fn validate(&self) -> Result<(), CoreError> {
        if !(self.strain_resolution.is_finite() && self.strain_resolution > 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "strain_resolution",
                reason: format!("must be finite and > 0, got {}", self.strain_resolution),
            });
        }
        if !(self.degenerate_tol.is_finite() && self.degenerate_tol >= 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "degenerate_tol",
                reason: format!("must be finite and >= 0, got {}", self.degenerate_tol),
            });
        }
        Ok(())
    }
}

/// Rejects NaN/infinite (id `gradient`) and oversized gradient entries.
fn validate_gradient<'a>(entries: impl Iterator<Item = &'a f64>) -> Result<(), CoreError> {
    for &v in entries {
        if !v.is_finite() {
            return Err(CoreError::NonFinite {
                id: "gradient".into(),
                field: "G",
            });
        }
        if v.abs() > MAX_GRADIENT_ENTRY {
            return Err(CoreError::InvalidParameter {
                name: "gradient",
                reason: format!("entry {v:e} exceeds {MAX_GRADIENT_ENTRY:e} in magnitude"),
            });
        }
    }
    Ok(())
}

/// Rejects a tensor with a NaN or infinite entry: [`CoreError::NonFinite`] with the
/// given `id` (e.g. `strain`, `tensor`).
fn check_finite<'a>(
    entries: impl IntoIterator<Item = &'a f64>,
    id: &str,
    field: &'static str,
) -> Result<(), CoreError> {
    if entries.into_iter().all(|v| v.is_finite()) {
        Ok(())
    } else {
        Err(CoreError::NonFinite {
            id: id.into(),
            field,
        })
    }
}

fn arr2(m: &nalgebra::Matrix2<f64>) -> Mat2 {
    [[m[(0, 0)], m[(0, 1)]], [m[(1, 0)], m[(1, 1)]]]
}

fn arr3(m: &nalgebra::Matrix3<f64>) -> Mat3 {
    [0, 1, 2].map(|i| [m[(i, 0)], m[(i, 1)], m[(i, 2)]])
}
