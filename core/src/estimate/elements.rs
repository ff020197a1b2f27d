//! Constant-strain elements supplied by the user: triangles (2D) and tetrahedra (3D).
//!
//! Each element names its vertices by point ID. Over an element the displacement is
//! interpolated linearly, so the gradient is constant and follows in closed form from
//! the edge vectors `e_k = x_k − x_0` and displacement differences `d_k = u_k − u_0`:
//! `G = [d_1 … d_D]·[e_1 … e_D]⁻¹`, the inverse taken through the adjugate
//! (cross products in 3D). No per-element solve is needed.
//!
//! Orientation: a triangle is positive when its vertices run counter-clockwise, a
//! tetrahedron when `e1·(e2×e3) > 0` (right-handed). The gradient does not depend on
//! the vertex order at all; the order matters to callers that draw or export the mesh,
//! hence [`OrientationPolicy`].

use std::collections::HashMap;

use nalgebra::SMatrix;
use serde::{Deserialize, Serialize};

use super::quality::{
    DEGENERATE_TOL, QualityThresholds, TetrahedronQuality, TriangleQuality, edge_scale,
};
use super::{GradientEstimate, RegionKind, Rejected};
use crate::error::{CoreError, Result};
use crate::points::{PointSet, validate_id};

/// One user-supplied element: its ID and the IDs of its vertices
/// (3 for a triangle in 2D, 4 for a tetrahedron in 3D).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ElementSpec {
    /// Element identifier (same rule as point IDs: 1–64 chars of `A-Za-z0-9._-`).
    pub id: String,
    /// Vertex point IDs.
    pub vertices: Vec<String>,
}

impl ElementSpec {
    /// An element from its ID and vertex IDs.
    pub fn new<S: Into<String>>(
        id: impl Into<String>,
        vertices: impl IntoIterator<Item = S>,
    ) -> Self {
        Self {
            id: id.into(),
            vertices: vertices.into_iter().map(Into::into).collect(),
        }
    }
}

/// What to do with a clockwise triangle or a negatively oriented tetrahedron.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum OrientationPolicy {
    /// Reject the input with [`CoreError::InvalidParameter`] naming the element.
    Require,
    /// Swap the last two vertices silently. The gradient is unchanged (it does not
    /// depend on vertex order); `members` of the result lists the corrected order.
    Fix,
}

/// Gradient of every element, after the quality screen.
///
/// Accepted elements come back as [`GradientEstimate`]s (kind
/// [`RegionKind::Triangle`] for `D = 2`, [`RegionKind::Tetrahedron`] for `D = 3`,
/// label = element ID, `members` = vertex indices into `points` in positive order,
/// `translation` = mean vertex displacement), in input order; elements that fail the
/// screen come back as [`Rejected`] with the reason.
///
/// # Errors
/// - [`CoreError::Empty`] when `elements` is empty;
/// - [`CoreError::InvalidId`] for an element ID that breaks the ID rule;
/// - [`CoreError::InvalidParameter`] (`element_id`) for an element ID used twice;
/// - [`CoreError::TooFewPoints`] for fewer than `D + 1` vertices and
///   [`CoreError::InvalidParameter`] (`vertices`) for more;
/// - [`CoreError::UnknownPoint`] for a vertex ID not in `points`;
/// - [`CoreError::DegenerateElement`] for a repeated vertex or zero area / volume
///   (`|det E| ≤ 1e-12·(Σ|e_k|²)^(D/2)`);
/// - [`CoreError::InvalidParameter`] (`vertices`) for a negative orientation under
///   [`OrientationPolicy::Require`];
/// - [`CoreError::InvalidParameter`] for invalid thresholds.
pub fn element_strains<const D: usize>(
    points: &PointSet<D>,
    elements: &[ElementSpec],
    policy: OrientationPolicy,
    thresholds: &QualityThresholds,
) -> Result<(Vec<GradientEstimate<D>>, Vec<Rejected>)> {
    thresholds.validate()?;
    if D != 2 && D != 3 {
        return Err(CoreError::InvalidParameter {
            name: "dimension",
            reason: format!("{D} is not 2 or 3"),
        });
    }
    if elements.is_empty() {
        return Err(CoreError::Empty { what: "elements" });
    }
    let index: HashMap<&str, usize> = points
        .points()
        .iter()
        .enumerate()
        .map(|(i, p)| (p.id.as_str(), i))
        .collect();
    let mut seen: HashMap<&str, usize> = HashMap::with_capacity(elements.len());
    let mut accepted = Vec::with_capacity(elements.len());
    let mut rejected = Vec::new();
    for (pos, el) in elements.iter().enumerate() {
        validate_id(&el.id).map_err(|e| match e {
            CoreError::InvalidId { id, reason } => CoreError::InvalidId {
                id,
                reason: format!("element id: {reason}"),
            },
            other => other,
        })?;
        if let Some(first) = seen.insert(el.id.as_str(), pos) {
            return Err(CoreError::InvalidParameter {
                name: "element_id",
                reason: format!(
                    "element id `{}` is used twice (elements {} and {})",
                    el.id,
                    first + 1,
                    pos + 1
                ),
            });
        }
        let shape = if D == 2 {
            "2D triangle"
        } else {
            "3D tetrahedron"
        };
        let n = el.vertices.len();
        if n < D + 1 {
            return Err(CoreError::TooFewPoints {
                context: format!("element `{}` ({shape})", el.id),
                needed: D + 1,
                got: n,
            });
        }
        if n > D + 1 {
            return Err(CoreError::InvalidParameter {
                name: "vertices",
                reason: format!(
                    "element `{}` has {n} vertices; a {shape} has exactly {}",
                    el.id,
                    D + 1
                ),
            });
        }
        let mut members = Vec::with_capacity(D + 1);
        for v in &el.vertices {
            let Some(&i) = index.get(v.as_str()) else {
                return Err(CoreError::UnknownPoint {
                    context: format!("element `{}`", el.id),
                    id: v.clone(),
                });
            };
            if members.contains(&i) {
                return Err(CoreError::DegenerateElement {
                    element: el.id.clone(),
                    reason: format!("vertex `{v}` appears more than once"),
                });
            }
            members.push(i);
        }
        let pts = points.points();
        let x0 = pts[members[0]].x;
        let u0 = pts[members[0]].u;
        // Columns e_k = x_k − x_0 and d_k = u_k − u_0.
        let e = SMatrix::<f64, D, D>::from_fn(|r, k| pts[members[k + 1]].x[r] - x0[r]);
        let d = SMatrix::<f64, D, D>::from_fn(|r, k| pts[members[k + 1]].u[r] - u0[r]);
        // The edge matrix scaled to unit size by a power of two (exact), so that det and
        // the squared lengths neither overflow nor underflow; E⁻¹ = adj(Eₛ)/(det(Eₛ)·p).
        let p = edge_scale(e.as_slice());
        let es = e / p;
        let (det, adj) = det_adjugate(&es);
        let scale = es.norm_squared().powf(D as f64 / 2.0);
        if det.abs() <= DEGENERATE_TOL * scale || !det.is_finite() {
            let what = if D == 2 { "area" } else { "volume" };
            return Err(CoreError::DegenerateElement {
                element: el.id.clone(),
                reason: format!(
                    "zero {what}: |det E| / (Σ|e_k|²)^(D/2) = {:.3e} is at most 1e-12 \
                     (E = edge vectors from the first vertex)",
                    det.abs() / scale
                ),
            });
        }
        if det < 0.0 {
            match policy {
                OrientationPolicy::Require => {
                    let how = if D == 2 {
                        "vertices run clockwise; list them counter-clockwise"
                    } else {
                        "vertices are left-handed ((x1−x0)·((x2−x0)×(x3−x0)) < 0); \
                         swap two of them"
                    };
                    return Err(CoreError::InvalidParameter {
                        name: "vertices",
                        reason: format!("element `{}`: {how}", el.id),
                    });
                }
                OrientationPolicy::Fix => members.swap(D - 1, D),
            }
        }
        // Vertex coordinates in (possibly corrected) order, on the stack; the third
        // coordinate is 0 in 2D and unused there.
        let mut verts = [[0.0; 3]; 4];
        for (v, &i) in verts.iter_mut().zip(&members) {
            v[..D].copy_from_slice(&pts[i].x);
        }
        let failure = if D == 2 {
            let v2 = |k: usize| [verts[k][0], verts[k][1]];
            let q = TriangleQuality::from_vertices([v2(0), v2(1), v2(2)]);
            thresholds.check_triangle(&q)
        } else {
            let q = TetrahedronQuality::from_vertices(verts);
            thresholds.check_tetrahedron(&q)
        };
        if let Some(f) = failure {
            rejected.push(Rejected {
                label: el.id.clone(),
                members,
                reason: f.to_string(),
            });
            continue;
        }
        let gradient = d * adj / det / p;
        let m = (D + 1) as f64;
        let mut centroid = x0;
        let mut translation = [0.0; D];
        for r in 0..D {
            centroid[r] += e.row(r).sum() / m;
            translation[r] = members.iter().map(|&i| pts[i].u[r]).sum::<f64>() / m;
        }
        accepted.push(GradientEstimate {
            label: el.id.clone(),
            kind: if D == 2 {
                RegionKind::Triangle
            } else {
                RegionKind::Tetrahedron
            },
            members,
            centroid,
            gradient,
            translation: Some(translation),
            fit: None,
        });
    }
    Ok((accepted, rejected))
}

/// Determinant and adjugate of a 2×2 or 3×3 matrix in closed form, so that
/// `E⁻¹ = adj(E)/det(E)`. In 3D the rows of the adjugate are the cross products
/// `e2×e3`, `e3×e1`, `e1×e2` of the columns. Only called with `D ∈ {2, 3}`.
fn det_adjugate<const D: usize>(e: &SMatrix<f64, D, D>) -> (f64, SMatrix<f64, D, D>) {
    if D == 2 {
        let adj = SMatrix::<f64, D, D>::from_fn(|i, j| match (i, j) {
            (0, 0) => e[(1, 1)],
            (0, 1) => -e[(0, 1)],
            (1, 0) => -e[(1, 0)],
            _ => e[(0, 0)],
        });
        (e[(0, 0)] * e[(1, 1)] - e[(0, 1)] * e[(1, 0)], adj)
    } else {
        // adj[i][j] = cofactor C[j][i]; for 3×3 the cyclic form gives the sign itself:
        // C[r][c] = e[r+1][c+1]·e[r+2][c+2] − e[r+1][c+2]·e[r+2][c+1] (indices mod 3).
        let cof = |r: usize, c: usize| {
            let (r1, r2, c1, c2) = ((r + 1) % 3, (r + 2) % 3, (c + 1) % 3, (c + 2) % 3);
            e[(r1, c1)] * e[(r2, c2)] - e[(r1, c2)] * e[(r2, c1)]
        };
        let adj = SMatrix::<f64, D, D>::from_fn(|i, j| cof(j, i));
        let det = (0..3).map(|c| e[(0, c)] * cof(0, c)).sum();
        (det, adj)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use nalgebra::Matrix3;

    #[test]
    fn adjugate_inverts() {
        let e = Matrix3::new(2.0, 0.3, -1.0, 0.5, 1.5, 0.2, -0.4, 0.7, 3.0);
        let (det, adj) = det_adjugate(&e);
        assert!((det - e.determinant()).abs() < 1e-12);
        let id = e * adj / det;
        assert!((id - Matrix3::identity()).abs().max() < 1e-14);
        let e2 = nalgebra::Matrix2::new(2.0, 0.3, -1.0, 0.5);
        let (det2, adj2) = det_adjugate(&e2);
        assert!((det2 - e2.determinant()).abs() < 1e-14);
        assert!(
            (e2 * adj2 / det2 - nalgebra::Matrix2::identity())
                .abs()
                .max()
                < 1e-14
        );
    }
}
