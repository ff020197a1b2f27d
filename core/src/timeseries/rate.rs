//! Weighted straight-line regression `y = a + b·t` and its slope's standard deviation.
//!
//! With weights `w_k` (`1/σ_k²` when standard deviations are given, else 1):
//!
//! ```text
//! t̄ = Σw t / Σw,   ȳ = Σw y / Σw,   S_tt = Σw (t − t̄)²
//! b = Σw (t − t̄)(y − ȳ) / S_tt
//! σ̂₀² = Σw (y − a − b t)² / (n − 2)          (n ≥ 3)
//! var b = σ̂₀² / S_tt
//! ```
//!
//! (Draper & Smith, *Applied Regression Analysis*, 3rd ed., ch. 1, and the
//! chapter on weighted least squares; §9.2 from memory.) The standard deviation always uses the a-posteriori variance factor
//! `σ̂₀²` from the residuals when `n ≥ 3`. With two samples the line passes through
//! both, there are no residual degrees of freedom, and the slope's standard deviation is
//! the a-priori one `sqrt(1/S_tt)` (variance factor 1) when standard deviations were
//! given, and not determined (`None`) with equal weights.

use serde::Serialize;

use crate::error::{CoreError, Result};

/// A fitted slope with its precision.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Slope {
    /// Slope `b`, units of `y` per unit of `t`.
    pub slope: f64,
    /// Weighted mean of `t`, `t̄`.
    pub t_mean: f64,
    /// Weighted mean of `y`, `ȳ` (the fitted line passes through `(t̄, ȳ)`).
    pub y_mean: f64,
    /// Standard deviation of the slope, same units as `slope`; `None` when it is not
    /// determined (two samples with equal weights).
    pub std_slope: Option<f64>,
    /// A-posteriori variance factor `σ̂₀²` (dimensionless with weights `1/σ²`, units of
    /// `y²` with equal weights); `None` with fewer than three samples.
    pub variance_factor: Option<f64>,
    /// Residual degrees of freedom `n − 2`.
    pub dof: usize,
}

/// Weighted regression of `y` on `t` (module docs). `sigma`, when given, holds the
/// standard deviation of each `y` (same units as `y`); weights are `1/σ²`.
///
/// # Errors
/// - [`CoreError::InvalidParameter`] (`samples`) when `t`, `y` (and `sigma`) differ in
///   length; [`CoreError::TooFewPoints`] for fewer than two samples;
/// - [`CoreError::NonFinite`] (`id` = `sample N`, field `t`, `y` or `sigma`);
/// - [`CoreError::InvalidParameter`] (`sigma`) for a standard deviation that is not
///   positive or too small to form `1/σ²`;
/// - [`CoreError::InvalidParameter`] (`t`) when all `t` are equal.
pub fn weighted_slope(t: &[f64], y: &[f64], sigma: Option<&[f64]>) -> Result<Slope> {
    let n = t.len();
    if y.len() != n || sigma.is_some_and(|s| s.len() != n) {
        return Err(CoreError::InvalidParameter {
            name: "samples",
            reason: format!(
                "t has {n} values, y {}, sigma {}",
                y.len(),
                sigma.map_or("none".to_owned(), |s| s.len().to_string())
            ),
        });
    }
    if n < 2 {
        return Err(CoreError::TooFewPoints {
            context: "rate regression".into(),
            needed: 2,
            got: n,
        });
    }
    let mut w = vec![1.0; n];
    for k in 0..n {
        let id = || format!("sample {}", k + 1);
        if !t[k].is_finite() {
            return Err(CoreError::NonFinite {
                id: id(),
                field: "t",
            });
        }
        if !y[k].is_finite() {
            return Err(CoreError::NonFinite {
                id: id(),
                field: "y",
            });
        }
        if let Some(s) = sigma {
            let sk = s[k];
            if !sk.is_finite() {
                return Err(CoreError::NonFinite {
                    id: id(),
                    field: "sigma",
                });
            }
            let wk = 1.0 / (sk * sk);
            if sk <= 0.0 || !wk.is_finite() {
                return Err(CoreError::InvalidParameter {
                    name: "sigma",
                    reason: format!(
                        "{}: standard deviation must be positive and large enough to form 1/σ², got {sk}",
                        id()
                    ),
                });
            }
            w[k] = wk;
        }
    }
    let sw: f64 = w.iter().sum();
    let t_mean = w.iter().zip(t).map(|(w, t)| w * t).sum::<f64>() / sw;
    let y_mean = w.iter().zip(y).map(|(w, y)| w * y).sum::<f64>() / sw;
    let mut stt = 0.0;
    let mut sty = 0.0;
    for k in 0..n {
        let dt = t[k] - t_mean;
        stt += w[k] * dt * dt;
        sty += w[k] * dt * (y[k] - y_mean);
    }
    if stt <= 0.0 || !stt.is_finite() {
        return Err(CoreError::InvalidParameter {
            name: "t",
            reason: format!("all {n} sample times are equal; the slope is not determined"),
        });
    }
    let slope = sty / stt;
    let dof = n - 2;
    let (variance_factor, std_slope) = if dof > 0 {
        let vpv: f64 = (0..n)
            .map(|k| {
                let r = y[k] - (y_mean + slope * (t[k] - t_mean));
                w[k] * r * r
            })
            .sum();
        let s0 = vpv / dof as f64;
        (Some(s0), Some((s0 / stt).sqrt()))
    } else if sigma.is_some() {
        (None, Some((1.0 / stt).sqrt()))
    } else {
        (None, None)
    };
    Ok(Slope {
        slope,
        t_mean,
        y_mean,
        std_slope,
        variance_factor,
        dof,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_line_and_errors() {
        let s = weighted_slope(&[0.0, 1.0, 3.0], &[1.0, 3.0, 7.0], None).expect("fit");
        assert!((s.slope - 2.0).abs() < 1e-15);
        assert_eq!(s.dof, 1);
        assert!(s.std_slope.expect("std") < 1e-15);
        assert!(matches!(
            weighted_slope(&[1.0, 1.0], &[0.0, 1.0], None),
            Err(CoreError::InvalidParameter { name: "t", .. })
        ));
        assert!(matches!(
            weighted_slope(&[1.0], &[0.0], None),
            Err(CoreError::TooFewPoints {
                needed: 2,
                got: 1,
                ..
            })
        ));
        let two = weighted_slope(&[0.0, 2.0], &[0.0, 1.0], None).expect("fit");
        assert_eq!(two.std_slope, None);
    }
}
