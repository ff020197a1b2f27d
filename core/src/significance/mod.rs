//! Is the strain real? Global χ² / F tests of "strain = 0" on the deformation
//! parameters only (not translation, not rotation), the same test on the change between
//! two epochs, and the minimal detectable strain of a network (Baarda's reliability
//! concept).
//!
//! | module | holds |
//! |---|---|
//! | [`distribution`] | χ² and F tails (statrs), non-central χ² CDF, critical values, `λ₀(α, β, m)` |
//! | [`test`] | [`DeformationParameters`], [`test_zero_strain`], [`test_strain_change`], [`minimal_detectable_strain`] |
//!
//! A significant strain says the estimate differs from zero beyond the stated
//! measurement precision; it is a kinematic statement, not a structural assessment.

pub mod distribution;
pub mod test;

pub use distribution::{
    chi2_critical, chi2_sf, f_critical, f_sf, noncentral_chi2_cdf, noncentrality,
};
pub use test::{
    DeformationParameters, Distribution, MinimalDetectable, TestResult, VarianceFactor,
    minimal_detectable_strain, test_strain_change, test_zero_strain,
};
