//! Small (infinitesimal) strain and rotation from a displacement gradient.
//!
//! `ε = (G+Gᵀ)/2` (dimensionless), `W = (G−Gᵀ)/2` (radians for small angles).
//! Rotation: 2D `ω = (G[1][0] − G[0][1])/2`, counter-clockwise positive; 3D rotation
//! vector `w = curl(u)/2 = (W[2][1], W[0][2], W[1][0])`, right-hand rule.
//!
//! Invariants (of the 3×3 tensor; see [`embed2`] for 2D):
//! `I1 = tr ε`, `I2 = ½((tr ε)² − ε:ε) = e1e2 + e2e3 + e3e1` (sum of principal minors,
//! positive convention), `I3 = det ε`; deviator `e′ = ε − (I1/3)·I`,
//! `J2 = ½ e′:e′ = I1²/3 − I2 ≥ 0`, `J3 = det e′`.

use nalgebra::{Matrix2, Matrix3, SMatrix};
use serde::Serialize;

/// Small strain tensor `ε = (G+Gᵀ)/2` of a `D×D` gradient (dimensionless).
pub fn small_strain<const D: usize>(g: &SMatrix<f64, D, D>) -> SMatrix<f64, D, D> {
    (g + g.transpose()) * 0.5
}

/// Infinitesimal rotation (spin) tensor `W = (G−Gᵀ)/2` of a `D×D` gradient.
pub fn spin<const D: usize>(g: &SMatrix<f64, D, D>) -> SMatrix<f64, D, D> {
    (g - g.transpose()) * 0.5
}

/// 2D small rotation `ω = (G[1][0] − G[0][1])/2`, radians, counter-clockwise positive.
pub fn rotation_angle2(g: &Matrix2<f64>) -> f64 {
    0.5 * (g[(1, 0)] - g[(0, 1)])
}

/// 3D small rotation vector `w = curl(u)/2`, radians, right-hand rule:
/// `w = ((G[2][1]−G[1][2])/2, (G[0][2]−G[2][0])/2, (G[1][0]−G[0][1])/2)`.
pub fn rotation_vector3(g: &Matrix3<f64>) -> [f64; 3] {
    [
        0.5 * (g[(2, 1)] - g[(1, 2)]),
        0.5 * (g[(0, 2)] - g[(2, 0)]),
        0.5 * (g[(1, 0)] - g[(0, 1)]),
    ]
}

/// Embeds an in-plane 2×2 strain as the 3×3 tensor with `ε_zz = ε_xz = ε_yz = 0`
/// (plane strain). Kinema uses this embedding for every 2D quantity that needs a
/// third dimension: invariants, deviator, octahedral and von Mises strain.
pub fn embed2(eps: &Matrix2<f64>) -> Matrix3<f64> {
    Matrix3::new(
        eps[(0, 0)],
        eps[(0, 1)],
        0.0,
        eps[(1, 0)],
        eps[(1, 1)],
        0.0,
        0.0,
        0.0,
        0.0,
    )
}

/// Volumetric strain `tr ε` (dimensionless). In 2D this is the areal strain `exx + eyy`.
pub fn volumetric<const D: usize>(eps: &SMatrix<f64, D, D>) -> f64 {
    eps.trace()
}

/// Deviatoric part `e′ = ε − (tr ε / 3)·I` of a 3×3 strain (dimensionless).
pub fn deviator3(eps: &Matrix3<f64>) -> Matrix3<f64> {
    eps - Matrix3::identity() * (eps.trace() / 3.0)
}

/// Strain invariants of a 3×3 tensor (conventions in the module doc).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Invariants {
    /// `I1 = tr ε` (dimensionless).
    pub i1: f64,
    /// `I2 = ½((tr ε)² − ε:ε)` = sum of principal 2×2 minors (strain²).
    pub i2: f64,
    /// `I3 = det ε` (strain³).
    pub i3: f64,
    /// `J2 = ½ e′:e′` of the deviator (strain²), ≥ 0.
    pub j2: f64,
    /// `J3 = det e′` of the deviator (strain³).
    pub j3: f64,
}

/// Invariants of a symmetric 3×3 strain tensor.
pub fn invariants3(eps: &Matrix3<f64>) -> Invariants {
    let i1 = eps.trace();
    let i2 = eps[(0, 0)] * eps[(1, 1)] + eps[(1, 1)] * eps[(2, 2)] + eps[(0, 0)] * eps[(2, 2)]
        - eps[(0, 1)] * eps[(1, 0)]
        - eps[(1, 2)] * eps[(2, 1)]
        - eps[(0, 2)] * eps[(2, 0)];
    let dev = deviator3(eps);
    Invariants {
        i1,
        i2,
        i3: eps.determinant(),
        j2: 0.5 * dev.component_mul(&dev).sum(),
        j3: dev.determinant(),
    }
}

/// In-plane small strain components: tensor and engineering shear both named.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Strain2 {
    /// Normal strain along x, `εxx = G[0][0]`.
    pub exx: f64,
    /// Normal strain along y, `εyy = G[1][1]`.
    pub eyy: f64,
    /// Tensor shear strain `εxy = (G[0][1] + G[1][0])/2`.
    pub exy: f64,
    /// Engineering shear strain `γxy = 2·εxy` (decrease of the right angle between
    /// x and y, radians).
    pub gxy: f64,
}

impl Strain2 {
    /// Components of a symmetric 2×2 strain tensor.
    pub fn from_tensor(eps: &Matrix2<f64>) -> Self {
        Self {
            exx: eps[(0, 0)],
            eyy: eps[(1, 1)],
            exy: eps[(0, 1)],
            gxy: 2.0 * eps[(0, 1)],
        }
    }
}

/// 3D small strain components: tensor (`e..`) and engineering (`g..` = 2·e..) shear.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Strain3 {
    /// Normal strain along x.
    pub exx: f64,
    /// Normal strain along y.
    pub eyy: f64,
    /// Normal strain along z.
    pub ezz: f64,
    /// Tensor shear strain εxy.
    pub exy: f64,
    /// Tensor shear strain εyz.
    pub eyz: f64,
    /// Tensor shear strain εxz.
    pub exz: f64,
    /// Engineering shear strain γxy = 2·εxy (radians).
    pub gxy: f64,
    /// Engineering shear strain γyz = 2·εyz (radians).
    pub gyz: f64,
    /// Engineering shear strain γxz = 2·εxz (radians).
    pub gxz: f64,
}

impl Strain3 {
    /// Components of a symmetric 3×3 strain tensor.
    pub fn from_tensor(eps: &Matrix3<f64>) -> Self {
        Self {
            exx: eps[(0, 0)],
            eyy: eps[(1, 1)],
            ezz: eps[(2, 2)],
            exy: eps[(0, 1)],
            eyz: eps[(1, 2)],
            exz: eps[(0, 2)],
            gxy: 2.0 * eps[(0, 1)],
            gyz: 2.0 * eps[(1, 2)],
            gxz: 2.0 * eps[(0, 2)],
        }
    }
}
