//! Finite (large) deformation measures of one displacement gradient.
//!
//! - Deformation gradient `F = I + G`, Jacobian `J = det F` (volume ratio).
//! - Green–Lagrange strain `E = ½(FᵀF − I) = ½(G + Gᵀ + GᵀG)` (reference frame).
//! - Euler–Almansi strain `e = ½(I − (FFᵀ)⁻¹) = F⁻ᵀ·E·F⁻¹` (current frame).
//! - Polar decomposition `F = R·U = V·R`, `R` proper orthogonal, `U`, `V` symmetric
//!   positive definite (right and left stretch). `U = √(FᵀF)`, `V = R·U·Rᵀ`.
//! - Principal stretches `λ1 ≥ λ2 (≥ λ3)`: eigenvalues of `U`, `λi = √(1 + 2·Ei)`.
//! - Hencky (logarithmic) strain `ln U = Σ ln λi · Ni⊗Ni` (Lagrangian), principal values
//!   `ln λi` computed as `½·ln_1p(2·Ei)` to keep precision at micro-strain level.
//! - Finite rotation: 2D angle of `R`, `θ = atan2(F[1][0] − F[0][1], F[0][0] + F[1][1])`,
//!   counter-clockwise positive; 3D axis–angle of `R` (right-hand rule).
//!
//! All strains dimensionless, stretches dimensionless ratios, angles radians.

use nalgebra::{Matrix2, Matrix3, Rotation3, UnitQuaternion, Vector3};
use serde::Serialize;

use super::eigen::{sym_fn2, sym_spectral2, sym_spectral3};
use super::{Mat2, Mat3, arr2, arr3};
use crate::CoreError;

/// Smallest admissible `J = det F`. A gradient with `J` at or below this value
/// collapses or turns the material inside out and is rejected.
pub const MIN_JACOBIAN: f64 = 1e-6;

/// A rotation angle below this (radians) has no meaningful axis (`rotation_axis = None`).
pub const AXIS_ANGLE_FLOOR: f64 = 1e-12;

/// Finite-strain block of a 2D gradient. Matrices are row-major `[row][column]`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FiniteStrain2 {
    /// Deformation gradient `F = I + G`.
    pub deformation_gradient: Mat2,
    /// `J = det F` (area ratio in 2D).
    pub jacobian: f64,
    /// Green–Lagrange strain `E`.
    pub green_lagrange: Mat2,
    /// Euler–Almansi strain `e`.
    pub euler_almansi: Mat2,
    /// Rotation `R` of the polar decomposition.
    pub rotation: Mat2,
    /// Right stretch `U` (`F = R·U`).
    pub right_stretch: Mat2,
    /// Left stretch `V` (`F = V·R`).
    pub left_stretch: Mat2,
    /// Principal stretches, descending.
    pub principal_stretches: [f64; 2],
    /// Hencky strain `ln U`.
    pub hencky: Mat2,
    /// Principal Hencky strains `ln λi`, descending.
    pub hencky_principal: [f64; 2],
    /// Finite rotation angle of `R`, radians in `(−π, π]`, counter-clockwise positive.
    pub rotation_angle: f64,
}

/// Finite-strain block of a 3D gradient. Matrices are row-major `[row][column]`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FiniteStrain3 {
    /// Deformation gradient `F = I + G`.
    pub deformation_gradient: Mat3,
    /// `J = det F` (volume ratio).
    pub jacobian: f64,
    /// Green–Lagrange strain `E`.
    pub green_lagrange: Mat3,
    /// Euler–Almansi strain `e`.
    pub euler_almansi: Mat3,
    /// Rotation `R` of the polar decomposition.
    pub rotation: Mat3,
    /// Right stretch `U` (`F = R·U`).
    pub right_stretch: Mat3,
    /// Left stretch `V` (`F = V·R`).
    pub left_stretch: Mat3,
    /// Principal stretches, descending.
    pub principal_stretches: [f64; 3],
    /// Hencky strain `ln U`.
    pub hencky: Mat3,
    /// Principal Hencky strains `ln λi`, descending.
    pub hencky_principal: [f64; 3],
    /// Finite rotation angle of `R`, radians in `[0, π]`.
    pub rotation_angle: f64,
    /// Unit rotation axis (right-hand rule); `None` when the angle is below
    /// [`AXIS_ANGLE_FLOOR`].
    pub rotation_axis: Option<[f64; 3]>,
    /// Rotation vector `axis · angle`, radians.
    pub rotation_vector: [f64; 3],
}

fn check_jacobian(j: f64) -> Result<(), CoreError> {
    if j > MIN_JACOBIAN {
        Ok(())
    } else {
        Err(CoreError::InvalidParameter {
            name: "gradient",
            reason: format!(
                "F = I + G has J = det F = {j:.6e} <= {MIN_JACOBIAN:e}: the deformation collapses or inverts the material"
            ),
        })
    }
}

fn overflow() -> CoreError {
    CoreError::InvalidParameter {
        name: "gradient",
        reason: "finite-strain measures overflow or F = I + G is numerically singular".into(),
    }
}

fn all_finite<'a>(items: impl IntoIterator<Item = &'a f64>) -> bool {
    items.into_iter().all(|v| v.is_finite())
}

/// Green–Lagrange strain `½(G + Gᵀ + GᵀG)`, accurate for small `G`.
fn green_lagrange<const D: usize>(
    g: &nalgebra::SMatrix<f64, D, D>,
) -> nalgebra::SMatrix<f64, D, D> {
    (g + g.transpose() + g.transpose() * g) * 0.5
}

/// Finite-strain measures of a 2D displacement gradient.
///
/// # Errors
/// [`CoreError::InvalidParameter`] (`gradient`) when `J ≤` [`MIN_JACOBIAN`] or a
/// derived value is not finite.
pub fn finite2(g: &Matrix2<f64>) -> Result<FiniteStrain2, CoreError> {
    let f = Matrix2::identity() + g;
    let j = f.determinant();
    check_jacobian(j)?;
    let theta = (f[(1, 0)] - f[(0, 1)]).atan2(f[(0, 0)] + f[(1, 1)]);
    let (s, c) = theta.sin_cos();
    let r = Matrix2::new(c, -s, s, c);
    let sym = |m: Matrix2<f64>| (m + m.transpose()) * 0.5;
    // With this θ, RᵀF is symmetric and positive definite whenever det F > 0.
    let u = sym(r.transpose() * f);
    let v = sym(f * r.transpose());
    let e_gl = green_lagrange(g);
    let f_inv = f.try_inverse().ok_or_else(overflow)?;
    let e_ea = sym(f_inv.transpose() * e_gl * f_inv);
    let (ev, _) = sym_spectral2(&e_gl);
    let stretch = |x: f64| (1.0 + 2.0 * x).sqrt();
    let log_stretch = |x: f64| 0.5 * (2.0 * x).ln_1p();
    let hencky = sym_fn2(&e_gl, log_stretch);
    let out = FiniteStrain2 {
        deformation_gradient: arr2(&f),
        jacobian: j,
        green_lagrange: arr2(&e_gl),
        euler_almansi: arr2(&e_ea),
        rotation: arr2(&r),
        right_stretch: arr2(&u),
        left_stretch: arr2(&v),
        principal_stretches: ev.map(stretch),
        hencky: arr2(&hencky),
        hencky_principal: ev.map(log_stretch),
        rotation_angle: theta,
    };
    let ok = all_finite(out.euler_almansi.iter().flatten())
        && all_finite(out.right_stretch.iter().flatten())
        && all_finite(out.left_stretch.iter().flatten())
        && all_finite(out.hencky.iter().flatten())
        && all_finite(&out.principal_stretches)
        && all_finite(&out.hencky_principal)
        && out.principal_stretches[1] > 0.0;
    if ok { Ok(out) } else { Err(overflow()) }
}

/// Finite-strain measures of a 3D displacement gradient.
///
/// # Errors
/// [`CoreError::InvalidParameter`] (`gradient`) when `J ≤` [`MIN_JACOBIAN`] or a
/// derived value is not finite; [`CoreError::EigenNoConvergence`] from the solver.
pub fn finite3(g: &Matrix3<f64>) -> Result<FiniteStrain3, CoreError> {
    let f = Matrix3::identity() + g;
    let j = f.determinant();
    check_jacobian(j)?;
    let sym = |m: Matrix3<f64>| (m + m.transpose()) * 0.5;
    let e_gl = sym(green_lagrange(g));
    // C = I + 2E shares E's eigenvectors; λi = √(1 + 2Ei).
    let (ev, q) = sym_spectral3(&e_gl)?;
    if ev.iter().any(|&x| 1.0 + 2.0 * x <= 0.0) {
        return Err(overflow());
    }
    let lam = ev.map(|x| (1.0 + 2.0 * x).sqrt());
    let logs = ev.map(|x| 0.5 * (2.0 * x).ln_1p());
    let spectral = |d: [f64; 3]| q * Matrix3::from_diagonal(&Vector3::from(d)) * q.transpose();
    let u = sym(spectral(lam));
    let u_inv = spectral(lam.map(|l| 1.0 / l));
    let r = f * u_inv;
    let v = sym(r * u * r.transpose());
    let hencky = sym(spectral(logs));
    let f_inv = f.try_inverse().ok_or_else(overflow)?;
    let e_ea = sym(f_inv.transpose() * e_gl * f_inv);
    let quat = UnitQuaternion::from_rotation_matrix(&Rotation3::from_matrix_unchecked(r));
    let angle = quat.angle();
    let axis = if angle >= AXIS_ANGLE_FLOOR {
        quat.axis().map(|a| [a[0], a[1], a[2]])
    } else {
        None
    };
    let rotation_vector = axis.map_or([0.0; 3], |a| a.map(|c| c * angle));
    let out = FiniteStrain3 {
        deformation_gradient: arr3(&f),
        jacobian: j,
        green_lagrange: arr3(&e_gl),
        euler_almansi: arr3(&e_ea),
        rotation: arr3(&r),
        right_stretch: arr3(&u),
        left_stretch: arr3(&v),
        principal_stretches: lam,
        hencky: arr3(&hencky),
        hencky_principal: logs,
        rotation_angle: angle,
        rotation_axis: axis,
        rotation_vector,
    };
    let ok = all_finite(out.euler_almansi.iter().flatten())
        && all_finite(out.rotation.iter().flatten())
        && all_finite(out.left_stretch.iter().flatten())
        && all_finite(&out.rotation_vector)
        && angle.is_finite();
    if ok { Ok(out) } else { Err(overflow()) }
}
