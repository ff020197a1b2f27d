//! Time series of strain: the same regions of one network followed through epochs.
//!
//! ## Input
//! - [`Epoch`]s of ONE network, each with a label, a time (seconds since
//!   1970-01-01T00:00:00Z, UTC), the measured positions of its points (metres, with an
//!   optional standard deviation per axis) and optionally a temperature (°C). Epochs
//!   must be strictly increasing in time; labels are unique.
//! - A baseline epoch, chosen by label ([`SeriesOptions::baseline`]); it need not be
//!   the first.
//! - [`Regions`], defined once: user elements (triangles / tetrahedra) or named
//!   least-squares groups, by point ID.
//!
//! ## Method
//! For every epoch `k` a [`crate::PointSet`] is formed of the points measured at both
//! the baseline and `k`, with reference coordinates `x` = baseline position and
//! displacement `u = x_k − x_baseline` (metres). When both epochs state a standard
//! deviation for a point, the displacement's standard deviation is
//! `sqrt(σ_baseline² + σ_k²)` per axis (independent measurements); when either does not,
//! the point has none (unit weight in the fit). The gradient of every region follows
//! from the core estimators — [`crate::estimate::elements::element_strains`] or
//! [`crate::estimate::lsq::fit_groups`] — on that point set, and from it
//!
//! - the cumulative small strain `ε = (G+Gᵀ)/2` (2D `exx, eyy, exy`; 3D `exx, eyy, ezz,
//!   exy, eyz, exz`; tensor shear) and rotation (2D `ω`, 3D `w = curl(u)/2`) relative to
//!   the baseline;
//! - the increment between consecutive epochs at which the region is computed (skipping
//!   epochs where it is excluded), as the difference of cumulative values. Both
//!   estimators are linear in `u` for a fixed reference geometry and fixed weights, so
//!   this equals the strain of the incremental displacement `x_{k+1} − x_k` on the
//!   baseline geometry;
//! - the rate of every component: the slope of a weighted straight line through the
//!   cumulative values against time (the baseline's zero included), see [`rate`]. It
//!   is given per day and per Julian year (365.25 days), with its standard deviation
//!   from the residuals when at least three epochs are available. Weights are equal
//!   unless the caller gives per-epoch strain standard deviations
//!   ([`RateWeighting::Given`]) or asks for them to be propagated from the points'
//!   stated precision ([`RateWeighting::Precision`], weights `1/σ²` from
//!   [`EpochStrain::strain_std`]). The epochs share the baseline measurement: its
//!   error enters every cumulative strain as the same constant offset (the estimators
//!   are linear in `u`). Under [`RateWeighting::Precision`] the baseline's zero is
//!   therefore left out and the intercept is free, which absorbs that offset exactly
//!   when the weights of the estimator do not change between epochs; with equal or
//!   given weights the baseline is included and the correlation is ignored. A region
//!   available at fewer than two epochs has no rate ([`Rate::TooFewEpochs`]).
//! - the test of each increment against "no strain change" ([`Increment::test`]),
//!   from an estimate of the displacement between the two epochs themselves, whose
//!   precision combines only those two measurements.
//!
//! ## Missing points
//! A point not measured at an epoch (or at the baseline) excludes exactly the regions
//! that contain it, at that epoch; the result lists each as [`Excluded`] with the
//! missing point IDs. A group with any missing point is excluded as a whole rather than
//! fitted to the remaining points, so that every value of a region's series comes from
//! the same points and the series stays comparable.
//!
//! ## Temperature compensation
//! With [`SeriesOptions::thermal`], every epoch needs a temperature; the free thermal
//! strain `α·(T_k − T_baseline)` ([`thermal`]) is removed from the normal components
//! (shear unchanged). Both the uncompensated values (`strain`, `rate`) and the
//! compensated ones (`compensated`, `rate_compensated`) are reported.
//!
//! These are kinematic estimates from measured positions, not a structural assessment.

pub mod epochs;
pub mod rate;
pub mod series;
pub mod thermal;

pub use epochs::{DAYS_PER_JULIAN_YEAR, Epoch, EpochPoint, SECONDS_PER_DAY};
pub use rate::{Slope, weighted_slope};
pub use series::{
    ComponentRate, EpochStrain, Excluded, Increment, Rate, RateWeighting, RegionRate, RegionSeries,
    Regions, RejectedRegion, SeriesOptions, StrainSeries, StrainSigma, rotation_component_names,
    strain_component_names, strain_series,
};
pub use thermal::ThermalCompensation;
