//! Everything derived from one displacement gradient `G[i][j] = ∂u_i/∂x_j`
//! (2×2 or 3×3), as the API reports it: the values come from
//! [`kinema_core::kinematics::analyze2`] / [`analyze3`](kinema_core::kinematics::analyze3)
//! and are only put into the requested strain unit and into degrees here.
//!
//! Conventions: extension positive; small strain `ε = (G+Gᵀ)/2`, rotation
//! `W = (G−Gᵀ)/2`; tensor shear `exy` and engineering shear `gxy = 2·exy` are both
//! given; principal values descending; angles in degrees counter-clockwise from +x,
//! and in an East-North-Up frame also the azimuth clockwise from north of the
//! principal axis (reduced to [0, 180) because an axis has no sense); a degenerate or
//! isotropic state has no direction (`null`) and says so.

use kinema_core::geodesy::azimuth_from_angle;
use kinema_core::kinematics::{KinematicsOptions, analyze2, analyze3};
use nalgebra::{Matrix2, Matrix3};
use serde::Serialize;
use utoipa::ToSchema;

use super::AnalysisError;
use crate::output::{ANGLE_CONVENTION, CAUTION, SHEAR_CONVENTION};
use crate::units::StrainUnit;

/// A principal strain with its direction.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct PrincipalOut {
    /// Principal strain, in `strain_unit`, extension positive.
    pub value: f64,
    /// Unit direction vector in the gradient's frame; `null` when the value coincides
    /// with another (degenerate or isotropic state: no direction is principal alone).
    pub direction: Option<Vec<f64>>,
    /// 2D: angle of the direction, degrees counter-clockwise from +x, in (−90, 90];
    /// 3D: angle of its horizontal (x-y) projection, same convention. `null` without
    /// direction (or, in 3D, for a vertical direction).
    pub angle_deg: Option<f64>,
    /// Only in an East-North-Up frame (`enu: true`): azimuth of the principal axis (its
    /// horizontal projection in 3D), degrees clockwise from north, in [0, 180).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub azimuth_deg: Option<f64>,
}

/// Maximum shear strain, labelled both ways.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct MaxShearOut {
    /// Maximum tensor shear strain `(e1 − e_min)/2`, in `strain_unit` (= the radius of
    /// the largest Mohr circle).
    pub tensor_shear: f64,
    /// Maximum engineering shear strain `γmax = e1 − e_min = 2 × tensor_shear`, in
    /// `strain_unit`.
    pub engineering_shear: f64,
    /// Normal strain on the planes of maximum shear `(e1 + e_min)/2`, in `strain_unit`.
    pub normal_strain: f64,
}

/// A Mohr circle of strain (abscissa normal strain, ordinate tensor shear).
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct MohrCircleOut {
    /// Which principal strains it passes through: `e1-e2` (the only one in 2D),
    /// `e2-e3` or `e1-e3`.
    pub through: String,
    /// Centre on the normal-strain axis, in `strain_unit`.
    pub centre: f64,
    /// Radius in tensor-shear units, in `strain_unit`.
    pub radius: f64,
}

/// Whether small-strain theory is adequate for this gradient.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct AdequacyOut {
    /// True when the quadratic terms that small strain neglects stay at or below the
    /// strain resolution.
    pub adequate: bool,
    /// The strain resolution it was judged at, dimensionless strain.
    pub strain_resolution: f64,
    /// Spurious strain `|ω|²/2` the rigid rotation alone puts into `ε`, in
    /// `strain_unit`.
    pub rotation_spurious_strain: f64,
    /// Quadratic part of the rotation-free strain `½·max(λi − 1)²`, in `strain_unit`.
    pub gradient_quadratic_strain: f64,
    /// Why it is not adequate (empty when adequate).
    pub reasons: Vec<String>,
}

/// The strain state of one displacement gradient.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct GradientReport {
    /// Unit of every strain in this response: `strain` (dimensionless) or
    /// `microstrain` (10⁻⁶).
    pub strain_unit: StrainUnit,
    /// 2 or 3.
    pub dimension: usize,
    /// The gradient as given, `G[i][j] = ∂u_i/∂x_j`, dimensionless.
    pub gradient: Vec<Vec<f64>>,
    /// Small strain tensor `ε = (G+Gᵀ)/2`, row-major, in `strain_unit`; off-diagonal
    /// entries are tensor shear strains (`exy`, …).
    pub strain_tensor: Vec<Vec<f64>>,
    /// Engineering shear strains `gxy = 2·exy` (and `gyz`, `gxz` in 3D), in
    /// `strain_unit`, in the order xy, yz, xz.
    pub engineering_shear: Vec<f64>,
    /// Small rotation tensor `W = (G−Gᵀ)/2`, row-major, radians.
    pub rotation_tensor: Vec<Vec<f64>>,
    /// 2D: small rotation `ω = (G[1][0] − G[0][1])/2`, radians, counter-clockwise
    /// positive; 3D: magnitude of the rotation vector, radians.
    pub rotation_rad: f64,
    /// 3D only: small rotation vector `w = curl(u)/2`, radians, right-hand rule.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rotation_vector_rad: Option<Vec<f64>>,
    /// Volumetric strain (areal in 2D) = trace of ε, in `strain_unit`.
    pub volumetric_strain: f64,
    /// Principal strains sorted descending (`e1 ≥ e2 [≥ e3]`) with their directions.
    pub principal: Vec<PrincipalOut>,
    /// True when two principal values coincide within the tolerance (no direction
    /// is reported for them).
    pub degenerate: bool,
    /// True when all principal values coincide (every direction is principal).
    pub isotropic: bool,
    /// Maximum shear strain.
    pub max_shear: MaxShearOut,
    /// Mohr circles: one in 2D, three in 3D.
    pub mohr: Vec<MohrCircleOut>,
    /// Green–Lagrange strain `E = (G + Gᵀ + GᵀG)/2`, row-major, in `strain_unit`.
    pub green_lagrange: Vec<Vec<f64>>,
    /// Whether small-strain theory is adequate.
    pub small_strain: AdequacyOut,
    /// How shear is named.
    pub shear_convention: String,
    /// How angles are given.
    pub angle_convention: String,
    /// Results are kinematic estimates, not a structural assessment.
    pub caution: String,
}

fn rows<const D: usize>(m: &[[f64; D]; D], f: impl Fn(f64) -> f64) -> Vec<Vec<f64>> {
    m.iter()
        .map(|r| r.iter().map(|&v| f(v)).collect())
        .collect()
}

/// Azimuth of an axis at `angle` (radians counter-clockwise from east), degrees in
/// [0, 180).
fn axis_azimuth_deg(angle: f64) -> f64 {
    let az = azimuth_from_angle(angle)
        .rem_euclid(std::f64::consts::PI)
        .to_degrees();
    if az >= 180.0 { 0.0 } else { az }
}

/// Angle in (−90°, 90°] of the axis along (x, y); `None` for a zero vector.
fn axis_angle_deg(x: f64, y: f64) -> Option<f64> {
    if x.hypot(y) <= 1e-12 {
        return None;
    }
    let mut a = y.atan2(x).to_degrees();
    if a > 90.0 {
        a -= 180.0;
    } else if a <= -90.0 {
        a += 180.0;
    }
    Some(a)
}

fn principal_out(value: f64, dir: Option<Vec<f64>>, enu: bool) -> PrincipalOut {
    let angle_deg = dir
        .as_ref()
        .and_then(|d| axis_angle_deg(d.first().copied()?, d.get(1).copied()?));
    PrincipalOut {
        value,
        azimuth_deg: if enu {
            angle_deg.map(|a| axis_azimuth_deg(a.to_radians()))
        } else {
            None
        },
        angle_deg,
        direction: dir,
    }
}

/// The report of gradient `g` (2×2 or 3×3 rows, dimensionless) in `unit`;
/// `enu` adds azimuths; `strain_resolution` (dimensionless) drives the adequacy flag.
///
/// # Errors
/// [`AnalysisError::Invalid`] for a gradient that is not 2×2 or 3×3 or has a
/// non-finite entry; [`AnalysisError::NotComputable`] when the core refuses it (e.g.
/// `det F ≤ 0`).
pub fn report(
    g: &[Vec<f64>],
    unit: StrainUnit,
    enu: bool,
    strain_resolution: f64,
) -> Result<GradientReport, AnalysisError> {
    use crate::api::problem::FieldError;
    let d = g.len();
    let mut errs = Vec::new();
    if !matches!(d, 2 | 3) {
        errs.push(FieldError::new(
            "/gradient",
            format!("the gradient is 2x2 or 3x3, not {d} rows"),
        ));
    }
    for (i, r) in g.iter().enumerate() {
        if r.len() != d {
            errs.push(FieldError::new(
                format!("/gradient/{i}"),
                format!(
                    "every row has {d} entries (a square matrix), this one {}",
                    r.len()
                ),
            ));
        }
        for (j, v) in r.iter().enumerate() {
            if !v.is_finite() {
                errs.push(FieldError::new(
                    format!("/gradient/{i}/{j}"),
                    "not a finite number",
                ));
            }
        }
    }
    if !(strain_resolution.is_finite() && strain_resolution > 0.0) {
        errs.push(FieldError::new(
            "/strain_resolution",
            "the strain resolution must be a positive finite number (dimensionless strain)",
        ));
    }
    if !errs.is_empty() {
        return Err(AnalysisError::Invalid(errs));
    }
    let opts = KinematicsOptions {
        strain_resolution,
        ..KinematicsOptions::default()
    };
    let s = |v: f64| unit.from_strain(v);
    let not = |e: kinema_core::CoreError| AnalysisError::NotComputable(e.to_string());
    let at = |i: usize, j: usize| g[i][j];
    let reasons = |r: &[kinema_core::kinematics::adequacy::AdequacyReason]| {
        r.iter().map(ToString::to_string).collect::<Vec<_>>()
    };
    if d == 2 {
        let k = analyze2(&Matrix2::from_fn(at), &opts).map_err(not)?;
        let p = &k.principal;
        let n1 = p.n1.map(|n| n.to_vec());
        let n2 = p.n2.map(|n| n.to_vec());
        Ok(GradientReport {
            strain_unit: unit,
            dimension: 2,
            gradient: rows(&k.gradient, |v| v),
            strain_tensor: rows(&k.strain_tensor, s),
            engineering_shear: vec![s(k.strain.gxy)],
            rotation_tensor: rows(&k.spin, |v| v),
            rotation_rad: k.rotation,
            rotation_vector_rad: None,
            volumetric_strain: s(k.volumetric),
            principal: vec![
                principal_out(s(p.e1), n1, enu),
                principal_out(s(p.e2), n2, enu),
            ],
            degenerate: p.isotropic,
            isotropic: p.isotropic,
            max_shear: MaxShearOut {
                tensor_shear: s(k.max_shear.tensor_shear),
                engineering_shear: s(k.max_shear.engineering_shear),
                normal_strain: s(k.max_shear.normal_strain),
            },
            mohr: vec![MohrCircleOut {
                through: "e1-e2".into(),
                centre: s(k.mohr.centre),
                radius: s(k.mohr.radius),
            }],
            green_lagrange: rows(&k.finite.green_lagrange, s),
            small_strain: AdequacyOut {
                adequate: k.adequacy.adequate,
                strain_resolution,
                rotation_spurious_strain: s(k.adequacy.rotation_spurious_strain),
                gradient_quadratic_strain: s(k.adequacy.gradient_quadratic_strain),
                reasons: reasons(&k.adequacy.reasons),
            },
            shear_convention: SHEAR_CONVENTION.into(),
            angle_convention: ANGLE_CONVENTION.into(),
            caution: CAUTION.into(),
        })
    } else {
        let k = analyze3(&Matrix3::from_fn(at), &opts).map_err(not)?;
        let p = &k.principal;
        let dir = |n: Option<[f64; 3]>| n.map(|n| n.to_vec());
        let w = k.rotation_vector;
        let circle = |name: &str, c: &kinema_core::kinematics::mohr::MohrCircle| MohrCircleOut {
            through: name.into(),
            centre: s(c.centre),
            radius: s(c.radius),
        };
        Ok(GradientReport {
            strain_unit: unit,
            dimension: 3,
            gradient: rows(&k.gradient, |v| v),
            strain_tensor: rows(&k.strain_tensor, s),
            engineering_shear: vec![s(k.strain.gxy), s(k.strain.gyz), s(k.strain.gxz)],
            rotation_tensor: rows(&k.spin, |v| v),
            rotation_rad: (w[0] * w[0] + w[1] * w[1] + w[2] * w[2]).sqrt(),
            rotation_vector_rad: Some(w.to_vec()),
            volumetric_strain: s(k.volumetric),
            principal: vec![
                principal_out(s(p.e1), dir(p.n1), enu),
                principal_out(s(p.e2), dir(p.n2), enu),
                principal_out(s(p.e3), dir(p.n3), enu),
            ],
            degenerate: p.degenerate,
            isotropic: p.isotropic,
            max_shear: MaxShearOut {
                tensor_shear: s(k.max_shear.tensor_shear),
                engineering_shear: s(k.max_shear.engineering_shear),
                normal_strain: s(k.max_shear.normal_strain),
            },
            mohr: vec![
                circle("e1-e2", &k.mohr.c12),
                circle("e2-e3", &k.mohr.c23),
                circle("e1-e3", &k.mohr.c13),
            ],
            green_lagrange: rows(&k.finite.green_lagrange, s),
            small_strain: AdequacyOut {
                adequate: k.adequacy.adequate,
                strain_resolution,
                rotation_spurious_strain: s(k.adequacy.rotation_spurious_strain),
                gradient_quadratic_strain: s(k.adequacy.gradient_quadratic_strain),
                reasons: reasons(&k.adequacy.reasons),
            },
            shear_convention: SHEAR_CONVENTION.into(),
            angle_convention: ANGLE_CONVENTION.into(),
            caution: CAUTION.into(),
        })
    }
}
