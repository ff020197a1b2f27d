//! Global tests of "strain = 0" and "strain change = 0", and the minimal detectable strain.
//!
//! ## Deformation parameters
//! The tests use the strain components only — 2D `(exx, eyy, exy)`, 3D
//! `(exx, eyy, ezz, exy, eyz, exz)`, tensor shears — never translation or rotation: a
//! rigid-body motion is not deformation. With `ε̂` the `m` estimated components and `Q`
//! their cofactor matrix (covariance divided by the variance factor `σ₀²`),
//!
//! ```text
//! T = ε̂ᵀ Q⁻¹ ε̂
//! ```
//!
//! - a-priori variance factor trusted: `T/σ₀² ~ χ²(m)` under H0;
//! - variance factor estimated (`σ̂₀²`, redundancy `r`): `T/(m σ̂₀²) ~ F(m, r)` under H0
//!   (Koch, *Parameter Estimation and Hypothesis Testing in Linear Models*, the general
//!   linear hypothesis; Ghilani & Wolf, *Adjustment Computations*, the χ² and F tests).
//!
//! H0 is rejected ("the strain is significant") when the p-value is below `α`.
//!
//! ## Two epochs
//! For independent estimates at two epochs the change `Δ = ε̂₂ − ε̂₁` has the cofactor
//! `Q_Δ = Q₁ + (σ₂²/σ₁²)·Q₂` when both a-priori factors are trusted (so that
//! `σ₁² Q_Δ = σ₁²Q₁ + σ₂²Q₂`; `Q₁ + Q₂` for a shared `σ₀`), tested with χ²(m). With
//! estimated factors the epochs are assumed to share one unknown variance factor, estimated
//! by the pooled `σ̂₀² = (r₁σ̂₁² + r₂σ̂₂²)/(r₁+r₂)`, and `Q_Δ = Q₁ + Q₂`, tested with
//! F(m, r₁+r₂). Mixing a trusted and an estimated factor is refused.
//!
//! ## Minimal detectable strain (Baarda's reliability concept)
//! A strain `δ·h` along a unit direction `h` of the parameter space shifts `T/σ₀²` to a
//! non-central χ²(m) with non-centrality `λ = δ² hᵀQ⁻¹h / σ₀²`. The test of level `α`
//! detects it with probability `β` once `λ = λ₀(α, β, m)`
//! ([`super::distribution::noncentrality`]), so the minimal detectable value is
//!
//! ```text
//! δ_min(h) = √(λ₀ σ₀² / (hᵀ Q⁻¹ h))
//! ```
//!
//! given for each component (`h` a unit vector of the parameter space: that component
//! alone, the others zero) and for the worst direction, the eigenvector of the largest
//! eigenvalue `q_max` of `Q`: `δ_worst = √(λ₀ σ₀² q_max)`. It uses the χ² form even when the
//! factor is estimated (the usual design-stage approximation, with `σ̂₀²` for `σ₀²`).

use nalgebra::{DMatrix, DVector, SMatrix};
use serde::Serialize;

use super::distribution::{check_alpha, chi2_critical, chi2_sf, f_critical, f_sf, noncentrality};
use crate::error::{CoreError, Result};
use crate::estimate::GradientEstimate;
use crate::uncertainty::{check_covariance, strain_parameters};

/// Smallest accepted `q_min/q_max` of a cofactor matrix before it counts as singular.
pub const MIN_COFACTOR_CONDITION: f64 = 1e-14;

/// Iteration cap of the bounded symmetric eigen-solver on the cofactor matrix.
const EIGEN_MAX_ITER: usize = 1000;

/// How the variance factor `σ₀²` of an estimate is known.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "snake_case", tag = "kind")]
pub enum VarianceFactor {
    /// The a-priori factor is trusted (χ² tests). `1` when the weights are `1/σ²` with the
    /// stated precisions.
    Apriori {
        /// `σ₀²` (dimensionless for weights `1/σ²`), finite and > 0.
        sigma0_sq: f64,
    },
    /// The factor is estimated from the residuals (F tests).
    Estimated {
        /// `σ̂₀² = vᵀPv/r`, finite and > 0.
        sigma0_sq: f64,
        /// Redundancy `r ≥ 1`.
        redundancy: usize,
    },
}

impl VarianceFactor {
    /// The factor `σ₀²` or `σ̂₀²`.
    pub fn sigma0_sq(&self) -> f64 {
        match *self {
            VarianceFactor::Apriori { sigma0_sq } | VarianceFactor::Estimated { sigma0_sq, .. } => {
                sigma0_sq
            }
        }
    }

    fn validate(&self) -> Result<()> {
        let s = self.sigma0_sq();
        if !(s.is_finite() && s > 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "sigma0_sq",
                reason: format!("variance factor must be finite and > 0, got {s}"),
            });
        }
        if let VarianceFactor::Estimated { redundancy: 0, .. } = self {
            return Err(CoreError::InvalidParameter {
                name: "redundancy",
                reason: "an estimated variance factor needs redundancy >= 1, got 0".into(),
            });
        }
        Ok(())
    }
}

/// The strain components of one estimate with their cofactor matrix and variance factor.
#[derive(Debug, Clone, PartialEq)]
pub struct DeformationParameters {
    /// Names of the components, e.g. `exx`, `eyy`, `exy` (tensor shears).
    pub labels: Vec<&'static str>,
    /// Estimated components (dimensionless), in the order of `labels`.
    pub strain: Vec<f64>,
    /// Cofactor matrix `Q` (covariance divided by `σ₀²`), `m×m`.
    pub cofactor: DMatrix<f64>,
    /// How `σ₀²` is known.
    pub factor: VarianceFactor,
}

const LABELS2: [&str; 3] = ["exx", "eyy", "exy"];
const LABELS3: [&str; 6] = ["exx", "eyy", "ezz", "exy", "eyz", "exz"];

impl DeformationParameters {
    /// Deformation parameters from a gradient `g` and the cofactor matrix of `vec(G)`
    /// (row-major, `D²×D²`, covariance divided by `factor.sigma0_sq()`).
    ///
    /// # Errors
    /// [`CoreError::InvalidCovariance`] for a bad `cofactor_g`; [`CoreError::InvalidParameter`]
    /// for a bad factor or `D ∉ {2, 3}`; [`CoreError::NonFinite`] for a bad `g`.
    pub fn from_gradient<const D: usize>(
        g: &SMatrix<f64, D, D>,
        cofactor_g: &DMatrix<f64>,
        factor: VarianceFactor,
    ) -> Result<Self> {
        factor.validate()?;
        let (strain, cofactor) = strain_parameters(g, cofactor_g)?;
        let labels = if D == 2 {
            LABELS2.to_vec()
        } else {
            LABELS3.to_vec()
        };
        Ok(Self {
            labels,
            strain,
            cofactor,
            factor,
        })
    }

    /// Deformation parameters of a least-squares estimate. `apriori = Some(σ₀²)` trusts
    /// that a-priori factor (χ² tests); `None` uses the fit's estimated factor (F tests).
    /// The cofactor is `cov_gradient / σ̂₀²` (or `/1` for an exact fit, whose covariance
    /// carries the a-priori factor 1).
    ///
    /// # Errors
    /// [`CoreError::InvalidParameter`] (`fit`) when the estimate has no fit statistics
    /// (elements: use [`Self::from_gradient`] with
    /// [`crate::uncertainty::element_gradient_covariance`]); (`variance_factor`) when an
    /// estimated factor is asked for an exact fit or the factor is zero; as
    /// [`Self::from_gradient`].
    pub fn from_estimate<const D: usize>(
        est: &GradientEstimate<D>,
        apriori: Option<f64>,
    ) -> Result<Self> {
        let Some(fit) = &est.fit else {
            return Err(CoreError::InvalidParameter {
                name: "fit",
                reason: format!(
                    "estimate `{}` has no fit statistics; build the parameters from its gradient covariance",
                    est.label
                ),
            });
        };
        let scale = fit.variance_factor.unwrap_or(1.0);
        if !(scale.is_finite() && scale > 0.0) {
            return Err(CoreError::InvalidParameter {
                name: "variance_factor",
                reason: format!(
                    "estimate `{}`: variance factor {scale} is not positive (a perfect fit)",
                    est.label
                ),
            });
        }
        let cofactor_g = &fit.cov_gradient / scale;
        let factor = match (apriori, fit.variance_factor) {
            (Some(s), _) => VarianceFactor::Apriori { sigma0_sq: s },
            (None, Some(s)) if !fit.exact && fit.redundancy > 0 => VarianceFactor::Estimated {
                sigma0_sq: s,
                redundancy: fit.redundancy,
            },
            (None, _) => {
                return Err(CoreError::InvalidParameter {
                    name: "variance_factor",
                    reason: format!(
                        "estimate `{}` is an exact fit (redundancy 0): no estimated variance factor; trust an a-priori factor instead",
                        est.label
                    ),
                });
            }
        };
        Self::from_gradient(&est.gradient, &cofactor_g, factor)
    }
}

/// The reference distribution of a test statistic.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Distribution {
    /// Central χ² (`dof1` degrees of freedom).
    #[serde(rename = "chi2")]
    ChiSquared,
    /// Fisher's F (`dof1`, `dof2`).
    #[serde(rename = "F")]
    F,
}

/// Result of a global strain test.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TestResult {
    /// The null hypothesis, e.g. `strain = 0`.
    pub hypothesis: String,
    /// Quadratic form `T = ε̂ᵀ Q⁻¹ ε̂` (dimensionless for weights `1/σ²`).
    pub quadratic_form: f64,
    /// Test statistic: `T/σ₀²` (χ²) or `T/(m σ̂₀²)` (F).
    pub statistic: f64,
    /// Reference distribution.
    pub distribution: Distribution,
    /// First degrees of freedom `m` (number of strain components).
    pub dof1: usize,
    /// Second degrees of freedom (redundancy) for F; `None` for χ².
    pub dof2: Option<usize>,
    /// `P(X > statistic)` under H0.
    pub p_value: f64,
    /// Significance level α of the decision.
    pub alpha: f64,
    /// Upper-α point of the reference distribution.
    pub critical_value: f64,
    /// True when `p_value < alpha`: H0 rejected, the strain (change) is significant.
    pub significant: bool,
    /// The variance factor used (`σ₀²`, or the pooled `σ̂₀²`).
    pub sigma0_sq: f64,
    /// The assumptions behind the test, in plain words.
    pub assumption: String,
}

/// Tests H0 "strain = 0" at level `alpha` (module docs).
///
/// # Errors
/// [`CoreError::InvalidParameter`] for `alpha ∉ (0, 1)` or a bad factor;
/// [`CoreError::InvalidCovariance`] / [`CoreError::SingularCovariance`] for a bad `Q`.
pub fn test_zero_strain(p: &DeformationParameters, alpha: f64) -> Result<TestResult> {
    check_alpha("alpha", alpha)?;
    p.factor.validate()?;
    let t = quadratic_form(&p.strain, &p.cofactor, "strain cofactor")?;
    let assumption = match p.factor {
        VarianceFactor::Apriori { .. } => {
            "a-priori variance factor trusted; normally distributed errors"
        }
        VarianceFactor::Estimated { .. } => {
            "variance factor estimated from the residuals; normally distributed errors"
        }
    };
    decide(
        "strain = 0",
        t,
        p.strain.len(),
        p.factor,
        alpha,
        assumption.into(),
    )
}

/// Tests H0 "the strain did not change" between two independent estimates at level
/// `alpha` (module docs, "Two epochs").
///
/// # Errors
/// [`CoreError::InvalidParameter`] for parameter vectors of different length, mixed
/// trusted/estimated factors, or as [`test_zero_strain`].
pub fn test_strain_change(
    first: &DeformationParameters,
    second: &DeformationParameters,
    alpha: f64,
) -> Result<TestResult> {
    check_alpha("alpha", alpha)?;
    first.factor.validate()?;
    second.factor.validate()?;
    let m = first.strain.len();
    if second.strain.len() != m {
        return Err(CoreError::InvalidParameter {
            name: "second",
            reason: format!(
                "{} strain components against {m} of the first epoch",
                second.strain.len()
            ),
        });
    }
    let delta: Vec<f64> = (0..m).map(|k| second.strain[k] - first.strain[k]).collect();
    let (q, factor, assumption) = match (first.factor, second.factor) {
        (VarianceFactor::Apriori { sigma0_sq: s1 }, VarianceFactor::Apriori { sigma0_sq: s2 }) => (
            &first.cofactor + &second.cofactor * (s2 / s1),
            VarianceFactor::Apriori { sigma0_sq: s1 },
            "independent epochs; a-priori variance factors trusted; normally distributed errors"
                .to_owned(),
        ),
        (
            VarianceFactor::Estimated {
                sigma0_sq: s1,
                redundancy: r1,
            },
            VarianceFactor::Estimated {
                sigma0_sq: s2,
                redundancy: r2,
            },
        ) => {
            let r = r1 + r2;
            let pooled = (r1 as f64 * s1 + r2 as f64 * s2) / r as f64;
            (
                &first.cofactor + &second.cofactor,
                VarianceFactor::Estimated {
                    sigma0_sq: pooled,
                    redundancy: r,
                },
                format!(
                    "independent epochs sharing one unknown variance factor, pooled σ̂₀² = (r1·σ̂1² + r2·σ̂2²)/(r1+r2) with r1 = {r1}, r2 = {r2}; normally distributed errors"
                ),
            )
        }
        _ => {
            return Err(CoreError::InvalidParameter {
                name: "factor",
                reason: "one epoch trusts its a-priori variance factor and the other estimates it; treat both alike".into(),
            });
        }
    };
    let t = quadratic_form(&delta, &q, "strain-change cofactor")?;
    decide("strain change = 0", t, m, factor, alpha, assumption)
}

/// Minimal detectable strain of a network (module docs).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MinimalDetectable {
    /// Level α of the test.
    pub alpha: f64,
    /// Power β (probability of detection).
    pub power: f64,
    /// Degrees of freedom `m` of the test.
    pub dof: usize,
    /// Baarda's non-centrality `λ₀(α, β, m)`.
    pub lambda0: f64,
    /// The variance factor used.
    pub sigma0_sq: f64,
    /// Component names, in the order of `per_component`.
    pub labels: Vec<&'static str>,
    /// Minimal detectable value of each component alone (dimensionless strain).
    pub per_component: Vec<f64>,
    /// Largest minimal detectable strain over all unit directions, `√(λ₀ σ₀² q_max)`.
    pub worst: f64,
    /// The unit direction (in the order of `labels`) of `worst`.
    pub worst_direction: Vec<f64>,
    /// Smallest minimal detectable strain over all unit directions, `√(λ₀ σ₀² q_min)`.
    pub best: f64,
}

/// Minimal detectable strain for a test at level `alpha` with power `power` (module docs).
///
/// # Errors
/// As [`super::distribution::noncentrality`] and [`test_zero_strain`].
pub fn minimal_detectable_strain(
    p: &DeformationParameters,
    alpha: f64,
    power: f64,
) -> Result<MinimalDetectable> {
    p.factor.validate()?;
    let m = p.strain.len();
    let eig = cofactor_eigen(&p.cofactor, m, "strain cofactor")?;
    let lambda0 = noncentrality(alpha, power, m)?;
    let s0 = p.factor.sigma0_sq();
    let mut qmax = (0, f64::NEG_INFINITY);
    let mut qmin = f64::INFINITY;
    for (k, &v) in eig.eigenvalues.iter().enumerate() {
        if v > qmax.1 {
            qmax = (k, v);
        }
        qmin = qmin.min(v);
    }
    // (Q⁻¹)_kk = Σ_e v_ke² / q_e.
    let per_component = (0..m)
        .map(|k| {
            let qinv_kk: f64 = (0..m)
                .map(|e| eig.eigenvectors[(k, e)].powi(2) / eig.eigenvalues[e])
                .sum();
            (lambda0 * s0 / qinv_kk).sqrt()
        })
        .collect();
    let mut dir: Vec<f64> = eig.eigenvectors.column(qmax.0).iter().copied().collect();
    // Sign: largest-magnitude component positive.
    if let Some(big) = dir
        .iter()
        .copied()
        .max_by(|a, b| a.abs().total_cmp(&b.abs()))
        && big < 0.0
    {
        dir.iter_mut().for_each(|v| *v = -*v);
    }
    Ok(MinimalDetectable {
        alpha,
        power,
        dof: m,
        lambda0,
        sigma0_sq: s0,
        labels: p.labels.clone(),
        per_component,
        worst: (lambda0 * s0 * qmax.1).sqrt(),
        worst_direction: dir,
        best: (lambda0 * s0 * qmin).sqrt(),
    })
}

fn decide(
    hypothesis: &str,
    t: f64,
    m: usize,
    factor: VarianceFactor,
    alpha: f64,
    assumption: String,
) -> Result<TestResult> {
    let mf = m as f64;
    let (statistic, distribution, dof2, p_value, critical_value) = match factor {
        VarianceFactor::Apriori { sigma0_sq } => {
            let s = t / sigma0_sq;
            (
                s,
                Distribution::ChiSquared,
                None,
                chi2_sf(s, mf)?,
                chi2_critical(alpha, mf)?,
            )
        }
        VarianceFactor::Estimated {
            sigma0_sq,
            redundancy,
        } => {
            let s = t / (mf * sigma0_sq);
            let r = redundancy as f64;
            (
                s,
                Distribution::F,
                Some(redundancy),
                f_sf(s, mf, r)?,
                f_critical(alpha, mf, r)?,
            )
        }
    };
    Ok(TestResult {
        hypothesis: hypothesis.to_owned(),
        quadratic_form: t,
        statistic,
        distribution,
        dof1: m,
        dof2,
        p_value,
        alpha,
        critical_value,
        significant: p_value < alpha,
        sigma0_sq: factor.sigma0_sq(),
        assumption,
    })
}

/// `vᵀ Q⁻¹ v` through the eigen-decomposition of `Q`, refusing a singular `Q`.
fn quadratic_form(v: &[f64], q: &DMatrix<f64>, name: &str) -> Result<f64> {
    let m = v.len();
    if v.iter().any(|x| !x.is_finite()) {
        return Err(CoreError::NonFinite {
            id: "strain".into(),
            field: "strain component",
        });
    }
    let eig = cofactor_eigen(q, m, name)?;
    let vv = DVector::from_column_slice(v);
    let proj = eig.eigenvectors.transpose() * vv;
    Ok((0..m).map(|e| proj[e] * proj[e] / eig.eigenvalues[e]).sum())
}

fn cofactor_eigen(
    q: &DMatrix<f64>,
    m: usize,
    name: &str,
) -> Result<nalgebra::SymmetricEigen<f64, nalgebra::Dyn>> {
    if m == 0 {
        return Err(CoreError::Empty {
            what: "strain components",
        });
    }
    if q.nrows() != m || q.ncols() != m {
        return Err(CoreError::InvalidCovariance {
            name: name.to_owned(),
            reason: format!("expected {m}×{m}, got {}×{}", q.nrows(), q.ncols()),
        });
    }
    check_covariance(name, q)?;
    let sym = (q + q.transpose()) * 0.5;
    let eig = sym
        .try_symmetric_eigen(f64::EPSILON, EIGEN_MAX_ITER)
        .ok_or(CoreError::EigenNoConvergence {
            max_iter: EIGEN_MAX_ITER,
        })?;
    let max = eig.eigenvalues.iter().fold(0.0_f64, |a, &b| a.max(b));
    let min = eig.eigenvalues.iter().fold(f64::INFINITY, |a, &b| a.min(b));
    if max <= 0.0 || min <= MIN_COFACTOR_CONDITION * max {
        return Err(CoreError::SingularCovariance {
            name: name.to_owned(),
            reason: format!(
                "eigenvalue ratio min/max = {:.3e} is at most {MIN_COFACTOR_CONDITION:e} (min {min:.3e}, max {max:.3e})",
                if max > 0.0 { min / max } else { 0.0 }
            ),
        });
    }
    Ok(eig)
}
