//! Covariance of the gradient of a constant-strain element (triangle in 2D,
//! tetrahedron in 3D) by linear propagation through the shape functions.
//!
//! With linear shape functions `N_k` (k = 0…D) the gradient is
//! `G = Σ_k u_k ⊗ ∇N_k`, i.e. `G_ij = Σ_k u_k,i · ∂N_k/∂x_j`, and for mutually independent
//! vertices (propagation of variance, Ghilani & Wolf, *Adjustment Computations*, ch. 6)
//!
//! ```text
//! cov(G_ij, G_lm) = Σ_k cov(u_k,i, u_k,l) · ∂N_k/∂x_j · ∂N_k/∂x_m
//! ```
//!
//! The shape-function gradients come from the edge matrix `E = [x_1 − x_0, …, x_D − x_0]`
//! (columns, metres): `∂N_k/∂x_j = (E⁻¹)_{k−1, j}` for k ≥ 1 and `∇N_0 = −Σ_{k≥1} ∇N_k`
//! (1/m). Result: the `D²×D²` covariance of `vec(G)` taken row by row
//! (`G[0][0], G[0][1], …`), dimensionless, the layout of
//! [`crate::estimate::FitStats::cov_gradient`].

use nalgebra::{DMatrix, SMatrix};

use super::covariance::check_covariance_s;
use crate::error::{CoreError, Result};
use crate::points::PointSet;

/// Relative determinant below which an element counts as degenerate:
/// `|det E| ≤ 1e-12·(Σ|e_k|²)^(D/2)` (the threshold of [`crate::estimate::elements`]).
const DEGENERATE_REL: f64 = 1e-12;

/// Covariance of `vec(G)` (row-major, `D²×D²`, dimensionless) of one constant-strain
/// element from its `D+1` reference vertices (metres) and the `D+1` covariances of the
/// vertex displacements (m², independent vertices). Build `vertex_cov` from
/// [`crate::Point::sigma`] with [`super::covariance_from_sigma`].
///
/// # Errors
/// [`CoreError::TooFewPoints`] when `vertices` does not hold exactly `D+1` vertices;
/// [`CoreError::InvalidParameter`] (`vertex_cov`) when the counts differ or `D` is not 2
/// or 3; [`CoreError::NonFinite`] for a non-finite coordinate;
/// [`CoreError::InvalidCovariance`] for a bad vertex covariance;
/// [`CoreError::DegenerateElement`] for a zero-area (zero-volume) element.
pub fn element_gradient_covariance<const D: usize>(
    vertices: &[[f64; D]],
    vertex_cov: &[SMatrix<f64, D, D>],
) -> Result<DMatrix<f64>> {
    let b = shape_gradients(vertices)?;
    if vertex_cov.len() != D + 1 {
        return Err(CoreError::InvalidParameter {
            name: "vertex_cov",
            reason: format!(
                "{} vertex covariances for an element of {} vertices",
                vertex_cov.len(),
                D + 1
            ),
        });
    }
    for (k, c) in vertex_cov.iter().enumerate() {
        check_covariance_s(&format!("vertex_cov[{k}]"), c)?;
    }
    let n = D * D;
    let mut cov = DMatrix::<f64>::zeros(n, n);
    for (k, c) in vertex_cov.iter().enumerate() {
        for i in 0..D {
            for j in 0..D {
                for l in 0..D {
                    for m in 0..D {
                        cov[(i * D + j, l * D + m)] += c[(i, l)] * b[k][j] * b[k][m];
                    }
                }
            }
        }
    }
    Ok(cov)
}

/// Covariance of `vec(G)` (row-major, `D²×D²`, dimensionless) of the constant-strain
/// element whose `D+1` vertices are `members` (indices into `points`), from the precision
/// each vertex states: its full covariance [`crate::Point::cov`] or `diag(σ²)` from
/// [`crate::Point::sigma`] (see [`crate::Point::covariance`]). The vertices are taken
/// as mutually independent, as in [`element_gradient_covariance`].
///
/// Returns `Ok(None)` when some vertex states no precision (nothing to propagate).
///
/// # Errors
/// [`CoreError::TooFewPoints`] when `members` does not hold exactly `D+1` indices;
/// [`CoreError::InvalidParameter`] (`members`) for an index outside `points` or a
/// repeated one; and the errors of [`element_gradient_covariance`] (degenerate element).
pub fn element_gradient_covariance_from_points<const D: usize>(
    points: &PointSet<D>,
    members: &[usize],
) -> Result<Option<DMatrix<f64>>> {
    if members.len() != D + 1 {
        return Err(CoreError::TooFewPoints {
            context: "element".into(),
            needed: D + 1,
            got: members.len(),
        });
    }
    let pts = points.points();
    for (q, &m) in members.iter().enumerate() {
        if m >= pts.len() {
            return Err(CoreError::InvalidParameter {
                name: "members",
                reason: format!(
                    "element vertex index {m} is outside the point set of {} points",
                    pts.len()
                ),
            });
        }
        if members[..q].contains(&m) {
            return Err(CoreError::InvalidParameter {
                name: "members",
                reason: format!("element repeats point `{}`", pts[m].id),
            });
        }
    }
    let mut cov = Vec::with_capacity(D + 1);
    for &m in members {
        match pts[m].covariance() {
            Some(c) => cov.push(c),
            None => return Ok(None),
        }
    }
    let vertices: Vec<[f64; D]> = members.iter().map(|&m| pts[m].x).collect();
    element_gradient_covariance(&vertices, &cov).map(Some)
}

/// Shape-function gradients `∇N_k` (1/m) of the `D+1` vertices of a simplex.
///
/// # Errors
/// As [`element_gradient_covariance`] for the vertices.
pub fn shape_gradients<const D: usize>(vertices: &[[f64; D]]) -> Result<Vec<[f64; D]>> {
    if D != 2 && D != 3 {
        return Err(CoreError::InvalidParameter {
            name: "dimension",
            reason: format!("{D} is not 2 or 3"),
        });
    }
    if vertices.len() != D + 1 {
        return Err(CoreError::TooFewPoints {
            context: "element".into(),
            needed: D + 1,
            got: vertices.len(),
        });
    }
    if vertices.iter().flatten().any(|v| !v.is_finite()) {
        return Err(CoreError::NonFinite {
            id: "element".into(),
            field: "vertex coordinate",
        });
    }
    let x0 = vertices[0];
    let e = DMatrix::<f64>::from_fn(D, D, |r, c| vertices[c + 1][r] - x0[r]);
    let det = e.determinant();
    let scale = e.iter().map(|v| v * v).sum::<f64>().powf(D as f64 / 2.0);
    let what = if D == 2 { "area" } else { "volume" };
    if !det.is_finite() || det.abs() <= DEGENERATE_REL * scale {
        return Err(CoreError::DegenerateElement {
            element: "element".into(),
            reason: format!(
                "zero {what}: |det| = {:.3e} is at most 1e-12 × {scale:.3e}",
                det.abs()
            ),
        });
    }
    let inv = e
        .try_inverse()
        .ok_or_else(|| CoreError::DegenerateElement {
            element: "element".into(),
            reason: format!("edge matrix not invertible (det = {det:.3e})"),
        })?;
    let mut b = vec![[0.0; D]; D + 1];
    for k in 1..=D {
        for j in 0..D {
            b[k][j] = inv[(k - 1, j)];
            b[0][j] -= inv[(k - 1, j)];
        }
    }
    Ok(b)
}
