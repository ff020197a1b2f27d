//! Principal strains and directions, maximum shear with its planes, octahedral shear
//! and the von Mises equivalent strain.
//!
//! Definitions (strain dimensionless, angles radians):
//! - Maximum shear: tensor shear `(e1 − e_min)/2`, engineering shear `e1 − e_min`; it
//!   acts on the planes whose normals bisect the extreme principal directions
//!   (`(n1 ± n_min)/√2`, i.e. at ±45° from `n1`). The normal strain on those planes is
//!   `(e1 + e_min)/2`. In 2D this is the *in-plane* maximum.
//! - Octahedral: normal strain `ε_oct = I1/3`; engineering shear
//!   `γ_oct = (2/3)·√((e1−e2)² + (e2−e3)² + (e3−e1)²) = √(8/3·J2)`; tensor shear `γ_oct/2`.
//! - von Mises equivalent strain: `ε_eq = √(2/3 · e′:e′) = √(4/3·J2)
//!   = (√2/3)·√((e1−e2)² + (e2−e3)² + (e3−e1)²)`, with `e′` the deviator. It equals
//!   the axial strain of an isochoric uniaxial stretch `diag(ε, −ε/2, −ε/2)`, and
//!   `ε_eq = γ_oct/√2`.
//! - The octahedral and von Mises functions are plain arithmetic: NaN in gives NaN
//!   out (the aggregate [`super::analyze2`] / [`super::analyze3`] validates first).
//! - 2D states use the plane-strain embedding (`ε_zz = 0`, see [`super::small::embed2`])
//!   for octahedral and von Mises values.

use nalgebra::{Matrix2, Matrix3};
use serde::Serialize;
use std::f64::consts::FRAC_1_SQRT_2;

use super::eigen::{Degeneracy3, sym_eigen2, sym_eigen3};
use super::small::invariants3;
use crate::CoreError;

/// In-plane principal strains, descending, with directions unless isotropic.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Principal2 {
    /// Major principal strain `e1 ≥ e2`.
    pub e1: f64,
    /// Minor principal strain.
    pub e2: f64,
    /// Unit direction of `e1`, `(cos θ1, sin θ1)`; `None` when isotropic.
    pub n1: Option<[f64; 2]>,
    /// Unit direction of `e2` (`n1` turned +90°); `None` when isotropic.
    pub n2: Option<[f64; 2]>,
    /// Angle of `n1` from +x, counter-clockwise, radians in `(−π/2, π/2]`; it solves
    /// `tan 2θ = 2εxy/(εxx−εyy) = γxy/(εxx−εyy)`. `None` when isotropic.
    pub theta1: Option<f64>,
    /// True when `e1 − e2 ≤ degenerate_tol`: every direction is principal.
    pub isotropic: bool,
}

/// Principal strains of a symmetric 2×2 strain tensor (closed form).
///
/// # Errors
/// [`CoreError::NonFinite`] (id `tensor`) for a NaN or infinite entry.
pub fn principal2(eps: &Matrix2<f64>, degenerate_tol: f64) -> Result<Principal2, CoreError> {
    let e = sym_eigen2(eps, degenerate_tol)?;
    Ok(Principal2 {
        e1: e.values[0],
        e2: e.values[1],
        n1: e.directions.map(|d| d[0]),
        n2: e.directions.map(|d| d[1]),
        theta1: e.angle,
        isotropic: e.degenerate,
    })
}

/// 3D principal strains, descending, with the directions that are well defined.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Principal3 {
    /// Major principal strain.
    pub e1: f64,
    /// Intermediate principal strain.
    pub e2: f64,
    /// Minor principal strain.
    pub e3: f64,
    /// Unit direction of `e1`; `None` when `e1` coincides with `e2`.
    pub n1: Option<[f64; 3]>,
    /// Unit direction of `e2`; `None` when `e2` coincides with `e1` or `e3`.
    pub n2: Option<[f64; 3]>,
    /// Unit direction of `e3`; `None` when `e3` coincides with `e2`.
    pub n3: Option<[f64; 3]>,
    /// Which values coincide within `degenerate_tol`.
    pub degeneracy: Degeneracy3,
    /// True when any two neighbouring values coincide.
    pub degenerate: bool,
    /// True when all three coincide.
    pub isotropic: bool,
}

/// Principal strains of a symmetric 3×3 strain tensor.
///
/// Sign convention of the directions: see [`super::eigen`].
///
/// # Errors
/// [`CoreError::EigenNoConvergence`] if the bounded solver fails;
/// [`CoreError::NonFinite`] (id `tensor`) for a NaN or infinite entry.
pub fn principal3(eps: &Matrix3<f64>, degenerate_tol: f64) -> Result<Principal3, CoreError> {
    let e = sym_eigen3(eps, degenerate_tol)?;
    Ok(Principal3 {
        e1: e.values[0],
        e2: e.values[1],
        e3: e.values[2],
        n1: e.directions[0],
        n2: e.directions[1],
        n3: e.directions[2],
        degeneracy: e.degeneracy,
        degenerate: e.degeneracy != Degeneracy3::Distinct,
        isotropic: e.degeneracy == Degeneracy3::Isotropic,
    })
}

/// In-plane maximum shear strain and its planes.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MaxShear2 {
    /// Maximum in-plane tensor shear strain `(e1 − e2)/2` (= Mohr radius).
    pub tensor_shear: f64,
    /// Maximum in-plane engineering shear strain `γmax = e1 − e2` (radians).
    pub engineering_shear: f64,
    /// Normal strain on the planes of maximum shear, `(e1 + e2)/2`.
    pub normal_strain: f64,
    /// Unit normals of the two planes, at `θ1 + 45°` and `θ1 − 45°` from +x
    /// (`(n1+n2)/√2`, `(n1−n2)/√2`); `None` when isotropic (no shear on any plane).
    pub plane_normals: Option<[[f64; 2]; 2]>,
}

/// Maximum in-plane shear from the principal strains.
pub fn max_shear2(p: &Principal2) -> MaxShear2 {
    let plane_normals = match (p.n1, p.n2) {
        (Some(a), Some(b)) => Some([
            [(a[0] + b[0]) * FRAC_1_SQRT_2, (a[1] + b[1]) * FRAC_1_SQRT_2],
            [(a[0] - b[0]) * FRAC_1_SQRT_2, (a[1] - b[1]) * FRAC_1_SQRT_2],
        ]),
        _ => None,
    };
    MaxShear2 {
        tensor_shear: 0.5 * (p.e1 - p.e2),
        engineering_shear: p.e1 - p.e2,
        normal_strain: 0.5 * (p.e1 + p.e2),
        plane_normals,
    }
}

/// 3D maximum shear strain (between the major and the minor principal directions).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MaxShear3 {
    /// Maximum tensor shear strain `(e1 − e3)/2`.
    pub tensor_shear: f64,
    /// Maximum engineering shear strain `γmax = e1 − e3` (radians).
    pub engineering_shear: f64,
    /// Normal strain on the planes of maximum shear, `(e1 + e3)/2`.
    pub normal_strain: f64,
    /// Unit normals `(n1 + n3)/√2` and `(n1 − n3)/√2` of the two planes. `None` when
    /// any two principal values coincide: then `n1` or `n3` is not unique and the planes
    /// of maximum shear form a family (a cone, or every plane when isotropic).
    pub plane_normals: Option<[[f64; 3]; 2]>,
}

/// 3D maximum shear from the principal strains.
pub fn max_shear3(p: &Principal3) -> MaxShear3 {
    let plane_normals = match (p.degenerate, p.n1, p.n3) {
        (false, Some(a), Some(c)) => {
            let plus = [0, 1, 2].map(|i| (a[i] + c[i]) * FRAC_1_SQRT_2);
            let minus = [0, 1, 2].map(|i| (a[i] - c[i]) * FRAC_1_SQRT_2);
            Some([plus, minus])
        }
        _ => None,
    };
    MaxShear3 {
        tensor_shear: 0.5 * (p.e1 - p.e3),
        engineering_shear: p.e1 - p.e3,
        normal_strain: 0.5 * (p.e1 + p.e3),
        plane_normals,
    }
}

/// Octahedral normal and shear strain (definitions in the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Octahedral {
    /// Octahedral normal strain `I1/3`.
    pub normal_strain: f64,
    /// Octahedral tensor shear strain `γ_oct/2 = √(2/3·J2)`.
    pub tensor_shear: f64,
    /// Octahedral engineering shear strain `γ_oct = √(8/3·J2)
    /// = (2/3)·√((e1−e2)² + (e2−e3)² + (e3−e1)²)` (radians).
    pub engineering_shear: f64,
}

/// Octahedral strains of a symmetric 3×3 strain tensor.
pub fn octahedral(eps: &Matrix3<f64>) -> Octahedral {
    let inv = invariants3(eps);
    let j2 = inv.j2.max(0.0);
    let gamma = (8.0 / 3.0 * j2).sqrt();
    Octahedral {
        normal_strain: inv.i1 / 3.0,
        tensor_shear: 0.5 * gamma,
        engineering_shear: gamma,
    }
}

/// von Mises equivalent strain `ε_eq = √(2/3 · e′:e′)` of a symmetric 3×3 strain
/// (dimensionless; definition in the module doc).
pub fn von_mises_equivalent(eps: &Matrix3<f64>) -> f64 {
    (4.0 / 3.0 * invariants3(eps).j2.max(0.0)).sqrt()
}
