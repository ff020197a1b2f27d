//! Is small-strain theory adequate for this gradient at the caller's strain resolution?
//!
//! The small strain `ε` drops the quadratic term of the Green–Lagrange strain,
//! `E − ε = ½GᵀG`. Two sources feed that term and are judged apart:
//! - **rotation**: the rotation part `½WᵀW` of the quadratic term, present even for a
//!   rigid rotation; its largest eigenvalue is `ω²/2` (2D, `ω = (G[1][0] − G[0][1])/2`)
//!   or `|w|²/2` (3D). A rigid rotation puts that much spurious strain into `ε`
//!   (`ε = (cos θ − 1)·I`): 0.3° (`ω = 5.236e-3 rad`) gives `1.37e-5`, about
//!   14 microstrain;
//! - **gradient** (the strain itself): with the rotation taken out by the polar
//!   decomposition `F = R·U`, `E = (U − I) + ½(U − I)²`; the quadratic part
//!   `½(U − I)²` has largest eigenvalue `½·max(λi − 1)²`. It is zero for any rigid
//!   rotation, so the two reasons do not mix.
//!
//! Small strain is adequate when both are at most `strain_resolution`. The whole
//! quadratic term `‖½GᵀG‖` (spectral norm) is reported as well.

use nalgebra::{Matrix2, Matrix3};
use serde::Serialize;

use super::eigen::{sym_spectral2, sym_spectral3};
use super::finite::{finite2, finite3};
use super::small::{rotation_angle2, rotation_vector3};
use crate::CoreError;

/// Why small-strain theory is not adequate.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "reason", rename_all = "snake_case")]
pub enum AdequacyReason {
    /// The rigid rotation alone puts more spurious strain into `ε` than the resolution.
    RotationTooLarge {
        /// Magnitude of the small rotation (`|ω|` or `|w|`), radians.
        rotation: f64,
        /// Spurious strain `|ω|²/2` (dimensionless).
        spurious_strain: f64,
        /// The resolution it was compared with (dimensionless).
        strain_resolution: f64,
    },
    /// The quadratic part of the rotation-free strain exceeds the resolution.
    GradientTooLarge {
        /// `½·max(λi − 1)²` (dimensionless).
        quadratic_strain: f64,
        /// The resolution it was compared with (dimensionless).
        strain_resolution: f64,
    },
}

impl std::fmt::Display for AdequacyReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::RotationTooLarge {
                rotation,
                spurious_strain,
                strain_resolution,
            } => write!(
                f,
                "rotation too large: {rotation:.3e} rad gives spurious strain {spurious_strain:.3e} > resolution {strain_resolution:.3e}"
            ),
            Self::GradientTooLarge {
                quadratic_strain,
                strain_resolution,
            } => write!(
                f,
                "gradient too large: quadratic strain term {quadratic_strain:.3e} > resolution {strain_resolution:.3e}"
            ),
        }
    }
}

/// Small-strain adequacy verdict with the numbers behind it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Adequacy {
    /// True when both quadratic parts are at most `strain_resolution`.
    pub adequate: bool,
    /// The caller's strain resolution (dimensionless).
    pub strain_resolution: f64,
    /// Magnitude of the small rotation `|ω|` (2D) or `|w|` (3D), radians.
    pub rotation: f64,
    /// Rotation part `|ω|²/2` of `E − ε` (dimensionless).
    pub rotation_spurious_strain: f64,
    /// Quadratic part of the rotation-free strain, `½·max(λi − 1)²` (dimensionless).
    pub gradient_quadratic_strain: f64,
    /// Spectral norm of the whole quadratic term `½GᵀG = E − ε` (dimensionless).
    pub total_quadratic_strain: f64,
    /// Reasons, empty when adequate.
    pub reasons: Vec<AdequacyReason>,
}

fn verdict(rotation: f64, strain_part: f64, total: f64, resolution: f64) -> Adequacy {
    let spurious = 0.5 * rotation * rotation;
    let mut reasons = Vec::new();
    if spurious > resolution {
        reasons.push(AdequacyReason::RotationTooLarge {
            rotation,
            spurious_strain: spurious,
            strain_resolution: resolution,
        });
    }
    if strain_part > resolution {
        reasons.push(AdequacyReason::GradientTooLarge {
            quadratic_strain: strain_part,
            strain_resolution: resolution,
        });
    }
    Adequacy {
        adequate: reasons.is_empty(),
        strain_resolution: resolution,
        rotation,
        rotation_spurious_strain: spurious,
        gradient_quadratic_strain: strain_part,
        total_quadratic_strain: total,
        reasons,
    }
}

fn norm2(m: &Matrix2<f64>) -> f64 {
    let (v, _) = sym_spectral2(m);
    v[0].abs().max(v[1].abs())
}

fn norm3(m: &Matrix3<f64>) -> Result<f64, CoreError> {
    let (v, _) = sym_spectral3(m)?;
    Ok(v.iter().fold(0.0_f64, |a, x| a.max(x.abs())))
}

/// `½·max(λi − 1)²` over the principal stretches.
fn stretch_quadratic(stretches: &[f64]) -> f64 {
    stretches
        .iter()
        .fold(0.0_f64, |a, l| a.max(0.5 * (l - 1.0) * (l - 1.0)))
}

/// Verdict for a 2D gradient whose principal stretches are already known.
pub(crate) fn adequacy2_with(g: &Matrix2<f64>, stretches: &[f64; 2], res: f64) -> Adequacy {
    let quad = g.transpose() * g * 0.5;
    verdict(
        rotation_angle2(g).abs(),
        stretch_quadratic(stretches),
        norm2(&quad),
        res,
    )
}

/// Verdict for a 3D gradient whose principal stretches are already known.
pub(crate) fn adequacy3_with(
    g: &Matrix3<f64>,
    stretches: &[f64; 3],
    res: f64,
) -> Result<Adequacy, CoreError> {
    let quad = g.transpose() * g * 0.5;
    let rv = rotation_vector3(g);
    let rotation = (rv[0] * rv[0] + rv[1] * rv[1] + rv[2] * rv[2]).sqrt();
    Ok(verdict(
        rotation,
        stretch_quadratic(stretches),
        norm3(&quad)?,
        res,
    ))
}

/// Small-strain adequacy of a 2D gradient at `strain_resolution` (dimensionless).
///
/// # Errors
/// As [`finite2`] (the stretches come from the polar decomposition).
pub fn adequacy2(g: &Matrix2<f64>, strain_resolution: f64) -> Result<Adequacy, CoreError> {
    let f = finite2(g)?;
    Ok(adequacy2_with(g, &f.principal_stretches, strain_resolution))
}

/// Small-strain adequacy of a 3D gradient at `strain_resolution` (dimensionless).
///
/// # Errors
/// As [`finite3`].
pub fn adequacy3(g: &Matrix3<f64>, strain_resolution: f64) -> Result<Adequacy, CoreError> {
    let f = finite3(g)?;
    adequacy3_with(g, &f.principal_stretches, strain_resolution)
}
