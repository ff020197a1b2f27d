//! The aggregate kinematics of one displacement gradient: [`analyze2`], [`analyze3`].

use nalgebra::{Matrix2, Matrix3};
use serde::Serialize;

use super::adequacy::{Adequacy, adequacy2_with, adequacy3_with};
use super::finite::{FiniteStrain2, FiniteStrain3, finite2, finite3};
use super::mohr::{Mohr2, Mohr3, mohr2, mohr3};
use super::principal::{
    MaxShear2, MaxShear3, Octahedral, Principal2, Principal3, max_shear2, max_shear3, octahedral,
    principal2, principal3, von_mises_equivalent,
};
use super::small::{
    Invariants, Strain2, Strain3, deviator3, embed2, invariants3, rotation_angle2,
    rotation_vector3, small_strain, spin, volumetric,
};
use super::{KinematicsOptions, Mat2, Mat3, arr2, arr3, validate_gradient};
use crate::CoreError;

/// Everything Kinema derives from one 2D displacement gradient.
///
/// Strain dimensionless, angles radians counter-clockwise from +x, matrices
/// row-major `[row][column]`. Octahedral, von Mises, deviator and invariants use the
/// plane-strain embedding `ε_zz = ε_xz = ε_yz = 0`; principal, maximum shear and Mohr
/// values are in-plane.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Kinematics2 {
    /// The input gradient `G[i][j] = ∂u_i/∂x_j`.
    pub gradient: Mat2,
    /// Small strain components (tensor `exy` and engineering `gxy`).
    pub strain: Strain2,
    /// Small strain tensor `ε = (G+Gᵀ)/2`.
    pub strain_tensor: Mat2,
    /// Small rotation tensor `W = (G−Gᵀ)/2`.
    pub spin: Mat2,
    /// Small rotation `ω = (G[1][0] − G[0][1])/2`, radians, counter-clockwise positive.
    pub rotation: f64,
    /// Volumetric (areal) strain `εxx + εyy`.
    pub volumetric: f64,
    /// Deviator `ε − (I1/3)·I` of the embedded 3×3 tensor (`e′_zz = −I1/3`).
    pub deviator: Mat3,
    /// Invariants of the embedded 3×3 tensor (`I3 = 0` by the embedding).
    pub invariants: Invariants,
    /// In-plane principal strains and directions.
    pub principal: Principal2,
    /// In-plane maximum shear.
    pub max_shear: MaxShear2,
    /// Octahedral strains of the embedded tensor.
    pub octahedral: Octahedral,
    /// von Mises equivalent strain `√(2/3 e′:e′)` of the embedded tensor.
    pub von_mises: f64,
    /// Mohr's circle.
    pub mohr: Mohr2,
    /// Finite-strain measures.
    pub finite: FiniteStrain2,
    /// Small-strain adequacy at the requested resolution.
    pub adequacy: Adequacy,
}

/// Everything Kinema derives from one 3D displacement gradient.
///
/// Strain dimensionless, angles radians, right-hand rule, matrices row-major.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Kinematics3 {
    /// The input gradient `G[i][j] = ∂u_i/∂x_j`.
    pub gradient: Mat3,
    /// Small strain components (tensor `e..` and engineering `g..`).
    pub strain: Strain3,
    /// Small strain tensor `ε = (G+Gᵀ)/2`.
    pub strain_tensor: Mat3,
    /// Small rotation tensor `W = (G−Gᵀ)/2`.
    pub spin: Mat3,
    /// Small rotation vector `w = curl(u)/2`, radians.
    pub rotation_vector: [f64; 3],
    /// Volumetric strain `tr ε`.
    pub volumetric: f64,
    /// Deviator `ε − (I1/3)·I`.
    pub deviator: Mat3,
    /// Invariants.
    pub invariants: Invariants,
    /// Principal strains and the well-defined directions.
    pub principal: Principal3,
    /// Maximum shear.
    pub max_shear: MaxShear3,
    /// Octahedral strains.
    pub octahedral: Octahedral,
    /// von Mises equivalent strain `√(2/3 e′:e′)`.
    pub von_mises: f64,
    /// The three Mohr circles.
    pub mohr: Mohr3,
    /// Finite-strain measures.
    pub finite: FiniteStrain3,
    /// Small-strain adequacy at the requested resolution.
    pub adequacy: Adequacy,
}

/// Analyses one 2D displacement gradient.
///
/// # Errors
/// [`CoreError::NonFinite`] (id `gradient`) for NaN/infinite entries;
/// [`CoreError::InvalidParameter`] for bad options, entries beyond
/// [`super::MAX_GRADIENT_ENTRY`] or an inadmissible `J = det F`.
pub fn analyze2(g: &Matrix2<f64>, opts: &KinematicsOptions) -> Result<Kinematics2, CoreError> {
    opts.validate()?;
    validate_gradient(g.iter())?;
    let eps = small_strain(g);
    let eps3 = embed2(&eps);
    let principal = principal2(&eps, opts.degenerate_tol)?;
    let finite = finite2(g)?;
    let adequacy = adequacy2_with(g, &finite.principal_stretches, opts.strain_resolution);
    Ok(Kinematics2 {
        gradient: arr2(g),
        strain: Strain2::from_tensor(&eps),
        strain_tensor: arr2(&eps),
        spin: arr2(&spin(g)),
        rotation: rotation_angle2(g),
        volumetric: volumetric(&eps),
        deviator: arr3(&deviator3(&eps3)),
        invariants: invariants3(&eps3),
        max_shear: max_shear2(&principal),
        principal,
        octahedral: octahedral(&eps3),
        von_mises: von_mises_equivalent(&eps3),
        mohr: mohr2(&eps, opts.degenerate_tol)?,
        finite,
        adequacy,
    })
}

/// Analyses one 3D displacement gradient.
///
/// # Errors
/// As [`analyze2`], plus [`CoreError::EigenNoConvergence`] from the bounded solver.
pub fn analyze3(g: &Matrix3<f64>, opts: &KinematicsOptions) -> Result<Kinematics3, CoreError> {
    opts.validate()?;
    validate_gradient(g.iter())?;
    let eps = small_strain(g);
    let principal = principal3(&eps, opts.degenerate_tol)?;
    let finite = finite3(g)?;
    let adequacy = adequacy3_with(g, &finite.principal_stretches, opts.strain_resolution)?;
    Ok(Kinematics3 {
        gradient: arr3(g),
        strain: Strain3::from_tensor(&eps),
        strain_tensor: arr3(&eps),
        spin: arr3(&spin(g)),
        rotation_vector: rotation_vector3(g),
        volumetric: volumetric(&eps),
        deviator: arr3(&deviator3(&eps)),
        invariants: invariants3(&eps),
        max_shear: max_shear3(&principal),
        mohr: mohr3(&principal),
        principal,
        octahedral: octahedral(&eps),
        von_mises: von_mises_equivalent(&eps),
        finite,
        adequacy,
    })
}
