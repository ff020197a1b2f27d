//! Temperature compensation: removing the free thermal strain of an isotropic material.
//!
//! A free (unrestrained) isotropic solid heated by `ΔT` strains by `ε_ij = α·ΔT·δ_ij`
//! (Timoshenko & Goodier, *Theory of Elasticity*, 3rd ed., chapter on thermal stress;
//! ch. 13 from memory): equal extension in every direction, no shear. The compensated strain is therefore
//!
//! ```text
//! ε_ii,comp = ε_ii − α·(T − T_baseline)      (normal components)
//! ε_ij,comp = ε_ij                           (shear components, i ≠ j)
//! ```
//!
//! with `α` in 1/K (equivalently 1/°C) and temperatures in °C. This removes only the free
//! expansion of a homogeneous, isotropic material at one temperature; gradients of
//! temperature through the structure and restrained expansion are not modelled.

use serde::{Deserialize, Serialize};

use crate::error::{CoreError, Result};

/// Temperature compensation with one linear coefficient of thermal expansion.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ThermalCompensation {
    /// Linear coefficient of thermal expansion `α`, 1/K (e.g. about 1.2e-5 for
    /// structural steel and 1.0e-5 for normal concrete, common practice; take the
    /// value for the actual material).
    pub alpha_per_k: f64,
}

impl ThermalCompensation {
    /// Check `α`: finite (a negative coefficient is allowed; some materials shrink
    /// when heated).
    ///
    /// # Errors
    /// [`CoreError::InvalidParameter`] (`alpha_per_k`) when `α` is NaN or infinite.
    pub fn validate(&self) -> Result<()> {
        if self.alpha_per_k.is_finite() {
            Ok(())
        } else {
            Err(CoreError::InvalidParameter {
                name: "alpha_per_k",
                reason: format!("must be a finite number in 1/K, got {}", self.alpha_per_k),
            })
        }
    }

    /// Free thermal (normal) strain `α·(T − T_baseline)`, dimensionless, temperatures
    /// in °C.
    pub fn thermal_strain(&self, temperature_c: f64, baseline_c: f64) -> f64 {
        self.alpha_per_k * (temperature_c - baseline_c)
    }
}
