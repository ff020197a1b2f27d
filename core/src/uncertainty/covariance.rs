//! Covariance matrices of point displacements: from per-axis standard deviations, from
//! two epochs, and the checks every covariance must pass.
//!
//! Units: covariances of displacements in m², standard deviations in m.
//!
//! A displacement formed from two epochs, `u = x_cur − x_ref`, has the covariance
//! (propagation of variance for a difference, Ghilani & Wolf, *Adjustment Computations*,
//! ch. 6)
//!
//! ```text
//! C_u = C_ref + C_cur − C_rc − C_rcᵀ,     C_rc = cov(x_ref, x_cur)
//! ```
//!
//! where the cross-covariance `C_rc` is zero for independent epochs.

use nalgebra::{DMatrix, SMatrix};

use crate::error::{CoreError, Result};

/// Relative tolerance of the symmetry check: `|C_ij − C_ji| ≤ SYM_REL · max|C|`.
pub const SYM_REL: f64 = 1e-9;

/// Relative tolerance of the semi-definiteness check: the smallest eigenvalue must be
/// at least `−PSD_REL · max(|λ|)`; smaller negative values are rounding, larger are not.
pub const PSD_REL: f64 = 1e-9;

/// Iteration cap of the bounded symmetric eigen-solver used by the checks.
const EIGEN_MAX_ITER: usize = 1000;

/// Diagonal covariance `diag(σ_1², …, σ_D²)` (m²) from per-axis standard deviations
/// `sigma` (m) of one point, e.g. [`crate::Point::sigma`].
///
/// # Errors
/// [`CoreError::InvalidParameter`] (`sigma`) naming the axis and value when a standard
/// deviation is zero, negative or not finite.
pub fn covariance_from_sigma<const D: usize>(sigma: &[f64; D]) -> Result<SMatrix<f64, D, D>> {
    let mut c = SMatrix::<f64, D, D>::zeros();
    for (k, &s) in sigma.iter().enumerate() {
        if !(s.is_finite() && s > 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "sigma",
                reason: format!(
                    "axis {k}: standard deviation must be positive and finite, got {s} m"
                ),
            });
        }
        c[(k, k)] = s * s;
    }
    Ok(c)
}

/// Covariance of a displacement formed from two epochs (m²):
/// `C_ref + C_cur − C_rc − C_rcᵀ`, with `cross = C_rc = cov(x_ref, x_cur)` (`None`:
/// independent epochs).
///
/// # Errors
/// [`CoreError::InvalidCovariance`] naming `cov_ref`, `cov_cur`, `cross` or the result
/// when an entry is not finite, `cov_ref`/`cov_cur` is not symmetric or not positive
/// semi-definite, or the combination is not positive semi-definite (a cross-covariance
/// larger than the epochs allow).
pub fn displacement_covariance<const D: usize>(
    cov_ref: &SMatrix<f64, D, D>,
    cov_cur: &SMatrix<f64, D, D>,
    cross: Option<&SMatrix<f64, D, D>>,
) -> Result<SMatrix<f64, D, D>> {
    check_covariance_s("cov_ref", cov_ref)?;
    check_covariance_s("cov_cur", cov_cur)?;
    let mut c = cov_ref + cov_cur;
    if let Some(x) = cross {
        if let Some((i, j, v)) = first_non_finite(x.iter().copied(), D) {
            return Err(non_finite("cross", i, j, v));
        }
        c -= x + x.transpose();
    }
    check_covariance_s("displacement covariance (C_ref + C_cur − C_rc − C_rcᵀ)", &c)?;
    Ok(c)
}

/// Checks that a fixed-size matrix is a covariance: finite, symmetric (relative
/// tolerance [`SYM_REL`]) and positive semi-definite (relative tolerance [`PSD_REL`]).
///
/// # Errors
/// [`CoreError::InvalidCovariance`] naming `name` and the offending entry or eigenvalue.
pub fn check_covariance_s<const D: usize>(name: &str, c: &SMatrix<f64, D, D>) -> Result<()> {
    check_covariance(name, &DMatrix::from_fn(D, D, |i, j| c[(i, j)]))
}

/// Checks that a square matrix is a covariance: finite, symmetric (relative tolerance
/// [`SYM_REL`]) and positive semi-definite (relative tolerance [`PSD_REL`]).
///
/// # Errors
/// [`CoreError::InvalidCovariance`] naming `name` and the offending entry or eigenvalue.
pub fn check_covariance(name: &str, c: &DMatrix<f64>) -> Result<()> {
    let n = c.nrows();
    if c.ncols() != n {
        return Err(CoreError::InvalidCovariance {
            name: name.to_owned(),
            reason: format!("not square: {}×{}", c.nrows(), c.ncols()),
        });
    }
    // nalgebra stores column-major; report (row, column).
    for j in 0..n {
        for i in 0..n {
            let v = c[(i, j)];
            if !v.is_finite() {
                return Err(non_finite(name, i, j, v));
            }
        }
    }
    let scale = c.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    for i in 0..n {
        for j in (i + 1)..n {
            let (a, b) = (c[(i, j)], c[(j, i)]);
            if (a - b).abs() > SYM_REL * scale {
                return Err(CoreError::InvalidCovariance {
                    name: name.to_owned(),
                    reason: format!("not symmetric: entry ({i},{j}) = {a:e} but ({j},{i}) = {b:e}"),
                });
            }
        }
    }
    for i in 0..n {
        if c[(i, i)] < 0.0 {
            return Err(CoreError::InvalidCovariance {
                name: name.to_owned(),
                reason: format!(
                    "negative variance on the diagonal: entry ({i},{i}) = {:e}",
                    c[(i, i)]
                ),
            });
        }
    }
    if scale == 0.0 {
        return Ok(());
    }
    let sym = (c + c.transpose()) * 0.5;
    let eig = sym
        .try_symmetric_eigen(f64::EPSILON, EIGEN_MAX_ITER)
        .ok_or(CoreError::EigenNoConvergence {
            max_iter: EIGEN_MAX_ITER,
        })?;
    let max_abs = eig.eigenvalues.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
    let min = eig.eigenvalues.iter().fold(f64::INFINITY, |m, &v| m.min(v));
    if min < -PSD_REL * max_abs {
        return Err(CoreError::InvalidCovariance {
            name: name.to_owned(),
            reason: format!(
                "not positive semi-definite: smallest eigenvalue {min:e} (largest magnitude {max_abs:e})"
            ),
        });
    }
    Ok(())
}

fn first_non_finite(
    entries: impl Iterator<Item = f64>,
    nrows: usize,
) -> Option<(usize, usize, f64)> {
    entries
        .enumerate()
        .find(|(_, v)| !v.is_finite())
        .map(|(k, v)| (k % nrows, k / nrows, v))
}

fn non_finite(name: &str, i: usize, j: usize, v: f64) -> CoreError {
    CoreError::InvalidCovariance {
        name: name.to_owned(),
        reason: format!("entry ({i},{j}) = {v} is not finite"),
    }
}
