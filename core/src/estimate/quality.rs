//! Shape quality of triangles and tetrahedra, and the screen applied to them.
//!
//! A constant-strain element turns vertex displacements into a gradient through the
//! inverse of its edge matrix. A flat or needle-shaped element has a badly conditioned
//! edge matrix, so survey noise at its vertices is amplified into large spurious
//! strain. The screen rejects such elements and keeps the reason with the numbers.
//!
//! ## Metrics
//! - **Triangle**: signed area (m², positive when the vertices run counter-clockwise),
//!   minimum interior angle (rad), and the *radius ratio* `R/(2r)` (circumradius over
//!   twice the inradius). The radius ratio is the classical mesh-quality measure
//!   (e.g. Shewchuk, "What is a good linear finite element?", 2002); normalised this
//!   way it is 1 for an equilateral triangle and grows without bound as the triangle
//!   flattens. It is computed as `R/(2r) = abc(a+b+c)/(16A²)` from the edge lengths
//!   `a, b, c` and the area `A`.
//! - **Tetrahedron**: signed volume (m³, positive for a right-handed vertex order,
//!   i.e. `(x1−x0)·((x2−x0)×(x3−x0)) > 0`), minimum dihedral angle (rad) and the
//!   radius ratio `R/(3r)` (circumradius over three times the inradius), 1 for a
//!   regular tetrahedron.
//!
//! ## Degeneracy
//! An element is degenerate (zero area or volume) when `|det E| ≤ 1e-12·(Σ|e_k|²)^(D/2)`,
//! `E = [e_1 … e_D]` the edge vectors from vertex 0. The test is relative, so it does
//! not depend on the unit of length or on the size of the element.
//!
//! ## Scaling
//! Angles, ratios and the degeneracy test do not depend on the size of the element, but
//! their intermediate products (squared lengths to the third power, `det²`) overflow for
//! edges near 10¹⁵⁰ m and underflow near 10⁻¹⁵⁰ m. The edge vectors are therefore first
//! divided by [`edge_scale`], a power of two close to the largest edge component (exact
//! in floating point), and only the signed area / volume are scaled back to m² / m³.

use std::f64::consts::FRAC_PI_3;
use std::fmt;

use serde::Serialize;

use crate::error::{CoreError, Result};

/// Relative tolerance of the degeneracy test `|det E| ≤ tol·(Σ|e_k|²)^(D/2)`.
pub const DEGENERATE_TOL: f64 = 1e-12;

/// Power of two near the largest absolute component of the edge vectors `edges`
/// (metres), for scaling them to unit size before scale-invariant metrics are formed.
/// Division by a power of two is exact, so the metrics of ordinary elements are
/// unchanged bit for bit. Returns 1 when every component is zero or one is not finite.
pub fn edge_scale(edges: &[f64]) -> f64 {
    let m = edges.iter().fold(0.0_f64, |a, v| a.max(v.abs()));
    if m > 0.0 && m.is_finite() {
        // 2^⌊log2 m⌋ is within a factor 2 of m; powi keeps it exact for every normal m.
        let e = m.log2().floor() as i32;
        let p = 2f64.powi(e);
        if p > 0.0 && p.is_finite() { p } else { 1.0 }
    } else {
        1.0
    }
}

/// Shape metrics of one triangle.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TriangleQuality {
    /// Signed area, m²; positive when the vertices run counter-clockwise.
    pub signed_area: f64,
    /// Smallest interior angle, radians, in `[0, π/3]`.
    pub min_angle_rad: f64,
    /// Radius ratio `R/(2r)`: 1 for an equilateral triangle, `+∞` for zero area.
    pub aspect_ratio: f64,
    /// True when `|2A| ≤ 1e-12·(|e1|² + |e2|²)` (zero area, see [`DEGENERATE_TOL`]).
    pub degenerate: bool,
}

impl TriangleQuality {
    /// Metrics of the triangle `x0, x1, x2` (metres).
    pub fn from_vertices(x: [[f64; 2]; 3]) -> Self {
        let e1 = [x[1][0] - x[0][0], x[1][1] - x[0][1]];
        let e2 = [x[2][0] - x[0][0], x[2][1] - x[0][1]];
        Self::from_edges(e1, e2)
    }

    /// Metrics from the edge vectors `e1 = x1 − x0` and `e2 = x2 − x0` (metres).
    /// Working from differences keeps full precision when coordinates carry large
    /// offsets.
    #[inline]
    pub fn from_edges(e1: [f64; 2], e2: [f64; 2]) -> Self {
        // Scale to unit size (module docs, "Scaling"); f = x2 − x1 may reach twice that.
        let p = edge_scale(&[e1[0], e1[1], e2[0], e2[1]]);
        let e1 = [e1[0] / p, e1[1] / p];
        let e2 = [e2[0] / p, e2[1] / p];
        let det = e1[0] * e2[1] - e1[1] * e2[0];
        let f = [e2[0] - e1[0], e2[1] - e1[1]]; // x2 − x1
        let l_e1 = e1[0] * e1[0] + e1[1] * e1[1]; // edge opposite vertex 2
        let l_e2 = e2[0] * e2[0] + e2[1] * e2[1]; // edge opposite vertex 1
        let l_f = f[0] * f[0] + f[1] * f[1]; // edge opposite vertex 0
        let cross = det.abs();
        // The smallest angle lies opposite the shortest edge (law of sines); the angle
        // at a vertex is atan2(|p × q|, p · q) of its two edge vectors.
        let dot = if l_f <= l_e1 && l_f <= l_e2 {
            e1[0] * e2[0] + e1[1] * e2[1] // at vertex 0: e1, e2
        } else if l_e2 <= l_e1 {
            -(e1[0] * f[0] + e1[1] * f[1]) // at vertex 1: −e1, f
        } else {
            e2[0] * f[0] + e2[1] * f[1] // at vertex 2: −e2, −f
        };
        let min_angle_rad = cross.atan2(dot);
        let aspect_ratio = if cross > 0.0 {
            // R/(2r) = abc(a+b+c)/(16 A²) and 16 A² = 4 det².
            (l_e1 * l_e2 * l_f).sqrt() * (l_e1.sqrt() + l_e2.sqrt() + l_f.sqrt())
                / (4.0 * det * det)
        } else {
            f64::INFINITY
        };
        Self {
            signed_area: 0.5 * det * p * p,
            min_angle_rad,
            aspect_ratio,
            degenerate: cross <= DEGENERATE_TOL * (l_e1 + l_e2),
        }
    }
}

/// Shape metrics of one tetrahedron.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TetrahedronQuality {
    /// Signed volume, m³; positive when `(x1−x0)·((x2−x0)×(x3−x0)) > 0`.
    pub signed_volume: f64,
    /// Smallest of the six dihedral angles, radians.
    pub min_dihedral_rad: f64,
    /// Radius ratio `R/(3r)`: 1 for a regular tetrahedron, `+∞` for zero volume.
    pub radius_ratio: f64,
    /// True when `|6V| ≤ 1e-12·(|e1|² + |e2|² + |e3|²)^(3/2)` (zero volume).
    pub degenerate: bool,
}

fn sub3(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}

fn dot3(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

fn cross3(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}

fn norm3(a: [f64; 3]) -> f64 {
    dot3(a, a).sqrt()
}

/// Dihedral angle along the edge `p → q` between the half-planes through `a` and `b`.
fn dihedral(p: [f64; 3], q: [f64; 3], a: [f64; 3], b: [f64; 3]) -> f64 {
    let t = sub3(q, p);
    let tt = dot3(t, t);
    if tt == 0.0 {
        return 0.0;
    }
    let project = |v: [f64; 3]| {
        let s = dot3(v, t) / tt;
        [v[0] - s * t[0], v[1] - s * t[1], v[2] - s * t[2]]
    };
    let u = project(sub3(a, p));
    let v = project(sub3(b, p));
    norm3(cross3(u, v)).atan2(dot3(u, v))
}

impl TetrahedronQuality {
    /// Metrics of the tetrahedron `x0, x1, x2, x3` (metres).
    pub fn from_vertices(x: [[f64; 3]; 4]) -> Self {
        Self::from_edges(sub3(x[1], x[0]), sub3(x[2], x[0]), sub3(x[3], x[0]))
    }

    /// Metrics from the edge vectors `e_k = x_k − x0` (metres).
    pub fn from_edges(e1: [f64; 3], e2: [f64; 3], e3: [f64; 3]) -> Self {
        // Scale to unit size (module docs, "Scaling").
        let p = edge_scale(&[
            e1[0], e1[1], e1[2], e2[0], e2[1], e2[2], e3[0], e3[1], e3[2],
        ]);
        let sc = |e: [f64; 3]| [e[0] / p, e[1] / p, e[2] / p];
        let (e1, e2, e3) = (sc(e1), sc(e2), sc(e3));
        let c23 = cross3(e2, e3);
        let c31 = cross3(e3, e1);
        let c12 = cross3(e1, e2);
        let det = dot3(e1, c23); // 6·V
        let (l1, l2, l3) = (dot3(e1, e1), dot3(e2, e2), dot3(e3, e3));
        // Circumcentre relative to x0: (l1 (e2×e3) + l2 (e3×e1) + l3 (e1×e2)) / (2 det).
        let w = [
            l1 * c23[0] + l2 * c31[0] + l3 * c12[0],
            l1 * c23[1] + l2 * c31[1] + l3 * c12[1],
            l1 * c23[2] + l2 * c31[2] + l3 * c12[2],
        ];
        // Twice the total surface area.
        let s2 = norm3(cross3(sub3(e2, e1), sub3(e3, e1))) + norm3(c23) + norm3(c31) + norm3(c12);
        let vol6 = det.abs();
        let radius_ratio = if vol6 > 0.0 {
            // R = |w|/(2|det|), r = 3V/S = |det|/s2  ⇒  R/(3r) = |w|·s2/(6 det²).
            norm3(w) * s2 / (6.0 * det * det)
        } else {
            f64::INFINITY
        };
        let o = [0.0; 3];
        let min_dihedral_rad = [
            dihedral(o, e1, e2, e3),
            dihedral(o, e2, e1, e3),
            dihedral(o, e3, e1, e2),
            dihedral(e1, e2, o, e3),
            dihedral(e1, e3, o, e2),
            dihedral(e2, e3, o, e1),
        ]
        .into_iter()
        .fold(f64::INFINITY, f64::min);
        Self {
            signed_volume: det / 6.0 * p * p * p,
            min_dihedral_rad,
            radius_ratio,
            degenerate: vol6 <= DEGENERATE_TOL * (l1 + l2 + l3).powf(1.5),
        }
    }
}

/// Thresholds of the quality screen.
///
/// For triangles `min_angle_rad` bounds the smallest interior angle and
/// `max_aspect_ratio` the radius ratio `R/(2r)`; for tetrahedra they bound the
/// smallest dihedral angle and the radius ratio `R/(3r)`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct QualityThresholds {
    /// Smallest allowed angle, radians, in `[0, π/3]`; 0 switches the test off.
    pub min_angle_rad: f64,
    /// Largest allowed radius ratio, `≥ 1`; `+∞` switches the test off.
    pub max_aspect_ratio: f64,
}

impl Default for QualityThresholds {
    /// Minimum angle 10° and radius ratio at most 5.
    ///
    /// Common practice for strain triangles in deformation networks is to discard
    /// triangles with an angle below roughly 10°, where the edge matrix starts to
    /// amplify noise strongly. With that angle bound alone, flat obtuse triangles
    /// (two angles of 10–19°, one of 140–160°) would still pass; the radius-ratio
    /// bound of 5 removes them (an isosceles triangle with base angles of 19° has
    /// `R/(2r) ≈ 5`) while every triangle with all angles ≥ 20° passes.
    fn default() -> Self {
        Self {
            min_angle_rad: 10f64.to_radians(),
            max_aspect_ratio: 5.0,
        }
    }
}

impl QualityThresholds {
    /// Thresholds that let every non-degenerate element through.
    pub fn off() -> Self {
        Self {
            min_angle_rad: 0.0,
            max_aspect_ratio: f64::INFINITY,
        }
    }

    /// Check the ranges: `min_angle_rad` finite in `[0, π/3]` (no triangle has a
    /// smallest angle above 60°), `max_aspect_ratio ≥ 1` and not NaN.
    pub fn validate(&self) -> Result<()> {
        let a = self.min_angle_rad;
        if !a.is_finite() || !(0.0..=FRAC_PI_3 + 1e-15).contains(&a) {
            return Err(CoreError::InvalidParameter {
                name: "min_angle",
                reason: format!("must be a finite angle in [0°, 60°], got {a} rad"),
            });
        }
        let r = self.max_aspect_ratio;
        if r.is_nan() || r < 1.0 {
            return Err(CoreError::InvalidParameter {
                name: "max_aspect_ratio",
                reason: format!("must be at least 1 (the value of an ideal element), got {r}"),
            });
        }
        Ok(())
    }

    /// Screen a triangle; `None` when it passes.
    #[inline]
    pub fn check_triangle(&self, q: &TriangleQuality) -> Option<QualityFailure> {
        if q.degenerate {
            return Some(QualityFailure {
                shape: ElementShape::Triangle,
                degenerate: Some(q.signed_area),
                min_angle: None,
                aspect_ratio: None,
            });
        }
        self.check(ElementShape::Triangle, q.min_angle_rad, q.aspect_ratio)
    }

    /// Screen a tetrahedron; `None` when it passes.
    pub fn check_tetrahedron(&self, q: &TetrahedronQuality) -> Option<QualityFailure> {
        if q.degenerate {
            return Some(QualityFailure {
                shape: ElementShape::Tetrahedron,
                degenerate: Some(q.signed_volume),
                min_angle: None,
                aspect_ratio: None,
            });
        }
        self.check(
            ElementShape::Tetrahedron,
            q.min_dihedral_rad,
            q.radius_ratio,
        )
    }

    #[inline]
    fn check(&self, shape: ElementShape, angle: f64, ratio: f64) -> Option<QualityFailure> {
        // Written so that a NaN metric (overflowing coordinates) fails rather than passes.
        let bad_angle = angle < self.min_angle_rad || angle.is_nan();
        let bad_ratio = ratio > self.max_aspect_ratio || ratio.is_nan();
        let min_angle = bad_angle.then_some([angle, self.min_angle_rad]);
        let aspect_ratio = bad_ratio.then_some([ratio, self.max_aspect_ratio]);
        if min_angle.is_none() && aspect_ratio.is_none() {
            return None;
        }
        Some(QualityFailure {
            shape,
            degenerate: None,
            min_angle,
            aspect_ratio,
        })
    }
}

/// Which kind of element a [`QualityFailure`] belongs to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ElementShape {
    /// Three-node triangle (2D).
    Triangle,
    /// Four-node tetrahedron (3D).
    Tetrahedron,
}

/// Why an element failed the screen, with the numbers. Its `Display` is the
/// plain-words reason stored in [`crate::estimate::Rejected::reason`], angles in degrees.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct QualityFailure {
    /// Triangle or tetrahedron.
    pub shape: ElementShape,
    /// `Some(signed area m² or volume m³)` when the element is degenerate; the other
    /// tests are then not made.
    pub degenerate: Option<f64>,
    /// `Some([angle, threshold])` (radians) when the smallest (dihedral) angle is too small.
    pub min_angle: Option<[f64; 2]>,
    /// `Some([ratio, threshold])` when the radius ratio is too large.
    pub aspect_ratio: Option<[f64; 2]>,
}

impl fmt::Display for QualityFailure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let (angle_name, ratio_name, size_name) = match self.shape {
            ElementShape::Triangle => ("minimum angle", "aspect ratio R/(2r)", "area"),
            ElementShape::Tetrahedron => {
                ("minimum dihedral angle", "radius ratio R/(3r)", "volume")
            }
        };
        if let Some(size) = self.degenerate {
            let unit = match self.shape {
                ElementShape::Triangle => "m²",
                ElementShape::Tetrahedron => "m³",
            };
            return write!(
                f,
                "zero {size_name}: {size:.3e} {unit} is negligible against its edge lengths"
            );
        }
        let mut sep = "";
        if let Some([a, t]) = self.min_angle {
            write!(
                f,
                "{angle_name} {:.2}° < {:.2}°",
                a.to_degrees(),
                t.to_degrees()
            )?;
            sep = "; ";
        }
        if let Some([r, t]) = self.aspect_ratio {
            write!(f, "{sep}{ratio_name} {r:.2} > {t:.2}")?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn equilateral_and_regular_are_ideal() {
        // Source: elementary geometry: equilateral triangle angles are 60°, R = 2r.
        let h = 3f64.sqrt() / 2.0;
        let q = TriangleQuality::from_vertices([[0.0, 0.0], [1.0, 0.0], [0.5, h]]);
        assert!((q.min_angle_rad - FRAC_PI_3).abs() < 1e-14);
        assert!((q.aspect_ratio - 1.0).abs() < 1e-14);
        assert!((q.signed_area - h / 2.0).abs() < 1e-15);
        // Source: regular tetrahedron, dihedral angle arccos(1/3), R = 3r.
        let t = TetrahedronQuality::from_vertices([
            [1.0, 1.0, 1.0],
            [1.0, -1.0, -1.0],
            [-1.0, 1.0, -1.0],
            [-1.0, -1.0, 1.0],
        ]);
        assert!((t.min_dihedral_rad - (1.0f64 / 3.0).acos()).abs() < 1e-14);
        assert!((t.radius_ratio - 1.0).abs() < 1e-13);
        // Edge length 2√2: V = a³/(6√2) = 8/3.
        assert!((t.signed_volume.abs() - 8.0 / 3.0).abs() < 1e-13);
    }

    #[test]
    fn metrics_do_not_depend_on_size() {
        // Source: elementary geometry: an equilateral triangle has all angles 60° and
        // R = 2r; a regular tetrahedron has dihedral angle arccos(1/3) and R = 3r, at
        // every size. 1e±150 m makes squared lengths cubed (and det²) overflow or
        // underflow without the scaling.
        let h = 3f64.sqrt() / 2.0;
        for size in [1e150, 1e-150, 1e300, 1e-300] {
            let q =
                TriangleQuality::from_vertices([[0.0, 0.0], [size, 0.0], [0.5 * size, h * size]]);
            assert!(!q.degenerate, "{size}");
            assert!((q.min_angle_rad - FRAC_PI_3).abs() < 1e-14, "{size}: {q:?}");
            assert!((q.aspect_ratio - 1.0).abs() < 1e-13, "{size}: {q:?}");
            assert!(QualityThresholds::default().check_triangle(&q).is_none());
        }
        // Signed area scaled back to m²: (√3/4)·a².
        let q = TriangleQuality::from_vertices([[0.0, 0.0], [1e150, 0.0], [0.5e150, h * 1e150]]);
        assert!((q.signed_area / (h / 2.0 * 1e300) - 1.0).abs() < 1e-14);
        for size in [1e150, 1e-150] {
            let t = TetrahedronQuality::from_vertices([
                [size, size, size],
                [size, -size, -size],
                [-size, size, -size],
                [-size, -size, size],
            ]);
            assert!(!t.degenerate, "{size}");
            assert!(
                (t.min_dihedral_rad - (1.0f64 / 3.0).acos()).abs() < 1e-14,
                "{size}: {t:?}"
            );
            assert!((t.radius_ratio - 1.0).abs() < 1e-13, "{size}: {t:?}");
            assert!(QualityThresholds::default().check_tetrahedron(&t).is_none());
        }
        // A flat triangle stays degenerate at every size.
        for size in [1e150, 1e-150] {
            let z = TriangleQuality::from_vertices([[0.0, 0.0], [size, 0.0], [2.0 * size, 0.0]]);
            assert!(z.degenerate, "{size}");
        }
        assert_eq!(edge_scale(&[0.0, 0.0]), 1.0);
        assert_eq!(edge_scale(&[3.0, -5.0]), 4.0);
    }

    #[test]
    fn right_triangle_metrics() {
        // Source: 3-4-5 right triangle: A = 6, R = 2.5, r = (3+4−5)/2 = 1, smallest
        // angle atan(3/4).
        let q = TriangleQuality::from_vertices([[0.0, 0.0], [4.0, 0.0], [0.0, 3.0]]);
        assert!((q.signed_area - 6.0).abs() < 1e-14);
        assert!((q.aspect_ratio - 1.25).abs() < 1e-14);
        assert!((q.min_angle_rad - 0.75f64.atan()).abs() < 1e-14);
        let cw = TriangleQuality::from_vertices([[0.0, 0.0], [0.0, 3.0], [4.0, 0.0]]);
        assert!((cw.signed_area + 6.0).abs() < 1e-14);
        // Source: elementary geometry: the corner tetrahedron (0, e1, e2, e3) has
        // volume 1/6, right dihedral angles on the three axis edges, and
        // arccos(1/√3) ≈ 54.7° between a coordinate face and the slanted face.
        let t = TetrahedronQuality::from_vertices([
            [0.0, 0.0, 0.0],
            [1.0, 0.0, 0.0],
            [0.0, 1.0, 0.0],
            [0.0, 0.0, 1.0],
        ]);
        assert!((t.signed_volume - 1.0 / 6.0).abs() < 1e-15);
        assert!((t.min_dihedral_rad - (1.0 / 3f64.sqrt()).acos()).abs() < 1e-14);
    }

    #[test]
    fn thresholds_validate_and_screen() {
        assert!(QualityThresholds::default().validate().is_ok());
        assert!(QualityThresholds::off().validate().is_ok());
        for bad in [f64::NAN, -0.1, 1.1] {
            let t = QualityThresholds {
                min_angle_rad: bad,
                ..Default::default()
            };
            assert!(matches!(
                t.validate(),
                Err(CoreError::InvalidParameter {
                    name: "min_angle",
                    ..
                })
            ));
        }
        for bad in [f64::NAN, -1.0, 0.5] {
            let t = QualityThresholds {
                max_aspect_ratio: bad,
                ..Default::default()
            };
            assert!(matches!(
                t.validate(),
                Err(CoreError::InvalidParameter {
                    name: "max_aspect_ratio",
                    ..
                })
            ));
        }
        let flat = TriangleQuality::from_vertices([[0.0, 0.0], [10.0, 0.0], [5.0, 0.2]]);
        let fail = QualityThresholds::default()
            .check_triangle(&flat)
            .expect("sliver must fail");
        let text = fail.to_string();
        // atan(0.2/5) = 2.2906°.
        assert!(
            text.starts_with("minimum angle 2.29° < 10.00°; aspect ratio R/(2r) "),
            "{text}"
        );
        let zero = TriangleQuality::from_vertices([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]]);
        assert!(zero.degenerate);
        assert!(
            QualityThresholds::off()
                .check_triangle(&zero)
                .expect("degenerate fails")
                .to_string()
                .starts_with("zero area")
        );
    }
}
