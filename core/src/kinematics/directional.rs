//! Strain along chosen directions and on chosen planes, and change of frame.
//!
//! Small-strain formulas, strain dimensionless, angles radians:
//! - normal strain along unit `n`: `ε_n = nᵀεn`;
//! - shear between two material directions `a`, `b` (unit, initial angle `θ0`,
//!   `cos θ0 = a·b`): the **engineering shear** is the *decrease* of the angle between
//!   the two lines, `γ_ab = (2·aᵀεb − (ε_a + ε_b)·cos θ0) / sin θ0` (first order in ε),
//!   positive when the angle closes. For perpendicular `a`, `b` this is `2·aᵀεb`,
//!   and the **tensor shear** is `γ_ab/2` (= `aᵀεb` when perpendicular);
//! - change of frame: `ε′ = Q·ε·Qᵀ`, with the rows of `Q` the new unit axes written in
//!   the old frame (proper rotation, `det Q = +1`). The same applies to `G` itself.
//!
//! Directions need not be unit vectors: they are normalised here; zero, NaN or
//! infinite directions, and tensors with NaN or infinite entries, are rejected with
//! a typed error.

use nalgebra::{Matrix2, Matrix3, SMatrix, SVector, Vector3};
use serde::Serialize;

use super::check_finite;
use crate::CoreError;

/// Tolerance on `‖QQᵀ − I‖` and `|det Q − 1|` accepted for a frame.
pub const FRAME_TOL: f64 = 1e-9;

/// Smallest `sin θ0` between two directions for which a shear between them is defined.
pub const MIN_SIN_ANGLE: f64 = 1e-6;

fn unit<const D: usize>(dir: &[f64; D], name: &'static str) -> Result<SVector<f64, D>, CoreError> {
    let v = SVector::<f64, D>::from_column_slice(dir);
    if v.iter().any(|c| !c.is_finite()) {
        return Err(CoreError::NonFinite {
            id: name.into(),
            field: "direction component",
        });
    }
    let n = v.norm();
    if n == 0.0 || !n.is_finite() {
        return Err(CoreError::InvalidParameter {
            name,
            reason: "direction has zero (or unrepresentable) length".into(),
        });
    }
    Ok(v / n)
}

/// Normal strain `nᵀεn` along `dir` (any non-zero length; normalised here).
///
/// # Errors
/// [`CoreError::NonFinite`] / [`CoreError::InvalidParameter`] (`direction`) for a bad direction.
pub fn normal_strain<const D: usize>(
    eps: &SMatrix<f64, D, D>,
    dir: &[f64; D],
) -> Result<f64, CoreError> {
    check_finite(eps.iter(), "strain", "strain entry")?;
    let n = unit(dir, "direction")?;
    Ok((n.transpose() * eps * n)[(0, 0)])
}

/// Shear strain between two material directions (small strain).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ShearBetween {
    /// Initial angle between the two directions, radians in `(0, π)`.
    pub initial_angle: f64,
    /// Engineering shear strain: decrease of the angle between the two lines, radians.
    pub engineering_shear: f64,
    /// Tensor shear strain, half the engineering shear.
    pub tensor_shear: f64,
    /// Normal strain along the first direction.
    pub normal_strain_a: f64,
    /// Normal strain along the second direction.
    pub normal_strain_b: f64,
}

/// Shear strain between directions `a` and `b` (general or perpendicular pair).
///
/// # Errors
/// Bad direction (as [`normal_strain`], names `direction_a`, `direction_b`), or
/// [`CoreError::InvalidParameter`] (`directions`) when they are (nearly) parallel
/// (`sin θ0 <` [`MIN_SIN_ANGLE`]).
pub fn shear_between<const D: usize>(
    eps: &SMatrix<f64, D, D>,
    a: &[f64; D],
    b: &[f64; D],
) -> Result<ShearBetween, CoreError> {
    check_finite(eps.iter(), "strain", "strain entry")?;
    let a = unit(a, "direction_a")?;
    let b = unit(b, "direction_b")?;
    let cos0 = a.dot(&b).clamp(-1.0, 1.0);
    // sin θ0 = length of a's component perpendicular to b (accurate near 0 and π).
    let sin0 = ((a - b * cos0).norm()).min(1.0);
    if sin0 < MIN_SIN_ANGLE {
        return Err(CoreError::InvalidParameter {
            name: "directions",
            reason: format!("the two directions are parallel (sin θ0 = {sin0:.3e})"),
        });
    }
    let eab = (a.transpose() * eps * b)[(0, 0)];
    let ea = (a.transpose() * eps * a)[(0, 0)];
    let eb = (b.transpose() * eps * b)[(0, 0)];
    let gamma = (2.0 * eab - (ea + eb) * cos0) / sin0;
    Ok(ShearBetween {
        initial_angle: sin0.atan2(cos0),
        engineering_shear: gamma,
        tensor_shear: 0.5 * gamma,
        normal_strain_a: ea,
        normal_strain_b: eb,
    })
}

/// Normal and shear strain on a line (2D) with a given unit normal.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PlaneStrain2 {
    /// Unit normal `n` of the plane (normalised input).
    pub normal: [f64; 2],
    /// In-plane direction `t = n` turned +90° (counter-clockwise).
    pub tangent: [f64; 2],
    /// Normal strain `nᵀεn`.
    pub normal_strain: f64,
    /// Signed tensor shear `nᵀεt`.
    pub tensor_shear: f64,
    /// Signed engineering shear `2·nᵀεt`: decrease of the right angle between n and t.
    pub engineering_shear: f64,
}

/// Strain on the plane (line) with normal `normal` in 2D.
///
/// # Errors
/// Bad direction (name `normal`).
pub fn on_plane2(eps: &Matrix2<f64>, normal: &[f64; 2]) -> Result<PlaneStrain2, CoreError> {
    check_finite(eps.iter(), "strain", "strain entry")?;
    let n = unit(normal, "normal")?;
    let t = nalgebra::Vector2::new(-n[1], n[0]);
    let en = (n.transpose() * eps * n)[(0, 0)];
    let ent = (n.transpose() * eps * t)[(0, 0)];
    Ok(PlaneStrain2 {
        normal: [n[0], n[1]],
        tangent: [t[0], t[1]],
        normal_strain: en,
        tensor_shear: ent,
        engineering_shear: 2.0 * ent,
    })
}

/// Normal strain and resolved shear strain on a plane in 3D.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct PlaneStrain3 {
    /// Unit normal `n` of the plane (normalised input).
    pub normal: [f64; 3],
    /// Normal strain `nᵀεn`.
    pub normal_strain: f64,
    /// Magnitude of the resolved tensor shear, `|εn − (nᵀεn)·n|` ≥ 0.
    pub tensor_shear: f64,
    /// Magnitude of the resolved engineering shear, twice the tensor shear (radians).
    pub engineering_shear: f64,
    /// Unit in-plane direction `s` of the resolved shear (`nᵀεs` maximal); `None` when
    /// there is no shear on this plane (within 1e-15 of the tensor's norm).
    pub shear_direction: Option<[f64; 3]>,
}

/// Strain on the plane with normal `normal` in 3D: normal strain and the resolved
/// shear (the shear component along `s` is `nᵀεs`; it is largest along `shear_direction`).
///
/// # Errors
/// Bad direction (name `normal`).
pub fn on_plane3(eps: &Matrix3<f64>, normal: &[f64; 3]) -> Result<PlaneStrain3, CoreError> {
    check_finite(eps.iter(), "strain", "strain entry")?;
    let n = unit(normal, "normal")?;
    let t: Vector3<f64> = eps * n;
    let en = n.dot(&t);
    let s = t - n * en;
    let mag = s.norm();
    let scale = eps.abs().max();
    let dir = (mag > 1e-15 * scale && mag > 0.0).then(|| {
        let u = s / mag;
        [u[0], u[1], u[2]]
    });
    Ok(PlaneStrain3 {
        normal: [n[0], n[1], n[2]],
        normal_strain: en,
        tensor_shear: mag,
        engineering_shear: 2.0 * mag,
        shear_direction: dir,
    })
}

/// Rotation matrix of a 2D frame whose x′ axis is at `angle` radians counter-clockwise
/// from +x: rows are the new axes, `Q = [[cos, sin], [−sin, cos]]`.
pub fn frame2(angle: f64) -> Matrix2<f64> {
    let (s, c) = angle.sin_cos();
    Matrix2::new(c, s, -s, c)
}

/// Right-handed 3D frame with x′ along `x_axis` and z′ as close as possible to `up`
/// (e.g. a bridge deck axis and the vertical). Rows of the result are x′, y′, z′.
///
/// # Errors
/// Bad directions (names `x_axis`, `up`), or [`CoreError::InvalidParameter`] (`up`)
/// when `up` is parallel to `x_axis`.
pub fn frame3(x_axis: &[f64; 3], up: &[f64; 3]) -> Result<Matrix3<f64>, CoreError> {
    let x = unit(x_axis, "x_axis")?;
    let u = unit(up, "up")?;
    let z_raw = u - x * x.dot(&u);
    let zn = z_raw.norm();
    if zn < MIN_SIN_ANGLE {
        return Err(CoreError::InvalidParameter {
            name: "up",
            reason: "`up` is parallel to `x_axis`; the frame is not determined".into(),
        });
    }
    let z = z_raw / zn;
    let y = z.cross(&x);
    Ok(Matrix3::from_rows(&[
        x.transpose(),
        y.transpose(),
        z.transpose(),
    ]))
}

fn check_frame<const D: usize>(q: &SMatrix<f64, D, D>, det: f64) -> Result<(), CoreError> {
    if q.iter().any(|v| !v.is_finite()) {
        return Err(CoreError::NonFinite {
            id: "frame".into(),
            field: "rotation entry",
        });
    }
    let orth = (q * q.transpose() - SMatrix::<f64, D, D>::identity())
        .abs()
        .max();
    if orth > FRAME_TOL || (det - 1.0).abs() > FRAME_TOL {
        return Err(CoreError::InvalidParameter {
            name: "frame",
            reason: format!("not a proper rotation (max |QQᵀ − I| = {orth:.3e}, det Q = {det:.6})"),
        });
    }
    Ok(())
}

/// Tensor (strain or gradient) in a new 2D frame: `Q·T·Qᵀ`, rows of `Q` = new axes.
///
/// # Errors
/// [`CoreError::InvalidParameter`] (`frame`) if `Q` is not a proper rotation.
pub fn transform2(t: &Matrix2<f64>, q: &Matrix2<f64>) -> Result<Matrix2<f64>, CoreError> {
    check_finite(t.iter(), "tensor", "tensor entry")?;
    check_frame(q, q.determinant())?;
    Ok(q * t * q.transpose())
}

/// Tensor (strain or gradient) in a new 3D frame: `Q·T·Qᵀ`, rows of `Q` = new axes.
///
/// # Errors
/// [`CoreError::InvalidParameter`] (`frame`) if `Q` is not a proper rotation.
pub fn transform3(t: &Matrix3<f64>, q: &Matrix3<f64>) -> Result<Matrix3<f64>, CoreError> {
    check_finite(t.iter(), "tensor", "tensor entry")?;
    check_frame(q, q.determinant())?;
    Ok(q * t * q.transpose())
}
