//! Delaunay constant-strain triangles (2D).
//!
//! The reference coordinates of a [`PointSet<2>`] are triangulated by Delaunay
//! (spade, exact predicates). Over each triangle the displacement is interpolated
//! linearly, which gives one constant gradient per triangle in closed form:
//! with edge vectors `e_k = x_k − x_0` and displacement differences `d_k = u_k − u_0`
//! (`k = 1, 2`), `G = [d1 d2]·[e1 e2]⁻¹`. Differences are taken relative to vertex 0
//! so that large coordinate offsets (survey grids) cost no precision.
//!
//! Every triangle passes the quality screen of [`QualityThresholds`]; a rejected
//! triangle is reported with its reason, never dropped.
//!
//! For large point sets use [`delaunay_triangles`] and then [`triangle_strains_with`],
//! which hands each result to a callback and keeps only the triangle list
//! (12 bytes per triangle, about 2 triangles per point) in memory.
//! [`delaunay_strain`] is the convenience form that collects everything.

use nalgebra::Matrix2;
use spade::{DelaunayTriangulation, HasPosition, InsertionError, Point2, Triangulation};

use super::quality::{QualityFailure, QualityThresholds, TriangleQuality};
use super::{GradientEstimate, RegionKind, Rejected};
use crate::error::{CoreError, Result};
use crate::points::PointSet;

const CONTEXT: &str = "Delaunay triangulation";

/// A vertex handed to spade: centred position plus the index into the point set.
#[derive(Debug, Clone, Copy)]
struct Vertex {
    pos: Point2<f64>,
    index: u32,
}

impl HasPosition for Vertex {
    type Scalar = f64;

    fn position(&self) -> Point2<f64> {
        self.pos
    }
}

/// Centred position as spade sees it (tiny values flushed to zero, as spade requires).
fn centred(x: [f64; 2], c: [f64; 2]) -> Point2<f64> {
    spade::mitigate_underflow(Point2::new(x[0] - c[0], x[1] - c[1]))
}

/// Delaunay triangles of the reference coordinates, counter-clockwise, as indices
/// into `points`.
///
/// Coordinates are centred on their mean before triangulating.
///
/// # Errors
/// - [`CoreError::TooFewPoints`] for fewer than 3 points;
/// - [`CoreError::DegenerateGeometry`] with shape `coincident` when two points share
///   their reference coordinates (both IDs are named), and with shape `collinear`
///   when all points lie on one line (no triangle exists);
/// - [`CoreError::InvalidParameter`] when a centred coordinate exceeds spade's range
///   (about 3·10⁶⁰ m) or the set holds more than `u32::MAX` points.
pub fn delaunay_triangles(points: &PointSet<2>) -> Result<Vec<[u32; 3]>> {
    let pts = points.points();
    let n = pts.len();
    if n < 3 {
        return Err(CoreError::TooFewPoints {
            context: CONTEXT.into(),
            needed: 3,
            got: n,
        });
    }
    if u32::try_from(n).is_err() {
        return Err(CoreError::InvalidParameter {
            name: "points",
            reason: format!("{n} points; the triangulation holds at most {}", u32::MAX),
        });
    }
    let c = points.centroid();
    let mut vertices = Vec::with_capacity(n);
    for (i, p) in pts.iter().enumerate() {
        let pos = centred(p.x, c);
        for (k, v) in [pos.x, pos.y].into_iter().enumerate() {
            if v.abs() > spade::MAX_ALLOWED_VALUE {
                return Err(CoreError::InvalidParameter {
                    name: if k == 0 { "x" } else { "y" },
                    reason: format!(
                        "point `{}`: coordinate {v:e} m from the centroid is beyond the \
                         triangulation's range",
                        p.id
                    ),
                });
            }
        }
        vertices.push(Vertex {
            pos,
            index: i as u32,
        });
    }
    let tri = DelaunayTriangulation::<Vertex>::bulk_load(vertices).map_err(|e| {
        CoreError::InvalidParameter {
            name: "points",
            reason: match e {
                InsertionError::TooLarge => "a coordinate is too large to triangulate".into(),
                InsertionError::TooSmall => "a coordinate is too small to triangulate".into(),
                InsertionError::NAN => "a coordinate is not a number".into(),
            },
        }
    })?;
    if tri.num_vertices() < n {
        drop(tri);
        return Err(coincident_error(points, c));
    }
    let mut triangles = Vec::with_capacity(tri.num_inner_faces());
    for face in tri.inner_faces() {
        let [a, b, c] = face.vertices().map(|h| *h.data());
        let e1 = [b.pos.x - a.pos.x, b.pos.y - a.pos.y];
        let e2 = [c.pos.x - a.pos.x, c.pos.y - a.pos.y];
        // spade reports faces counter-clockwise; check anyway so that the promise holds.
        if e1[0] * e2[1] - e1[1] * e2[0] >= 0.0 {
            triangles.push([a.index, b.index, c.index]);
        } else {
            triangles.push([a.index, c.index, b.index]);
        }
    }
    drop(tri);
    if triangles.is_empty() {
        return Err(CoreError::DegenerateGeometry {
            context: CONTEXT.into(),
            shape: "collinear",
            condition: moment_condition(points, c),
        });
    }
    Ok(triangles)
}

/// The error for two points with identical (centred) reference coordinates.
fn coincident_error(points: &PointSet<2>, c: [f64; 2]) -> CoreError {
    let pts = points.points();
    let key = |i: u32| {
        let p = centred(pts[i as usize].x, c);
        (p.x, p.y)
    };
    let mut order: Vec<u32> = (0..pts.len() as u32).collect();
    order.sort_unstable_by(|&a, &b| {
        let (ka, kb) = (key(a), key(b));
        ka.0.total_cmp(&kb.0)
            .then(ka.1.total_cmp(&kb.1))
            .then(a.cmp(&b))
    });
    let pair = order
        .windows(2)
        .find(|w| key(w[0]) == key(w[1]))
        .map(|w| (w[0] as usize, w[1] as usize));
    match pair {
        Some((a, b)) => {
            let (pa, pb) = (&pts[a], &pts[b]);
            CoreError::DegenerateGeometry {
                context: format!(
                    "points `{}` and `{}` share the reference position ({}, {}) m",
                    pa.id, pb.id, pa.x[0], pa.x[1]
                ),
                shape: "coincident",
                condition: 0.0,
            }
        }
        None => CoreError::DegenerateGeometry {
            context: format!("{CONTEXT}: some points share a reference position"),
            shape: "coincident",
            condition: 0.0,
        },
    }
}

/// Smallest over largest eigenvalue of the centred 2×2 moment matrix.
fn moment_condition(points: &PointSet<2>, c: [f64; 2]) -> f64 {
    let (mut sxx, mut syy, mut sxy) = (0.0, 0.0, 0.0);
    for p in points.points() {
        let (dx, dy) = (p.x[0] - c[0], p.x[1] - c[1]);
        sxx += dx * dx;
        syy += dy * dy;
        sxy += dx * dy;
    }
    let m = 0.5 * (sxx + syy);
    let r = (0.5 * (sxx - syy)).hypot(sxy);
    let (hi, lo) = (m + r, (m - r).max(0.0));
    if hi > 0.0 { lo / hi } else { 0.0 }
}

/// One triangle that passed the screen, with its constant gradient.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TriangleStrain {
    /// Position of the triangle in the triangle list (0-based); label `T{index+1}`.
    pub index: usize,
    /// Vertex indices into the point set, in the order given.
    pub vertices: [u32; 3],
    /// Centroid of the reference triangle, metres.
    pub centroid: [f64; 2],
    /// Displacement at the centroid (mean of the vertex displacements), metres.
    pub displacement: [f64; 2],
    /// Constant displacement gradient `G[i][j] = ∂u_i/∂x_j`, dimensionless.
    pub gradient: Matrix2<f64>,
    /// Shape metrics.
    pub quality: TriangleQuality,
}

/// One triangle that failed the screen, with the reason.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TriangleRejection {
    /// Position of the triangle in the triangle list (0-based); label `T{index+1}`.
    pub index: usize,
    /// Vertex indices into the point set, in the order given.
    pub vertices: [u32; 3],
    /// Shape metrics.
    pub quality: TriangleQuality,
    /// Which test failed, with the numbers (its `Display` is the reason text).
    pub failure: QualityFailure,
}

/// What [`triangle_strains_with`] reports for each triangle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum ElementOutcome {
    /// The triangle passed the screen.
    Accepted(TriangleStrain),
    /// The triangle failed the screen; no gradient is given.
    Rejected(TriangleRejection),
}

/// Label of the triangle at position `index` of a triangle list: `T1`, `T2`, …
pub fn triangle_label(index: usize) -> String {
    format!("T{}", index + 1)
}

/// Screen each triangle and compute its constant gradient, handing one
/// [`ElementOutcome`] per triangle, in list order, to `sink`.
///
/// Nothing is collected, so memory stays flat however many triangles there are.
/// Vertex order is kept as given: a clockwise triangle has a negative signed area
/// and the same gradient.
///
/// # Errors
/// [`CoreError::InvalidParameter`] for invalid thresholds or a vertex index outside
/// the point set (checked before the first outcome is handed out).
pub fn triangle_strains_with(
    points: &PointSet<2>,
    triangles: &[[u32; 3]],
    thresholds: &QualityThresholds,
    mut sink: impl FnMut(ElementOutcome),
) -> Result<()> {
    thresholds.validate()?;
    let pts = points.points();
    let n = pts.len();
    if let Some((t, &v)) = triangles
        .iter()
        .enumerate()
        .find_map(|(t, tri)| tri.iter().find(|&&v| v as usize >= n).map(|v| (t, v)))
    {
        return Err(CoreError::InvalidParameter {
            name: "triangles",
            reason: format!(
                "triangle {} refers to point index {v}, but the set holds {n} points",
                triangle_label(t)
            ),
        });
    }
    for (index, &tri) in triangles.iter().enumerate() {
        let (p0, p1, p2) = (
            &pts[tri[0] as usize],
            &pts[tri[1] as usize],
            &pts[tri[2] as usize],
        );
        let e1 = [p1.x[0] - p0.x[0], p1.x[1] - p0.x[1]];
        let e2 = [p2.x[0] - p0.x[0], p2.x[1] - p0.x[1]];
        let quality = TriangleQuality::from_edges(e1, e2);
        if let Some(failure) = thresholds.check_triangle(&quality) {
            sink(ElementOutcome::Rejected(TriangleRejection {
                index,
                vertices: tri,
                quality,
                failure,
            }));
            continue;
        }
        let d1 = [p1.u[0] - p0.u[0], p1.u[1] - p0.u[1]];
        let d2 = [p2.u[0] - p0.u[0], p2.u[1] - p0.u[1]];
        let gradient = cst_gradient(e1, e2, d1, d2);
        let third = 1.0 / 3.0;
        sink(ElementOutcome::Accepted(TriangleStrain {
            index,
            vertices: tri,
            centroid: [
                p0.x[0] + (e1[0] + e2[0]) * third,
                p0.x[1] + (e1[1] + e2[1]) * third,
            ],
            displacement: [
                (p0.u[0] + p1.u[0] + p2.u[0]) * third,
                (p0.u[1] + p1.u[1] + p2.u[1]) * third,
            ],
            gradient,
            quality,
        }));
    }
    Ok(())
}

/// Constant-strain-triangle gradient `G = [d1 d2]·[e1 e2]⁻¹` in closed form
/// (adjugate of the 2×2 edge matrix). `e_k` are edge vectors from vertex 0 (m),
/// `d_k` the displacement differences (m). The edge matrix must not be singular.
#[inline]
pub fn cst_gradient(e1: [f64; 2], e2: [f64; 2], d1: [f64; 2], d2: [f64; 2]) -> Matrix2<f64> {
    let inv = 1.0 / (e1[0] * e2[1] - e1[1] * e2[0]);
    // [e1 e2]⁻¹ = inv·[[e2y, −e2x], [−e1y, e1x]]
    let (a, b, c, d) = (e2[1] * inv, -e2[0] * inv, -e1[1] * inv, e1[0] * inv);
    Matrix2::new(
        d1[0] * a + d2[0] * c,
        d1[0] * b + d2[0] * d,
        d1[1] * a + d2[1] * c,
        d1[1] * b + d2[1] * d,
    )
}

/// Triangulate, screen and compute every triangle, collecting the results.
///
/// Accepted triangles come back as [`GradientEstimate`]s of kind
/// [`RegionKind::Triangle`], rejected ones as [`Rejected`] with the reason; both are
/// labelled `T1`, `T2`, … by their position in the triangulation, so labels are
/// shared between the two lists without repeats. `members` are the CCW vertex
/// indices, `translation` the displacement at the centroid. For 10⁶ points prefer
/// the streaming pair [`delaunay_triangles`] + [`triangle_strains_with`].
///
/// # Errors
/// Those of [`delaunay_triangles`] and [`QualityThresholds::validate`].
pub fn delaunay_strain(
    points: &PointSet<2>,
    thresholds: &QualityThresholds,
) -> Result<(Vec<GradientEstimate<2>>, Vec<Rejected>)> {
    thresholds.validate()?;
    let triangles = delaunay_triangles(points)?;
    let mut accepted = Vec::with_capacity(triangles.len());
    let mut rejected = Vec::new();
    triangle_strains_with(points, &triangles, thresholds, |o| match o {
        ElementOutcome::Accepted(t) => accepted.push(GradientEstimate {
            label: triangle_label(t.index),
            kind: RegionKind::Triangle,
            members: t.vertices.iter().map(|&v| v as usize).collect(),
            centroid: t.centroid,
            gradient: t.gradient,
            translation: Some(t.displacement),
            fit: None,
        }),
        ElementOutcome::Rejected(r) => rejected.push(Rejected {
            label: triangle_label(r.index),
            members: r.vertices.iter().map(|&v| v as usize).collect(),
            reason: r.failure.to_string(),
        }),
    })?;
    Ok((accepted, rejected))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::points::Point;

    #[test]
    fn square_gives_two_ccw_triangles() {
        let pts = PointSet::new(vec![
            Point::new("A", [0.0, 0.0], [0.0; 2]),
            Point::new("B", [1.0, 0.0], [0.0; 2]),
            Point::new("C", [1.0, 1.1], [0.0; 2]),
            Point::new("D", [0.0, 1.0], [0.0; 2]),
        ])
        .expect("valid points");
        let tris = delaunay_triangles(&pts).expect("triangulates");
        assert_eq!(tris.len(), 2);
        for t in &tris {
            let x: Vec<[f64; 2]> = t.iter().map(|&i| pts.points()[i as usize].x).collect();
            let q = TriangleQuality::from_vertices([x[0], x[1], x[2]]);
            assert!(q.signed_area > 0.0);
        }
    }

    #[test]
    fn out_of_range_index_is_an_error() {
        let pts = PointSet::new(vec![
            Point::new("A", [0.0, 0.0], [0.0; 2]),
            Point::new("B", [1.0, 0.0], [0.0; 2]),
            Point::new("C", [0.0, 1.0], [0.0; 2]),
        ])
        .expect("valid points");
        let r = triangle_strains_with(&pts, &[[0, 1, 3]], &QualityThresholds::default(), |_| {});
        assert!(matches!(
            r,
            Err(CoreError::InvalidParameter {
                name: "triangles",
                ..
            })
        ));
    }
}
