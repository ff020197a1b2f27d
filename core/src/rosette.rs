//! Strain-gauge rosettes: from gauge readings to the plane strain state at the rosette.
//!
//! ## Conventions
//! - Strain is dimensionless (strain, not microstrain). Angles are radians, measured
//!   counter-clockwise from the rosette's own x axis.
//! - A gauge at angle θ reads the normal strain
//!   `ε(θ) = exx·cos²θ + eyy·sin²θ + 2·exy·sinθ·cosθ`
//!   `     = exx·cos²θ + eyy·sin²θ + gxy·sinθ·cosθ`,
//!   with tensor shear `exy` and engineering shear `gxy = 2·exy`
//!   (Source: Gere & Goodno, Mechanics of Materials, §7.7, strain transformation).
//! - Principal values sorted descending; the principal direction is `None` when the
//!   strain state is isotropic (see [`ISOTROPY_RTOL`]).
//!
//! ## Corrections and their order
//! Each correction is optional; the ones applied are listed in the result with their
//! values. They are applied to each gauge in this order:
//! 1. **Zero reading** (baseline) subtracted: `r1 = reading − zero`.
//! 2. **Thermal output** subtracted: `r2 = r1 − (P(T) − P(T0))`, where `P` is the
//!    user's polynomial of apparent strain in temperature (°C), `T` the temperature at
//!    the reading and `T0` the temperature at the zero reading (`P(T0)` is taken as 0
//!    when `T0` is not given). The polynomial is taken in the same terms as the
//!    indicated readings (at the instrument's gauge-factor setting).
//! 3. **Gauge factor**: `r3 = r2 · k_instr / k_gauge`.
//! 4. **Transverse sensitivity** `K_t` (calibrated on a material of Poisson ratio `ν0`)
//!    enters the solve itself, see [`TransverseSensitivity`].

use std::collections::HashSet;

use nalgebra::{DMatrix, DVector, Matrix3};
use serde::{Deserialize, Serialize};

use crate::error::{CoreError, Result};
use crate::points::validate_id;

/// Largest accepted condition number (ratio of the largest to the smallest singular
/// value) of the rosette's design matrix. A reading error can be amplified by up to
/// this factor in the strain state. Rectangular and delta rosettes have condition
/// numbers 2 and √2 (without transverse sensitivity); a layout with two gauges 0.5°
/// apart and a third at 90° has about 115, with 0.05° apart about 1 150 (rejected).
/// The value 1 000 is our choice (common practice for a numerical rank decision).
pub const MAX_CONDITION: f64 = 1.0e3;

/// Two gauge directions closer than this (radians, modulo π) are treated as the same
/// direction when counting distinct directions.
pub const ANGLE_TOL: f64 = 1.0e-9;

/// A strain state counts as isotropic (no meaningful principal direction) when the
/// Mohr-circle radius is at most this fraction of `max(|e1|, |e2|)`, or both are zero.
pub const ISOTROPY_RTOL: f64 = 1.0e-9;

/// Number of gauges needed for a plane strain state.
pub const MIN_GAUGES: usize = 3;

/// One gauge of a rosette.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Gauge {
    /// Gauge identifier, unique within the rosette (1–64 chars of `A-Za-z0-9._-`).
    pub id: String,
    /// Gauge direction, radians counter-clockwise from the rosette's x axis.
    pub angle: f64,
    /// Indicated strain at the instrument's gauge-factor setting (dimensionless).
    pub reading: f64,
    /// Zero reading (baseline) of this gauge, indicated strain; subtracted first.
    #[serde(default)]
    pub zero: Option<f64>,
}

impl Gauge {
    /// A gauge without zero reading.
    pub fn new(id: impl Into<String>, angle: f64, reading: f64) -> Self {
        Self {
            id: id.into(),
            angle,
            reading,
            zero: None,
        }
    }

    /// The same gauge with a zero reading (indicated strain).
    pub fn with_zero(mut self, zero: f64) -> Self {
        self.zero = Some(zero);
        self
    }
}

/// Gauge-factor correction: the instrument was set to `instrument`, the gauge has
/// `gauge`; the strain is `ε = ε_ind · instrument / gauge`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct GaugeFactor {
    /// Gauge-factor setting of the instrument (dimensionless, > 0).
    pub instrument: f64,
    /// Gauge factor of the gauges (dimensionless, > 0).
    pub gauge: f64,
}

/// Transverse sensitivity of the gauges.
///
/// Model (Source: Dally & Riley, Experimental Stress Analysis, 4th ed., chapter on
/// strain-gauge rosettes / transverse sensitivity): a gauge calibrated in a uniaxial
/// stress field on a material of Poisson ratio `ν0` indicates
/// `ε'_a = (ε_a + K_t·ε_t) / (1 − ν0·K_t)`, where `ε_t` is the strain along the gauge's
/// transverse direction. For the orthogonal pair of a rectangular rosette this
/// inverts to the textbook correction
/// `ε_a = (1 − ν0·K_t)(ε'_a − K_t·ε'_t) / (1 − K_t²)`.
///
/// General angles: the transverse direction of a gauge at θ is θ + 90°, and
/// `ε(θ) + ε(θ + 90°) = exx + eyy` (first strain invariant), so
/// `ε'(θ) = [(1 − K_t)·ε(θ) + K_t·(exx + eyy)] / (1 − ν0·K_t)`.
/// This is still linear in `(exx, eyy, exy)`, so it is built into the design matrix
/// and holds for any layout and for least squares. All gauges share one `K_t`.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TransverseSensitivity {
    /// Transverse sensitivity coefficient `K_t` (dimensionless, |K_t| < 1).
    pub kt: f64,
    /// Poisson ratio `ν0` of the calibration material (dimensionless, −1 < ν0 < 0.5).
    pub nu0: f64,
}

/// Thermal output: apparent strain `P(T) = Σ c_i · T^i` (T in °C, strain per °C^i).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ThermalOutput {
    /// Polynomial coefficients `c_0, c_1, …` (ascending powers; strain / °C^i).
    pub coefficients: Vec<f64>,
    /// Temperature at the reading, °C.
    pub temperature: f64,
    /// Temperature at the zero reading, °C; when given, `P(T0)` is subtracted from
    /// `P(T)` so that only the change of the thermal output since the zero is removed.
    #[serde(default)]
    pub reference_temperature: Option<f64>,
}

impl ThermalOutput {
    /// Apparent strain `P(T) − P(T0)` (or `P(T)` without `T0`), dimensionless.
    pub fn apparent_strain(&self) -> f64 {
        let p = |t: f64| {
            self.coefficients
                .iter()
                .rev()
                .fold(0.0, |acc, c| acc * t + c)
        };
        p(self.temperature) - self.reference_temperature.map_or(0.0, p)
    }
}

/// The optional corrections of one rosette reading.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct Corrections {
    /// Gauge-factor conversion, step 3.
    #[serde(default)]
    pub gauge_factor: Option<GaugeFactor>,
    /// Transverse sensitivity, built into the solve, step 4.
    #[serde(default)]
    pub transverse: Option<TransverseSensitivity>,
    /// Thermal output, step 2.
    #[serde(default)]
    pub thermal: Option<ThermalOutput>,
}

/// A correction that was applied, with its values.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "correction", rename_all = "snake_case")]
pub enum AppliedCorrection {
    /// Zero readings subtracted (step 1): the gauges that had one, and the values.
    ZeroReading {
        /// Gauge IDs, in input order.
        gauges: Vec<String>,
        /// Their zero readings (indicated strain).
        zero: Vec<f64>,
    },
    /// Thermal output subtracted (step 2).
    ThermalOutput {
        /// Temperature at the reading, °C.
        temperature: f64,
        /// Temperature at the zero reading, °C, if given.
        reference_temperature: Option<f64>,
        /// Apparent strain subtracted from every gauge (dimensionless).
        apparent_strain: f64,
    },
    /// Gauge-factor conversion (step 3).
    GaugeFactor {
        /// Instrument setting.
        instrument: f64,
        /// Gauge factor of the gauges.
        gauge: f64,
        /// Factor applied, `instrument / gauge`.
        ratio: f64,
    },
    /// Transverse sensitivity built into the solve (step 4).
    TransverseSensitivity {
        /// `K_t`.
        kt: f64,
        /// `ν0` of the calibration.
        nu0: f64,
    },
}

/// A plane strain state at the rosette, in the rosette's frame (dimensionless).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct PlaneStrain {
    /// Normal strain along x.
    pub exx: f64,
    /// Normal strain along y.
    pub eyy: f64,
    /// Tensor shear strain `exy` (half the engineering shear).
    pub exy: f64,
}

impl PlaneStrain {
    /// Engineering shear strain `gxy = 2·exy`.
    pub fn gxy(&self) -> f64 {
        2.0 * self.exy
    }

    /// Normal strain along the direction `theta` (radians CCW from x):
    /// `exx·cos²θ + eyy·sin²θ + 2·exy·sinθ·cosθ`.
    pub fn normal_strain(&self, theta: f64) -> f64 {
        let (s, c) = theta.sin_cos();
        self.exx * c * c + self.eyy * s * s + 2.0 * self.exy * s * c
    }

    /// Principal values and direction by the closed form of the 2D Mohr circle.
    pub fn principal(&self) -> Principal2 {
        let centre = 0.5 * (self.exx + self.eyy);
        let half_diff = 0.5 * (self.exx - self.eyy);
        let radius = half_diff.hypot(self.exy);
        let e1 = centre + radius;
        let e2 = centre - radius;
        let scale = e1.abs().max(e2.abs());
        let isotropic = radius <= ISOTROPY_RTOL * scale || scale == 0.0;
        let theta_p = if isotropic {
            None
        } else {
            Some(0.5 * (2.0 * self.exy).atan2(self.exx - self.eyy))
        };
        Principal2 {
            e1,
            e2,
            theta_p,
            isotropic,
            max_exy: radius,
            max_gxy: 2.0 * radius,
            centre,
        }
    }
}

/// Principal strains of a plane strain state (2D closed form).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Principal2 {
    /// Larger principal strain, `centre + radius`.
    pub e1: f64,
    /// Smaller principal strain, `centre − radius`.
    pub e2: f64,
    /// Direction of `e1`, radians CCW from x, in (−π/2, π/2]:
    /// `θp = ½·atan2(2·exy, exx − eyy)`. `None` when isotropic.
    pub theta_p: Option<f64>,
    /// True when `e1 = e2` to [`ISOTROPY_RTOL`]; then no direction is given.
    pub isotropic: bool,
    /// Largest in-plane tensor shear strain, the Mohr-circle radius.
    pub max_exy: f64,
    /// Largest in-plane engineering shear strain, `2·max_exy`.
    pub max_gxy: f64,
    /// Mohr-circle centre `(exx + eyy)/2`.
    pub centre: f64,
}

/// How the state was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SolveKind {
    /// Three gauges: exact 3×3 solve, no redundancy.
    Exact,
    /// More than three gauges: least squares.
    LeastSquares,
}

/// Strain state of a rosette, with the corrections and the fit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RosetteResult {
    /// The plane strain state (`exx`, `eyy`, tensor `exy`).
    pub strain: PlaneStrain,
    /// Engineering shear `gxy = 2·exy`.
    pub gxy: f64,
    /// Principal values and direction.
    pub principal: Principal2,
    /// Exact or least squares.
    pub kind: SolveKind,
    /// Corrections applied, in the order applied.
    pub applied: Vec<AppliedCorrection>,
    /// Gauge IDs in input order.
    pub gauges: Vec<String>,
    /// Readings after steps 1–3 (zero, thermal output, gauge factor), input order.
    pub corrected: Vec<f64>,
    /// Residuals `corrected − modelled` per gauge (zero for an exact solve).
    pub residuals: Vec<f64>,
    /// Degrees of freedom `n − 3`.
    pub redundancy: usize,
    /// A-posteriori standard deviation of one gauge reading, `sqrt(vᵀv / (n − 3))`;
    /// `None` without redundancy.
    pub sigma_reading: Option<f64>,
    /// Standard deviations of `[exx, eyy, exy]` from `σ0²·(AᵀA)⁻¹`; `None` without
    /// redundancy.
    pub sigma_strain: Option<[f64; 3]>,
    /// Condition number of the design matrix (see [`MAX_CONDITION`]).
    pub condition: f64,
}

/// Rectangular rosette 0°/45°/90° by its closed form (readings `a` at 0°, `b` at 45°,
/// `c` at 90°, already corrected): `exx = a`, `eyy = c`, `gxy = 2b − a − c`, so
/// `exy = b − (a + c)/2`.
///
/// Source: Gere & Goodno, Mechanics of Materials, §7.7 (strain rosettes); Dally &
/// Riley, Experimental Stress Analysis, 4th ed., chapter on strain-gauge rosettes.
pub fn rectangular_closed_form(a: f64, b: f64, c: f64) -> PlaneStrain {
    PlaneStrain {
        exx: a,
        eyy: c,
        exy: b - 0.5 * (a + c),
    }
}

/// Delta rosette 0°/60°/120° by its closed form (readings `a` at 0°, `b` at 60°, `c` at
/// 120°, already corrected): `exx = a`, `eyy = (2b + 2c − a)/3`,
/// `gxy = 2(b − c)/√3`, so `exy = (b − c)/√3`.
///
/// Source: Dally & Riley, Experimental Stress Analysis, 4th ed., chapter on
/// strain-gauge rosettes (delta rosette).
pub fn delta_closed_form(a: f64, b: f64, c: f64) -> PlaneStrain {
    PlaneStrain {
        exx: a,
        eyy: (2.0 * b + 2.0 * c - a) / 3.0,
        exy: (b - c) / 3.0_f64.sqrt(),
    }
}

/// Gauges of a rectangular rosette `a` 0°, `b` 45°, `c` 90° with the given readings.
pub fn rectangular_gauges(readings: [f64; 3]) -> Vec<Gauge> {
    layout(readings, [0.0, 45.0, 90.0])
}

/// Gauges of a delta rosette `a` 0°, `b` 60°, `c` 120° with the given readings.
pub fn delta_gauges(readings: [f64; 3]) -> Vec<Gauge> {
    layout(readings, [0.0, 60.0, 120.0])
}

fn layout(readings: [f64; 3], degrees: [f64; 3]) -> Vec<Gauge> {
    ["a", "b", "c"]
        .iter()
        .zip(readings)
        .zip(degrees)
        .map(|((id, r), d)| Gauge::new(*id, d.to_radians(), r))
        .collect()
}

/// Solve a rosette of three or more gauges.
///
/// Three gauges: exact solve. More: least squares with residuals, and the a-posteriori
/// standard deviation of one reading. Corrections are applied in the order of the
/// module documentation.
///
/// Errors: `Empty` / `TooFewGauges` (fewer than 3), `InvalidId`, `DuplicateGauge`,
/// `NonFinite { id: gauge, field }`, `InvalidParameter` for a bad correction,
/// `SingularRosette` when fewer than three distinct directions (modulo 180°) remain or
/// the condition number exceeds [`MAX_CONDITION`].
pub fn solve(gauges: &[Gauge], corrections: &Corrections) -> Result<RosetteResult> {
    validate_gauges(gauges)?;
    validate_corrections(corrections)?;
    check_directions(gauges)?;

    let mut applied = Vec::new();
    let mut corrected: Vec<f64> = gauges.iter().map(|g| g.reading).collect();

    // Step 1: zero readings.
    let zeroed: Vec<(String, f64)> = gauges
        .iter()
        .filter_map(|g| g.zero.map(|z| (g.id.clone(), z)))
        .collect();
    if !zeroed.is_empty() {
        for (r, g) in corrected.iter_mut().zip(gauges) {
            *r -= g.zero.unwrap_or(0.0);
        }
        let (ids, zero) = zeroed.into_iter().unzip();
        applied.push(AppliedCorrection::ZeroReading { gauges: ids, zero });
    }

    // Step 2: thermal output.
    if let Some(t) = &corrections.thermal {
        let apparent = t.apparent_strain();
        if !apparent.is_finite() {
            return Err(CoreError::InvalidParameter {
                name: "thermal_output",
                reason: format!("apparent strain {apparent} is not finite"),
            });
        }
        for r in corrected.iter_mut() {
            *r -= apparent;
        }
        applied.push(AppliedCorrection::ThermalOutput {
            temperature: t.temperature,
            reference_temperature: t.reference_temperature,
            apparent_strain: apparent,
        });
    }

    // Step 3: gauge factor.
    if let Some(k) = corrections.gauge_factor {
        let ratio = k.instrument / k.gauge;
        for r in corrected.iter_mut() {
            *r *= ratio;
        }
        applied.push(AppliedCorrection::GaugeFactor {
            instrument: k.instrument,
            gauge: k.gauge,
            ratio,
        });
    }

    // Step 4: transverse sensitivity in the design matrix.
    let (kt, nu0) = match corrections.transverse {
        Some(t) => {
            applied.push(AppliedCorrection::TransverseSensitivity {
                kt: t.kt,
                nu0: t.nu0,
            });
            (t.kt, t.nu0)
        }
        None => (0.0, 0.0),
    };

    let n = gauges.len();
    let a = design_matrix(gauges, kt, nu0);
    let b = DVector::from_column_slice(&corrected);

    let condition = condition_number(&a)?;
    if condition.is_nan() || condition > MAX_CONDITION {
        return Err(CoreError::SingularRosette {
            gauges: ids_joined(gauges.iter()),
            reason: format!(
                "condition number {condition:.3e} exceeds the threshold {MAX_CONDITION:.1e}"
            ),
        });
    }
    // Thin QR: A = Q·R, x = R⁻¹·Qᵀ·b. (nalgebra 0.35's dynamic SVD returned factors that
    // do not recompose A for the delta layout, so it is not used here.)
    let qr = a.clone().qr();
    let x = qr
        .r()
        .solve_upper_triangular(&(qr.q().transpose() * &b))
        .ok_or_else(|| CoreError::SingularRosette {
            gauges: ids_joined(gauges.iter()),
            reason: "the triangular factor of the design matrix is singular".into(),
        })?;
    let strain = PlaneStrain {
        exx: x[0],
        eyy: x[1],
        exy: x[2],
    };
    let v = &b - &a * &x;
    let residuals: Vec<f64> = v.iter().copied().collect();
    let redundancy = n - MIN_GAUGES;
    let (kind, sigma_reading, sigma_strain) = if redundancy == 0 {
        (SolveKind::Exact, None, None)
    } else {
        let s0 = (v.norm_squared() / redundancy as f64).sqrt();
        let sigma_strain = normal_inverse(&a).map(|q| {
            [
                s0 * q[(0, 0)].sqrt(),
                s0 * q[(1, 1)].sqrt(),
                s0 * q[(2, 2)].sqrt(),
            ]
        });
        (SolveKind::LeastSquares, Some(s0), sigma_strain)
    };

    Ok(RosetteResult {
        strain,
        gxy: strain.gxy(),
        principal: strain.principal(),
        kind,
        applied,
        gauges: gauges.iter().map(|g| g.id.clone()).collect(),
        corrected,
        residuals,
        redundancy,
        sigma_reading,
        sigma_strain,
        condition,
    })
}

/// Indicated (corrected-reading) strain that a gauge at `theta` shows for `strain`,
/// with an optional transverse sensitivity: the forward model of [`solve`].
pub fn forward_reading(
    strain: &PlaneStrain,
    theta: f64,
    transverse: Option<TransverseSensitivity>,
) -> f64 {
    let (kt, nu0) = transverse.map_or((0.0, 0.0), |t| (t.kt, t.nu0));
    let row = design_row(theta, kt, nu0);
    row[0] * strain.exx + row[1] * strain.eyy + row[2] * strain.exy
}

const EIGEN_MAX_ITER: usize = 200;

/// Condition number of `A` as `sqrt(λmax/λmin)` of `AᵀA` (bounded eigen-solver).
fn condition_number(a: &DMatrix<f64>) -> Result<f64> {
    let n = a.transpose() * a;
    let m = Matrix3::from_fn(|i, j| n[(i, j)]);
    let eig = m.try_symmetric_eigen(f64::EPSILON, EIGEN_MAX_ITER).ok_or(
        CoreError::EigenNoConvergence {
            max_iter: EIGEN_MAX_ITER,
        },
    )?;
    let max = eig.eigenvalues.max();
    let min = eig.eigenvalues.min();
    Ok(if min > 0.0 {
        (max / min).sqrt()
    } else {
        f64::INFINITY
    })
}

fn design_row(theta: f64, kt: f64, nu0: f64) -> [f64; 3] {
    let (s, c) = theta.sin_cos();
    let k = 1.0 / (1.0 - nu0 * kt);
    [
        k * ((1.0 - kt) * c * c + kt),
        k * ((1.0 - kt) * s * s + kt),
        k * (1.0 - kt) * 2.0 * s * c,
    ]
}

fn design_matrix(gauges: &[Gauge], kt: f64, nu0: f64) -> DMatrix<f64> {
    let mut a = DMatrix::zeros(gauges.len(), 3);
    for (i, g) in gauges.iter().enumerate() {
        let row = design_row(g.angle, kt, nu0);
        for (j, v) in row.iter().enumerate() {
            a[(i, j)] = *v;
        }
    }
    a
}

/// `(AᵀA)⁻¹` for the 3 strain components, `None` if not invertible.
fn normal_inverse(a: &DMatrix<f64>) -> Option<Matrix3<f64>> {
    let n = a.transpose() * a;
    let m = Matrix3::from_fn(|i, j| n[(i, j)]);
    m.cholesky().map(|c| c.inverse())
}

fn ids_joined<'a>(gauges: impl Iterator<Item = &'a Gauge>) -> String {
    gauges.map(|g| g.id.as_str()).collect::<Vec<_>>().join(", ")
}

fn validate_gauges(gauges: &[Gauge]) -> Result<()> {
    if gauges.is_empty() {
        return Err(CoreError::Empty { what: "gauges" });
    }
    if gauges.len() < MIN_GAUGES {
        return Err(CoreError::TooFewGauges {
            needed: MIN_GAUGES,
            got: gauges.len(),
        });
    }
    let mut seen = HashSet::new();
    for g in gauges {
        validate_id(&g.id)?;
        if !seen.insert(g.id.as_str()) {
            return Err(CoreError::DuplicateGauge { id: g.id.clone() });
        }
        let fields = [
            ("angle", Some(g.angle)),
            ("reading", Some(g.reading)),
            ("zero", g.zero),
        ];
        for (field, value) in fields {
            if value.is_some_and(|v| !v.is_finite()) {
                return Err(CoreError::NonFinite {
                    id: g.id.clone(),
                    field,
                });
            }
        }
    }
    Ok(())
}

fn validate_corrections(c: &Corrections) -> Result<()> {
    if let Some(k) = c.gauge_factor {
        for (name, v) in [
            ("gauge_factor.instrument", k.instrument),
            ("gauge_factor.gauge", k.gauge),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return Err(CoreError::InvalidParameter {
                    name,
                    reason: format!("{v} is not a finite positive gauge factor"),
                });
            }
        }
    }
    if let Some(t) = c.transverse {
        if !(t.kt.is_finite() && t.kt.abs() < 1.0) {
            return Err(CoreError::InvalidParameter {
                name: "transverse.kt",
                reason: format!("{} is outside (−1, 1)", t.kt),
            });
        }
        if !(t.nu0.is_finite() && t.nu0 > -1.0 && t.nu0 < 0.5) {
            return Err(CoreError::InvalidParameter {
                name: "transverse.nu0",
                reason: format!("{} is outside (−1, 0.5)", t.nu0),
            });
        }
    }
    if let Some(t) = &c.thermal {
        if t.coefficients.iter().any(|v| !v.is_finite()) {
            return Err(CoreError::InvalidParameter {
                name: "thermal.coefficients",
                reason: format!("{:?} contains a non-finite value", t.coefficients),
            });
        }
        for (name, v) in [
            ("thermal.temperature", Some(t.temperature)),
            ("thermal.reference_temperature", t.reference_temperature),
        ] {
            if let Some(v) = v.filter(|v| !v.is_finite()) {
                return Err(CoreError::InvalidParameter {
                    name,
                    reason: format!("{v} is not a finite temperature"),
                });
            }
        }
    }
    Ok(())
}

/// Group gauge directions modulo π; fewer than three distinct directions cannot
/// determine `(exx, eyy, exy)`. The error names the gauges that share a direction.
fn check_directions(gauges: &[Gauge]) -> Result<()> {
    let pi = std::f64::consts::PI;
    let mut groups: Vec<(f64, Vec<&Gauge>)> = Vec::new();
    for g in gauges {
        let d = g.angle.rem_euclid(pi);
        let found = groups.iter_mut().find(|(rep, _)| {
            let diff = (d - *rep).abs();
            diff.min(pi - diff) <= ANGLE_TOL
        });
        match found {
            Some((_, members)) => members.push(g),
            None => groups.push((d, vec![g])),
        }
    }
    if groups.len() >= MIN_GAUGES {
        return Ok(());
    }
    let shared: Vec<String> = groups
        .iter()
        .filter(|(_, m)| m.len() > 1)
        .map(|(rep, m)| {
            format!(
                "{} at {:.6}° (mod 180°)",
                ids_joined(m.iter().copied()),
                rep.to_degrees()
            )
        })
        .collect();
    Err(CoreError::SingularRosette {
        gauges: ids_joined(gauges.iter()),
        reason: format!(
            "only {} distinct directions modulo 180°; coinciding: {}",
            groups.len(),
            shared.join("; ")
        ),
    })
}
