//! Bounded symmetric eigen-solver for 2×2 and 3×3 strain-like tensors.
//!
//! - 2D: closed form (Mohr's circle): `m = (a+c)/2`, `R = hypot((a−c)/2, b)`,
//!   values `m ± R`, first direction at `θ = ½·atan2(2b, a−c)` from +x. No iteration.
//! - 3D: nalgebra's `try_symmetric_eigen(f64::EPSILON, EIGEN_MAX_ITER)` (implicit QR on
//!   the tridiagonal form, scaled by the largest entry), then an explicit descending sort.
//!   A solver that does not converge gives [`CoreError::EigenNoConvergence`]; nothing
//!   here panics, hangs or returns NaN for finite input.
//!
//! Two values closer than the caller's absolute tolerance are *degenerate*: the
//! directions inside their common eigenspace are arbitrary and are not reported.
//!
//! Direction signs (an eigenvector's sign is otherwise arbitrary):
//! - 2D: the first direction is `(cos θ1, sin θ1)` with `θ1 ∈ (−π/2, π/2]` (so its
//!   x-component is ≥ 0) and the second is the first turned +90° (counter-clockwise).
//! - 3D: each reported direction has its largest-magnitude component positive; when all
//!   three values are distinct, the third is `n1 × n2` so the triad is right-handed.

use nalgebra::{Matrix2, Matrix3, Vector3};
use serde::Serialize;
use std::f64::consts::FRAC_PI_2;

use super::check_finite;
use crate::CoreError;

/// Iteration cap handed to `try_symmetric_eigen` for 3×3 tensors.
///
/// Implicit QR on a 3×3 tridiagonal matrix converges in a handful of sweeps; the cap
/// only guards against a hang on pathological input.
pub const EIGEN_MAX_ITER: usize = 1000;

/// Eigen-decomposition of a symmetric 2×2 tensor, values sorted descending.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SymEigen2 {
    /// Eigenvalues, descending: `values[0] ≥ values[1]`. Same unit as the tensor.
    pub values: [f64; 2],
    /// Unit eigenvectors `[n1, n2]` in the tensor's frame; `None` when degenerate.
    pub directions: Option<[[f64; 2]; 2]>,
    /// Angle of `n1` from +x, counter-clockwise, radians in `(−π/2, π/2]`; `None`
    /// when degenerate.
    pub angle: Option<f64>,
    /// Gap `values[0] − values[1] ≥ 0`.
    pub gap: f64,
    /// True when the gap is at most the tolerance (isotropic 2×2 tensor).
    pub degenerate: bool,
}

/// Which eigenvalues of a 3×3 tensor coincide (within the tolerance).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Degeneracy3 {
    /// All three values are distinct; all three directions are defined.
    Distinct,
    /// `v1 ≈ v2` (and `v3` distinct): only the third direction is defined.
    FirstPair,
    /// `v2 ≈ v3` (and `v1` distinct): only the first direction is defined.
    LastPair,
    /// `v1 ≈ v2 ≈ v3` (both gaps within tolerance): no direction is defined.
    Isotropic,
}

/// Eigen-decomposition of a symmetric 3×3 tensor, values sorted descending.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct SymEigen3 {
    /// Eigenvalues, descending. Same unit as the tensor.
    pub values: [f64; 3],
    /// Unit eigenvectors of `values[i]`; `None` for a value that coincides with a
    /// neighbour (its direction is arbitrary inside a plane or the whole space).
    pub directions: [Option<[f64; 3]>; 3],
    /// Gaps `[v1 − v2, v2 − v3]`, both ≥ 0.
    pub gaps: [f64; 2],
    /// Which values coincide.
    pub degeneracy: Degeneracy3,
}

/// Full spectral decomposition of a symmetric 2×2 tensor, degenerate or not:
/// `(values descending, θ)` with `M = v1·n1n1ᵀ + v2·n2n2ᵀ`, `n1 = (cos θ, sin θ)`,
/// `n2 = (−sin θ, cos θ)`, `θ ∈ (−π/2, π/2]`. For an isotropic tensor θ = 0.
///
/// Only the lower triangle (`m[(1,0)]`) is read for the off-diagonal term.
pub fn sym_spectral2(m: &Matrix2<f64>) -> ([f64; 2], f64) {
    let (a, b, c) = (m[(0, 0)], m[(1, 0)], m[(1, 1)]);
    let mean = 0.5 * (a + c);
    let half_diff = 0.5 * (a - c);
    let radius = half_diff.hypot(b);
    let mut theta = 0.5 * b.atan2(half_diff);
    // atan2 returns (−π, π]; −π (from b = −0.0) halves to −π/2, outside the range.
    if theta <= -FRAC_PI_2 {
        theta += std::f64::consts::PI;
    }
    ([mean + radius, mean - radius], theta)
}

/// Eigen-decomposition of a symmetric 2×2 tensor (closed form).
///
/// `tol` is the absolute tolerance on `v1 − v2` below which the tensor counts as
/// isotropic (no directions). Finite input never gives NaN.
///
/// # Errors
/// [`CoreError::NonFinite`] (id `tensor`) for a NaN or infinite entry.
pub fn sym_eigen2(m: &Matrix2<f64>, tol: f64) -> Result<SymEigen2, CoreError> {
    check_finite(m.iter(), "tensor", "symmetric tensor entry")?;
    let (values, theta) = sym_spectral2(m);
    let gap = (values[0] - values[1]).max(0.0);
    let degenerate = gap <= tol;
    let (s, c) = theta.sin_cos();
    Ok(SymEigen2 {
        values,
        directions: (!degenerate).then_some([[c, s], [-s, c]]),
        angle: (!degenerate).then_some(theta),
        gap,
        degenerate,
    })
}

/// Applies a scalar function spectrally: `f(M) = f(v1)·n1n1ᵀ + f(v2)·n2n2ᵀ`.
///
/// Well defined also for an isotropic tensor (then `f(M) = f(v)·I`).
pub fn sym_fn2(m: &Matrix2<f64>, f: impl Fn(f64) -> f64) -> Matrix2<f64> {
    let (values, theta) = sym_spectral2(m);
    let (s, c) = theta.sin_cos();
    let (f1, f2) = (f(values[0]), f(values[1]));
    let p1 = Matrix2::new(c * c, c * s, c * s, s * s);
    let p2 = Matrix2::new(s * s, -c * s, -c * s, c * c);
    p1 * f1 + p2 * f2
}

/// Full spectral decomposition of a symmetric 3×3 tensor: values descending and the
/// orthonormal matrix whose column `i` is an eigenvector of `values[i]`.
///
/// Inside a repeated eigenspace the columns are an arbitrary orthonormal basis (fine
/// for spectral functions such as `√C` or `ln U`, not for reporting directions: use
/// [`sym_eigen3`] for that).
///
/// # Errors
/// [`CoreError::EigenNoConvergence`] when the bounded solver does not converge, and
/// [`CoreError::NonFinite`] (id `tensor`) for NaN/infinite input.
pub fn sym_spectral3(m: &Matrix3<f64>) -> Result<([f64; 3], Matrix3<f64>), CoreError> {
    check_finite(m.iter(), "tensor", "symmetric tensor entry")?;
    let sym = (m + m.transpose()) * 0.5;
    let eig = sym
        .try_symmetric_eigen(f64::EPSILON, EIGEN_MAX_ITER)
        .ok_or(CoreError::EigenNoConvergence {
            max_iter: EIGEN_MAX_ITER,
        })?;
    let raw = eig.eigenvalues;
    if raw.iter().any(|v| !v.is_finite()) || eig.eigenvectors.iter().any(|v| !v.is_finite()) {
        return Err(CoreError::EigenNoConvergence {
            max_iter: EIGEN_MAX_ITER,
        });
    }
    let mut order = [0usize, 1, 2];
    order.sort_by(|&i, &j| raw[j].total_cmp(&raw[i]));
    let values = [raw[order[0]], raw[order[1]], raw[order[2]]];
    let vectors = Matrix3::from_columns(&[
        eig.eigenvectors.column(order[0]).into_owned(),
        eig.eigenvectors.column(order[1]).into_owned(),
        eig.eigenvectors.column(order[2]).into_owned(),
    ]);
    Ok((values, vectors))
}

/// Applies a scalar function spectrally to a symmetric 3×3 tensor: `Q·f(Λ)·Qᵀ`.
///
/// # Errors
/// As [`sym_spectral3`].
pub fn sym_fn3(m: &Matrix3<f64>, f: impl Fn(f64) -> f64) -> Result<Matrix3<f64>, CoreError> {
    let (values, q) = sym_spectral3(m)?;
    let d = Matrix3::from_diagonal(&Vector3::new(f(values[0]), f(values[1]), f(values[2])));
    Ok(q * d * q.transpose())
}

/// Turns `v` so that its largest-magnitude component is positive.
fn orient(v: Vector3<f64>) -> Vector3<f64> {
    let imax = v.iamax();
    if v[imax] < 0.0 { -v } else { v }
}

/// Eigen-decomposition of a symmetric 3×3 tensor with degeneracy detection.
///
/// `tol` is the absolute tolerance on each gap `v1 − v2`, `v2 − v3`: a gap at or below
/// it makes the two values coincide. When both gaps are within `tol` the tensor is
/// reported isotropic (even if `v1 − v3` slightly exceeds `tol`). The direction of
/// a value that is distinct from both neighbours is still reported (it is well
/// defined); directions inside a repeated eigenspace are not.
///
/// # Errors
/// As [`sym_spectral3`].
pub fn sym_eigen3(m: &Matrix3<f64>, tol: f64) -> Result<SymEigen3, CoreError> {
    let (values, q) = sym_spectral3(m)?;
    let gaps = [
        (values[0] - values[1]).max(0.0),
        (values[1] - values[2]).max(0.0),
    ];
    let (first_eq, last_eq) = (gaps[0] <= tol, gaps[1] <= tol);
    let degeneracy = match (first_eq, last_eq) {
        (false, false) => Degeneracy3::Distinct,
        (true, false) => Degeneracy3::FirstPair,
        (false, true) => Degeneracy3::LastPair,
        (true, true) => Degeneracy3::Isotropic,
    };
    let col = |i: usize| -> Vector3<f64> { orient(q.column(i).into_owned()) };
    let arr = |v: Vector3<f64>| -> [f64; 3] { [v[0], v[1], v[2]] };
    let directions = match degeneracy {
        Degeneracy3::Distinct => {
            let n1 = col(0);
            let n2 = col(1);
            let n3 = n1.cross(&n2).normalize();
            [Some(arr(n1)), Some(arr(n2)), Some(arr(n3))]
        }
        Degeneracy3::FirstPair => [None, None, Some(arr(col(2)))],
        Degeneracy3::LastPair => [Some(arr(col(0))), None, None],
        Degeneracy3::Isotropic => [None, None, None],
    };
    Ok(SymEigen3 {
        values,
        directions,
        gaps,
        degeneracy,
    })
}
