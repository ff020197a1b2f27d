//! Mohr's circle of strain.
//!
//! Axes: normal strain `ε` (abscissa) and **tensor** shear `ε_nt = γ/2` (ordinate).
//! 2D: centre `(εxx + εyy)/2`, radius `R = √(((εxx − εyy)/2)² + εxy²)`; the x face is
//! the point `(εxx, εxy)`, the y face `(εyy, −εxy)`, diametrically opposite. The
//! principal angle is `θ1` of the major principal strain (`tan 2θ = 2εxy/(εxx − εyy)`).
//! Which way the ordinate is drawn (up or down) is left to the renderer: with the
//! ordinate positive downward, a turn of the element by θ moves the point by 2θ in
//! the same sense on the circle.
//!
//! 3D: the three circles on the principal values, each with centre `(ei + ej)/2` and
//! radius `(ei − ej)/2`; admissible (normal, shear) pairs lie between them.

use nalgebra::Matrix2;
use serde::Serialize;

use super::eigen::sym_eigen2;
use super::principal::Principal3;
use crate::CoreError;

/// One point of a Mohr circle: the strain on one face.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MohrPoint {
    /// Normal strain on the face (abscissa).
    pub normal_strain: f64,
    /// Tensor shear strain on the face (ordinate), `γ/2`.
    pub tensor_shear: f64,
    /// Engineering shear strain on the face, `γ` (radians).
    pub engineering_shear: f64,
}

/// Mohr's circle of an in-plane strain state.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Mohr2 {
    /// Centre on the normal-strain axis, `(εxx + εyy)/2`.
    pub centre: f64,
    /// Radius in tensor-shear units, `R = (e1 − e2)/2` (= maximum in-plane tensor shear).
    pub radius: f64,
    /// Point of the x face, `(εxx, εxy)`.
    pub x_face: MohrPoint,
    /// Point of the y face, `(εyy, −εxy)`.
    pub y_face: MohrPoint,
    /// Angle `θ1` of the major principal direction from +x, radians in `(−π/2, π/2]`;
    /// `None` when the circle is a point (isotropic state).
    pub principal_angle: Option<f64>,
}

fn point(normal_strain: f64, tensor_shear: f64) -> MohrPoint {
    MohrPoint {
        normal_strain,
        tensor_shear,
        engineering_shear: 2.0 * tensor_shear,
    }
}

/// Mohr's circle of a symmetric 2×2 strain; `degenerate_tol` as for the principal strains.
///
/// # Errors
/// [`CoreError::NonFinite`] (id `tensor`) for a NaN or infinite entry.
pub fn mohr2(eps: &Matrix2<f64>, degenerate_tol: f64) -> Result<Mohr2, CoreError> {
    let e = sym_eigen2(eps, degenerate_tol)?;
    let (exx, eyy, exy) = (eps[(0, 0)], eps[(1, 1)], eps[(1, 0)]);
    Ok(Mohr2 {
        centre: 0.5 * (exx + eyy),
        radius: 0.5 * (exx - eyy).hypot(2.0 * exy),
        x_face: point(exx, exy),
        y_face: point(eyy, -exy),
        principal_angle: e.angle,
    })
}

/// One of the three 3D Mohr circles.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct MohrCircle {
    /// Centre on the normal-strain axis.
    pub centre: f64,
    /// Radius in tensor-shear units (≥ 0).
    pub radius: f64,
}

/// The three Mohr circles of a 3D strain state.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Mohr3 {
    /// Circle through `e1` and `e2`.
    pub c12: MohrCircle,
    /// Circle through `e2` and `e3`.
    pub c23: MohrCircle,
    /// Circle through `e1` and `e3` (the largest; its radius is the maximum tensor shear).
    pub c13: MohrCircle,
}

fn circle(a: f64, b: f64) -> MohrCircle {
    MohrCircle {
        centre: 0.5 * (a + b),
        radius: 0.5 * (a - b).abs(),
    }
}

/// The three Mohr circles from the principal strains.
pub fn mohr3(p: &Principal3) -> Mohr3 {
    Mohr3 {
        c12: circle(p.e1, p.e2),
        c23: circle(p.e2, p.e3),
        c13: circle(p.e1, p.e3),
    }
}
