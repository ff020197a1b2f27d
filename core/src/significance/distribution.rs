//! Distribution functions for the strain tests: central χ² and F tails (statrs), the
//! non-central χ² CDF, critical values, and Baarda's non-centrality `λ₀(α, β, m)`.
//!
//! - Non-central χ² with `m` degrees of freedom and non-centrality `λ` (the convention
//!   of `scipy.stats.ncx2`, `E = m + λ`) as a Poisson mixture of central χ² CDFs
//!   (Johnson, Kotz & Balakrishnan, *Continuous Univariate Distributions*, vol. 2, ch. 29):
//!   `F(x; m, λ) = Σ_j e^{−λ/2} (λ/2)^j / j! · F_χ²(x; m + 2j)`. The weights are formed in
//!   log space; the sum stops once it is past the Poisson mode and the remaining Poisson
//!   mass is below `1e-16` (bounded by the geometric tail of the weights), or after
//!   [`MAX_SERIES_TERMS`] terms.
//! - `λ₀(α, β, m)` (Baarda, *A testing procedure for use in geodetic networks*, 1968) is the
//!   non-centrality at which a χ²(m) test of level `α` rejects with probability `β`
//!   (the power): `1 − F(c_α; m, λ₀) = β` with `c_α` the upper-α point of χ²(m). The power
//!   rises with `λ`, so `λ₀` is found by bisection (bracket doubled at most
//!   [`MAX_BRACKET_STEPS`] times, at most [`MAX_BISECTION`] halvings).

use statrs::distribution::{ChiSquared, ContinuousCDF, FisherSnedecor};
use statrs::function::gamma::ln_gamma;

use crate::error::{CoreError, Result};

/// Cap on the number of terms of the Poisson mixture.
pub const MAX_SERIES_TERMS: usize = 100_000;
/// Cap on the doublings of the upper end of a bisection bracket.
pub const MAX_BRACKET_STEPS: usize = 200;
/// Cap on the halvings of a bisection.
pub const MAX_BISECTION: usize = 200;

/// Upper tail `P(X > x)` of χ² with `dof` degrees of freedom (statrs).
///
/// # Errors
/// [`CoreError::InvalidParameter`] for `dof ≤ 0` or a non-finite/negative `x`.
pub fn chi2_sf(x: f64, dof: f64) -> Result<f64> {
    check_x(x)?;
    Ok(chi2(dof)?.sf(x))
}

/// Upper tail `P(X > x)` of F with `(dof1, dof2)` degrees of freedom (statrs).
///
/// # Errors
/// [`CoreError::InvalidParameter`] for a non-positive degree of freedom or a
/// non-finite/negative `x`.
pub fn f_sf(x: f64, dof1: f64, dof2: f64) -> Result<f64> {
    check_x(x)?;
    Ok(fisher(dof1, dof2)?.sf(x))
}

/// CDF of the non-central χ² distribution, `P(X ≤ x)`, `dof` degrees of freedom,
/// non-centrality `lambda ≥ 0` (convention `E[X] = dof + lambda`).
///
/// # Errors
/// [`CoreError::InvalidParameter`] for `dof ≤ 0`, a negative or non-finite `lambda` or
/// `x`, or a series that does not settle within [`MAX_SERIES_TERMS`] terms.
pub fn noncentral_chi2_cdf(x: f64, dof: f64, lambda: f64) -> Result<f64> {
    check_x(x)?;
    if !(dof.is_finite() && dof > 0.0) {
        return Err(CoreError::InvalidParameter {
            name: "dof",
            reason: format!("must be finite and > 0, got {dof}"),
        });
    }
    if !(lambda.is_finite() && lambda >= 0.0) {
        return Err(CoreError::InvalidParameter {
            name: "noncentrality",
            reason: format!("must be finite and >= 0, got {lambda}"),
        });
    }
    if x == 0.0 {
        return Ok(0.0);
    }
    let h = 0.5 * lambda;
    if h == 0.0 {
        return Ok(chi2(dof)?.cdf(x));
    }
    let ln_h = h.ln();
    let mut sum = 0.0;
    for j in 0..MAX_SERIES_TERMS {
        let jf = j as f64;
        let ln_w = -h + jf * ln_h - ln_gamma(jf + 1.0);
        let w = ln_w.exp();
        let term = w * chi2(dof + 2.0 * jf)?.cdf(x);
        sum += term;
        if jf > h {
            // Past the mode the weights fall at least geometrically with ratio
            // h/(j+2) < 1 from the next one on: bound the tail by that series.
            let ratio = h / (jf + 2.0);
            let tail = w * ratio / (1.0 - ratio);
            if tail < 1e-16 {
                return Ok(sum.clamp(0.0, 1.0));
            }
        }
    }
    Err(CoreError::InvalidParameter {
        name: "noncentrality",
        reason: format!(
            "{lambda} is too large: the Poisson mixture did not settle within {MAX_SERIES_TERMS} terms"
        ),
    })
}

/// Upper-α critical value `c` of χ²(dof): `P(X > c) = alpha`, by bisection.
///
/// # Errors
/// [`CoreError::InvalidParameter`] for `alpha ∉ (0, 1)` or `dof ≤ 0`.
pub fn chi2_critical(alpha: f64, dof: f64) -> Result<f64> {
    check_alpha("alpha", alpha)?;
    let d = chi2(dof)?;
    bisect_decreasing(|x| d.sf(x), alpha, dof.max(1.0))
}

/// Upper-α critical value `c` of F(dof1, dof2): `P(X > c) = alpha`, by bisection.
///
/// # Errors
/// [`CoreError::InvalidParameter`] for `alpha ∉ (0, 1)` or a non-positive degree of freedom.
pub fn f_critical(alpha: f64, dof1: f64, dof2: f64) -> Result<f64> {
    check_alpha("alpha", alpha)?;
    let d = fisher(dof1, dof2)?;
    bisect_decreasing(|x| d.sf(x), alpha, 1.0)
}

/// Baarda's non-centrality `λ₀(α, β, m)`: the `λ` at which the χ²(m) test of level
/// `alpha` has power `power` (β, the probability of rejecting). `0 < alpha < power < 1`.
///
/// # Errors
/// [`CoreError::InvalidParameter`] naming `alpha`, `power` or `dof` when out of range,
/// or when the bisection cannot bracket the root.
pub fn noncentrality(alpha: f64, power: f64, dof: usize) -> Result<f64> {
    check_alpha("alpha", alpha)?;
    check_alpha("power", power)?;
    if power <= alpha {
        return Err(CoreError::InvalidParameter {
            name: "power",
            reason: format!(
                "must exceed alpha = {alpha} (the power at zero non-centrality), got {power}"
            ),
        });
    }
    if dof == 0 {
        return Err(CoreError::InvalidParameter {
            name: "dof",
            reason: "must be at least 1, got 0".into(),
        });
    }
    let m = dof as f64;
    let c = chi2_critical(alpha, m)?;
    let power_at = |lam: f64| -> Result<f64> { Ok(1.0 - noncentral_chi2_cdf(c, m, lam)?) };
    let (mut lo, mut hi) = (0.0_f64, 1.0_f64);
    let mut steps = 0;
    while power_at(hi)? < power {
        lo = hi;
        hi *= 2.0;
        steps += 1;
        if steps > MAX_BRACKET_STEPS {
            return Err(CoreError::InvalidParameter {
                name: "power",
                reason: format!("no non-centrality reaches power {power}"),
            });
        }
    }
    for _ in 0..MAX_BISECTION {
        let mid = 0.5 * (lo + hi);
        if power_at(mid)? < power {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo <= 1e-13 * hi {
            break;
        }
    }
    Ok(0.5 * (lo + hi))
}

/// Root of a decreasing tail function `sf(x) = target` on `x ≥ 0`, by bisection.
fn bisect_decreasing(sf: impl Fn(f64) -> f64, target: f64, start: f64) -> Result<f64> {
    let (mut lo, mut hi) = (0.0_f64, start);
    let mut steps = 0;
    while sf(hi) > target {
        lo = hi;
        hi *= 2.0;
        steps += 1;
        if steps > MAX_BRACKET_STEPS {
            return Err(CoreError::InvalidParameter {
                name: "alpha",
                reason: format!("{target} is too small to bracket a critical value"),
            });
        }
    }
    for _ in 0..MAX_BISECTION {
        let mid = 0.5 * (lo + hi);
        if sf(mid) > target {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo <= 1e-14 * hi {
            break;
        }
    }
    Ok(0.5 * (lo + hi))
}

pub(crate) fn check_alpha(name: &'static str, v: f64) -> Result<()> {
    if v.is_finite() && v > 0.0 && v < 1.0 {
        Ok(())
    } else {
        Err(CoreError::InvalidParameter {
            name,
            reason: format!("must lie strictly between 0 and 1, got {v}"),
        })
    }
}

fn check_x(x: f64) -> Result<()> {
    if x.is_finite() && x >= 0.0 {
        Ok(())
    } else {
        Err(CoreError::InvalidParameter {
            name: "statistic",
            reason: format!("must be finite and >= 0, got {x}"),
        })
    }
}

fn chi2(dof: f64) -> Result<ChiSquared> {
    check_dof(dof)?;
    ChiSquared::new(dof).map_err(|e| CoreError::InvalidParameter {
        name: "dof",
        reason: format!("{dof}: {e}"),
    })
}

fn fisher(dof1: f64, dof2: f64) -> Result<FisherSnedecor> {
    check_dof(dof1)?;
    check_dof(dof2)?;
    FisherSnedecor::new(dof1, dof2).map_err(|e| CoreError::InvalidParameter {
        name: "dof",
        reason: format!("({dof1}, {dof2}): {e}"),
    })
}

fn check_dof(dof: f64) -> Result<()> {
    if dof.is_finite() && dof > 0.0 {
        Ok(())
    } else {
        Err(CoreError::InvalidParameter {
            name: "dof",
            reason: format!("must be finite and > 0, got {dof}"),
        })
    }
}
