//! Strain of fixed regions of one network through a series of epochs.
//!
//! See the [module docs](super) for the method and its conventions.

use std::collections::{HashMap, HashSet};

use nalgebra::{DMatrix, SMatrix};
use serde::Serialize;

use super::epochs::{DAYS_PER_JULIAN_YEAR, Epoch, EpochPoint, SECONDS_PER_DAY};
use super::rate::weighted_slope;
use super::thermal::ThermalCompensation;
use crate::error::{CoreError, Result};
use crate::estimate::elements::{ElementSpec, OrientationPolicy, element_strains};
use crate::estimate::lsq::{FitOptions, Group, fit_groups};
use crate::estimate::quality::QualityThresholds;
use crate::estimate::{GradientEstimate, RegionKind};
use crate::points::{Point, PointSet};
use crate::significance::{DeformationParameters, TestResult, VarianceFactor, test_zero_strain};
use crate::uncertainty::element::element_gradient_covariance_from_points;

/// Names of the small-strain components in the order of every strain vector of this
/// module: 2D `exx, eyy, exy`; 3D `exx, eyy, ezz, exy, eyz, exz`. The off-diagonal
/// values are tensor shears (`exy = gxy/2`), not engineering shears.
pub fn strain_component_names<const D: usize>() -> &'static [&'static str] {
    if D == 2 {
        &["exx", "eyy", "exy"]
    } else {
        &["exx", "eyy", "ezz", "exy", "eyz", "exz"]
    }
}

/// Names of the rotation components: 2D `omega` (radians, counter-clockwise positive);
/// 3D `wx, wy, wz` (rotation vector `curl(u)/2`, radians, right-hand rule).
pub fn rotation_component_names<const D: usize>() -> &'static [&'static str] {
    if D == 2 {
        &["omega"]
    } else {
        &["wx", "wy", "wz"]
    }
}

/// Index pairs `(i, j)` of the strain components, in [`strain_component_names`] order.
fn component_pairs<const D: usize>() -> &'static [(usize, usize)] {
    if D == 2 {
        &[(0, 0), (1, 1), (0, 1)]
    } else {
        &[(0, 0), (1, 1), (2, 2), (0, 1), (1, 2), (0, 2)]
    }
}

/// The regions whose strain is followed, defined once for the whole series.
#[derive(Debug, Clone, PartialEq)]
pub enum Regions {
    /// User elements (triangles in 2D, tetrahedra in 3D) by point IDs, gradient by the
    /// constant-strain element formula ([`element_strains`]).
    Elements {
        /// The elements.
        elements: Vec<ElementSpec>,
        /// Orientation policy passed to [`element_strains`].
        policy: OrientationPolicy,
        /// Quality screen passed to [`element_strains`]; it is judged on the baseline
        /// geometry, so an element is screened out at every epoch or at none.
        thresholds: QualityThresholds,
    },
    /// Named groups, gradient by the weighted least-squares fit ([`fit_groups`]).
    Groups {
        /// The groups.
        groups: Vec<Group>,
        /// Fit options passed to [`fit_groups`].
        options: FitOptions,
    },
}

impl Regions {
    /// `(label, point IDs)` of every region, in input order.
    fn members(&self) -> Vec<(&str, &[String])> {
        match self {
            Regions::Elements { elements, .. } => elements
                .iter()
                .map(|e| (e.id.as_str(), e.vertices.as_slice()))
                .collect(),
            Regions::Groups { groups, .. } => groups
                .iter()
                .map(|g| (g.name.as_str(), g.point_ids.as_slice()))
                .collect(),
        }
    }

    /// `element `ID`` or `group `NAME``, for error messages.
    fn context(&self, label: &str) -> String {
        match self {
            Regions::Elements { .. } => format!("element `{label}`"),
            Regions::Groups { .. } => format!("group `{label}`"),
        }
    }
}

/// Caller-supplied standard deviation of each cumulative strain component of one
/// region at one epoch, for the rate regression's weights `1/σ²`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct StrainSigma {
    /// Region label (element ID or group name).
    pub region: String,
    /// Epoch label.
    pub epoch: String,
    /// Standard deviation of each component, dimensionless strain, in
    /// [`strain_component_names`] order.
    pub sigma: Vec<f64>,
}

/// Weights of the rate regression.
#[derive(Debug, Clone, PartialEq, Default)]
pub enum RateWeighting {
    /// Every epoch of a region has weight 1; the slope's standard deviation comes from
    /// the scatter about the line (needs ≥ 3 epochs).
    #[default]
    Equal,
    /// Weights `1/σ²` from the given standard deviations. Every epoch a region is
    /// computed at (the baseline too, whose cumulative strain is 0 by definition)
    /// needs an entry. The groups' [`EpochStrain::strain_std`] can serve as input.
    Given(Vec<StrainSigma>),
    /// Weights `1/σ²` from the propagated a-priori standard deviation of each epoch's
    /// cumulative strain ([`EpochStrain::strain_std`]), computed inside the series from
    /// the points' stated precision. The baseline is left out of the regression and the
    /// intercept is free: its cumulative strain is zero by construction, and the
    /// baseline's measurement error enters every other epoch as the same constant offset
    /// (the estimators are linear in `u`), which the free intercept absorbs. A region
    /// without a standard deviation at some epoch after the baseline, or with fewer than
    /// two such epochs, falls back to equal weights with the baseline included
    /// ([`RegionRate::weighted`] false).
    Precision,
}

/// Options of [`strain_series`].
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesOptions {
    /// Label of the baseline epoch; displacements and cumulative strains are relative
    /// to it, and its positions are the reference geometry.
    pub baseline: String,
    /// Temperature compensation, or `None` for none.
    pub thermal: Option<ThermalCompensation>,
    /// Weights of the rate regression.
    pub weighting: RateWeighting,
    /// Significance level of the test of each increment ([`Increment::test`]),
    /// `0 < alpha < 1`.
    pub alpha: f64,
    /// Test group increments with χ² and the a-priori variance factor 1 of the stated
    /// precision instead of F with the fit's estimated factor (elements always use χ²).
    pub trust_apriori: bool,
}

impl SeriesOptions {
    /// Baseline `label`, no temperature compensation, equal weights.
    pub fn new(baseline: impl Into<String>) -> Self {
        Self {
            baseline: baseline.into(),
            thermal: None,
            weighting: RateWeighting::Equal,
            alpha: 0.05,
            trust_apriori: false,
        }
    }
}

/// The strain of one region at one epoch, cumulative from the baseline.
#[derive(Debug, Clone, PartialEq)]
pub struct EpochStrain<const D: usize> {
    /// Epoch label.
    pub epoch: String,
    /// Epoch time, seconds since 1970-01-01T00:00:00Z.
    pub time_s: f64,
    /// Time since the baseline, days (negative for epochs before it).
    pub days_from_baseline: f64,
    /// Displacement gradient relative to the baseline, dimensionless.
    pub gradient: SMatrix<f64, D, D>,
    /// Cumulative small strain, uncompensated, in [`strain_component_names`] order.
    pub strain: Vec<f64>,
    /// Cumulative rotation, radians, in [`rotation_component_names`] order.
    pub rotation: Vec<f64>,
    /// Free thermal strain `α·(T − T_baseline)` removed from the normal components;
    /// `None` without compensation.
    pub thermal_strain: Option<f64>,
    /// Cumulative strain with the free thermal strain removed from the normal
    /// components (shear unchanged); `None` without compensation.
    pub compensated: Option<Vec<f64>>,
    /// A-priori standard deviation of each cumulative strain component (dimensionless,
    /// [`strain_component_names`] order), propagated from the stated precision of the
    /// displacements (`sqrt(σ_baseline² + σ_k²)` per axis, variance factor 1):
    /// elements through the shape functions
    /// ([`element_gradient_covariance_from_points`]); groups from the fit's
    /// `cov_gradient` divided by its a-posteriori variance factor (an exact fit's
    /// covariance already carries factor 1). With `C` = covariance of row-major
    /// `vec(G)`: `var(e_ii) = C[ii,ii]`, `var(e_ij) = (C[ij,ij] + C[ji,ji] + 2·C[ij,ji])/4`.
    /// Exactly 0 at the baseline (its cumulative strain is zero by construction).
    /// `None` when some point of the region states no precision, when a group is fitted
    /// without precision weights, or for a group whose fit has zero residuals (no
    /// variance factor to remove).
    pub strain_std: Option<Vec<f64>>,
}

/// The change of strain between two consecutive epochs at which a region is computed.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Increment {
    /// Label of the earlier epoch.
    pub from: String,
    /// Label of the later epoch.
    pub to: String,
    /// Time between them, days.
    pub dt_days: f64,
    /// Strain increment (later minus earlier cumulative), uncompensated.
    pub strain: Vec<f64>,
    /// Rotation increment, radians.
    pub rotation: Vec<f64>,
    /// Compensated strain increment; `None` without compensation.
    pub compensated: Option<Vec<f64>>,
    /// Test of H0 "no strain change" at [`SeriesOptions::alpha`], on the strain
    /// components only. The increment is estimated directly from the displacement
    /// between the two epochs, `x_to − x_from`, on the baseline geometry, with the
    /// precision `sqrt(σ_from² + σ_to²)` per axis; so it involves only those two
    /// measurements and no correlation through the shared baseline arises. Elements
    /// (and exact group fits, or every group with [`SeriesOptions::trust_apriori`]): χ²
    /// with the a-priori variance factor 1 trusted; other groups with redundancy: F with
    /// the fit's estimated factor. For elements the estimate
    /// equals [`Self::strain`]; for groups it can differ slightly when the stated
    /// precision changes between epochs (other weights). `None` when a point of the
    /// region states no precision at either epoch, a group is fitted without precision
    /// weights, or a group fit has zero residuals.
    pub test: Option<TestResult>,
}

/// Rate of one strain component.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ComponentRate {
    /// Component name ([`strain_component_names`]).
    pub component: &'static str,
    /// Rate, strain per day.
    pub per_day: f64,
    /// Rate, strain per Julian year (365.25 days).
    pub per_year: f64,
    /// Standard deviation of the rate, strain per day; `None` when not determined
    /// (two epochs with equal weights).
    pub std_per_day: Option<f64>,
    /// Standard deviation of the rate, strain per Julian year.
    pub std_per_year: Option<f64>,
    /// A-posteriori variance factor of the regression (≥ 3 epochs).
    pub variance_factor: Option<f64>,
}

/// Rates of all components of one region.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RegionRate {
    /// Number of epochs in the regression (see [`Self::includes_baseline`]).
    pub n_epochs: usize,
    /// Residual degrees of freedom `n_epochs − 2`.
    pub dof: usize,
    /// True when the weights came from [`RateWeighting::Given`] or
    /// [`RateWeighting::Precision`], false for equal weights.
    pub weighted: bool,
    /// True when the baseline's zero is one of the `n_epochs` points; false under
    /// [`RateWeighting::Precision`], which leaves it out with the intercept free.
    pub includes_baseline: bool,
    /// One rate per component, in [`strain_component_names`] order.
    pub components: Vec<ComponentRate>,
}

/// The rate of a region, or why there is none.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Rate {
    /// Rates from the regression.
    Estimated(RegionRate),
    /// Fewer than two epochs are available for the region: no rate.
    TooFewEpochs {
        /// Epochs at which the region was computed.
        available: usize,
    },
}

/// The series of one region.
#[derive(Debug, Clone, PartialEq)]
pub struct RegionSeries<const D: usize> {
    /// Element ID or group name.
    pub region: String,
    /// Triangle, tetrahedron or group.
    pub kind: RegionKind,
    /// Cumulative strain at every epoch at which the region is computed, in time order.
    pub samples: Vec<EpochStrain<D>>,
    /// Increments between consecutive samples.
    pub increments: Vec<Increment>,
    /// Rate of the uncompensated strain.
    pub rate: Rate,
    /// Rate of the compensated strain; `None` without compensation.
    pub rate_compensated: Option<Rate>,
}

/// A region left out at one epoch because some of its points were not measured there
/// (or not at the baseline).
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Excluded {
    /// Element ID or group name.
    pub region: String,
    /// Epoch label.
    pub epoch: String,
    /// The region's point IDs missing at this epoch or at the baseline, in the order
    /// the region lists them.
    pub missing: Vec<String>,
}

/// A region screened out by the element quality screen (on the baseline geometry,
/// hence at every epoch).
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RejectedRegion {
    /// Element ID.
    pub region: String,
    /// The screen's reason, with the numbers.
    pub reason: String,
}

/// Result of [`strain_series`].
#[derive(Debug, Clone, PartialEq)]
pub struct StrainSeries<const D: usize> {
    /// Label of the baseline epoch.
    pub baseline: String,
    /// Strain component names of every strain vector.
    pub components: &'static [&'static str],
    /// Rotation component names of every rotation vector.
    pub rotation_components: &'static [&'static str],
    /// The compensation applied to the `compensated` values, if any.
    pub thermal: Option<ThermalCompensation>,
    /// One entry per region not screened out, in input order.
    pub regions: Vec<RegionSeries<D>>,
    /// Regions left out at single epochs, with the missing points, in epoch order.
    pub excluded: Vec<Excluded>,
    /// Elements screened out by quality.
    pub rejected: Vec<RejectedRegion>,
}

/// Follow the strain of `regions` through `epochs` (module docs).
///
/// # Errors
/// - [`CoreError::Empty`] (`epochs`, `elements`, `groups`) for an empty input;
/// - every error of [`Epoch::validate`];
/// - [`CoreError::DuplicateEpoch`], [`CoreError::EpochsOutOfOrder`] (equal times too);
/// - [`CoreError::BaselineNotInSeries`];
/// - [`CoreError::InvalidParameter`] (`alpha_per_k`) and
///   [`CoreError::MissingTemperature`] under temperature compensation;
/// - [`CoreError::UnknownPoint`] for a region point measured at no epoch at all;
/// - errors of [`element_strains`] / [`fit_groups`] on the baseline geometry
///   (degenerate element or group, bad options …), wrapped in [`CoreError::InEpoch`];
/// - [`CoreError::InvalidParameter`] (`strain_sigma`) for given standard deviations that
///   name an unknown region or epoch, repeat one, have the wrong length or miss a
///   sample; errors of [`weighted_slope`] for bad values.
pub fn strain_series<const D: usize>(
    epochs: &[Epoch<D>],
    regions: &Regions,
    opts: &SeriesOptions,
) -> Result<StrainSeries<D>> {
    if epochs.is_empty() {
        return Err(CoreError::Empty { what: "epochs" });
    }
    crate::significance::distribution::check_alpha("alpha", opts.alpha)?;
    let mut labels = HashSet::with_capacity(epochs.len());
    for (k, e) in epochs.iter().enumerate() {
        e.validate()?;
        if !labels.insert(e.label.as_str()) {
            return Err(CoreError::DuplicateEpoch {
                label: e.label.clone(),
            });
        }
        if k > 0 {
            let p = &epochs[k - 1];
            if e.time_s <= p.time_s {
                return Err(CoreError::EpochsOutOfOrder {
                    previous: p.label.clone(),
                    previous_time_s: p.time_s,
                    next: e.label.clone(),
                    next_time_s: e.time_s,
                });
            }
        }
    }
    let Some(b) = epochs.iter().position(|e| e.label == opts.baseline) else {
        return Err(CoreError::BaselineNotInSeries {
            label: opts.baseline.clone(),
            known: epochs
                .iter()
                .map(|e| e.label.as_str())
                .collect::<Vec<_>>()
                .join(", "),
        });
    };
    let base = &epochs[b];
    let temps = match &opts.thermal {
        None => None,
        Some(th) => {
            th.validate()?;
            let mut t = Vec::with_capacity(epochs.len());
            for e in epochs {
                let Some(tc) = e.temperature_c else {
                    return Err(CoreError::MissingTemperature {
                        epoch: e.label.clone(),
                    });
                };
                t.push(tc);
            }
            Some((th, t))
        }
    };

    let members = regions.members();
    if members.is_empty() {
        return Err(CoreError::Empty {
            what: match regions {
                Regions::Elements { .. } => "elements",
                Regions::Groups { .. } => "groups",
            },
        });
    }
    let epoch_ids: Vec<HashSet<&str>> = epochs.iter().map(Epoch::ids).collect();
    for (label, ids) in &members {
        for id in ids.iter() {
            if !epoch_ids.iter().any(|s| s.contains(id.as_str())) {
                return Err(CoreError::UnknownPoint {
                    context: regions.context(label),
                    id: id.clone(),
                });
            }
        }
    }

    let given = given_sigmas::<D>(&opts.weighting, epochs, &members)?;
    let names = strain_component_names::<D>();
    let pairs = component_pairs::<D>();
    let base_map: HashMap<&str, &EpochPoint<D>> =
        base.points.iter().map(|p| (p.id.as_str(), p)).collect();

    // Per region (input order): the samples; plus exclusions and rejections.
    let mut samples: Vec<Vec<EpochStrain<D>>> = vec![Vec::new(); members.len()];
    let mut kinds: Vec<Option<RegionKind>> = vec![None; members.len()];
    let mut excluded = Vec::new();
    let mut rejected: Vec<RejectedRegion> = Vec::new();
    let mut rejected_labels: HashSet<String> = HashSet::new();
    let index_of: HashMap<&str, usize> = members
        .iter()
        .enumerate()
        .map(|(i, (l, _))| (*l, i))
        .collect();

    for (k, e) in epochs.iter().enumerate() {
        let here = &epoch_ids[k];
        let mut available = Vec::with_capacity(members.len());
        for (ri, (label, ids)) in members.iter().enumerate() {
            let missing: Vec<String> = ids
                .iter()
                .filter(|id| !(here.contains(id.as_str()) && base_map.contains_key(id.as_str())))
                .cloned()
                .collect();
            if missing.is_empty() {
                available.push(ri);
            } else {
                excluded.push(Excluded {
                    region: (*label).to_owned(),
                    epoch: e.label.clone(),
                    missing,
                });
            }
        }
        if available.is_empty() {
            continue;
        }
        let set = displacement_set(base, e)?;
        let estimates = estimate(regions, &set, &available).map_err(|err| e.wrap(err))?;
        for (label, reason) in estimates.1 {
            if rejected_labels.insert(label.clone()) {
                rejected.push(RejectedRegion {
                    region: label,
                    reason,
                });
            }
        }
        let days = (e.time_s - base.time_s) / SECONDS_PER_DAY;
        let thermal = temps.as_ref().map(|(th, t)| th.thermal_strain(t[k], t[b]));
        for est in estimates.0 {
            let Some(&ri) = index_of.get(est.label.as_str()) else {
                continue;
            };
            kinds[ri] = Some(est.kind);
            let g = est.gradient;
            let strain: Vec<f64> = pairs
                .iter()
                .map(|&(i, j)| 0.5 * (g[(i, j)] + g[(j, i)]))
                .collect();
            let compensated = thermal.map(|th| compensate::<D>(&strain, th));
            let strain_std = if k == b {
                states_precision(regions, &set, &est).then(|| vec![0.0; pairs.len()])
            } else {
                apriori_cov_gradient(regions, &set, &est)
                    .map_err(|err| e.wrap(err))?
                    .map(|c| strain_sd::<D>(&c))
            };
            samples[ri].push(EpochStrain {
                epoch: e.label.clone(),
                time_s: e.time_s,
                days_from_baseline: days,
                gradient: g,
                strain,
                rotation: rotation::<D>(&g),
                thermal_strain: thermal,
                compensated,
                strain_std,
            });
        }
    }

    let by_label: HashMap<&str, &Epoch<D>> = epochs.iter().map(|e| (e.label.as_str(), e)).collect();
    let mut out = Vec::with_capacity(members.len());
    for (ri, s) in samples.into_iter().enumerate() {
        let label = members[ri].0;
        if rejected_labels.contains(label) {
            continue;
        }
        let kind = kinds[ri].unwrap_or(match regions {
            Regions::Elements { .. } if D == 2 => RegionKind::Triangle,
            Regions::Elements { .. } => RegionKind::Tetrahedron,
            Regions::Groups { .. } => RegionKind::Group,
        });
        let mut increments = Vec::with_capacity(s.len().saturating_sub(1));
        for w in s.windows(2) {
            let test =
                increment_test(regions, base, &by_label, ri, &w[0].epoch, &w[1].epoch, opts)?;
            increments.push(Increment {
                from: w[0].epoch.clone(),
                to: w[1].epoch.clone(),
                dt_days: w[1].days_from_baseline - w[0].days_from_baseline,
                strain: diff(&w[1].strain, &w[0].strain),
                rotation: diff(&w[1].rotation, &w[0].rotation),
                compensated: match (&w[1].compensated, &w[0].compensated) {
                    (Some(a), Some(c)) => Some(diff(a, c)),
                    _ => None,
                },
                test,
            });
        }
        let sig = match &given {
            Some(g) => Weights::Given(g, label),
            None if opts.weighting == RateWeighting::Precision => Weights::Precision(&base.label),
            None => Weights::Equal,
        };
        let rate = region_rate(&s, names, sig, |x| &x.strain)?;
        let rate_compensated = if temps.is_some() {
            Some(region_rate(&s, names, sig, |x| {
                x.compensated.as_ref().unwrap_or(&x.strain)
            })?)
        } else {
            None
        };
        out.push(RegionSeries {
            region: label.to_owned(),
            kind,
            samples: s,
            increments,
            rate,
            rate_compensated,
        });
    }

    Ok(StrainSeries {
        baseline: base.label.clone(),
        components: names,
        rotation_components: rotation_component_names::<D>(),
        thermal: opts.thermal,
        regions: out,
        excluded,
        rejected,
    })
}

/// Points measured at both the baseline and epoch `e`, in baseline order, with
/// `x` = baseline position, `u` = epoch − baseline and the combined sigma.
fn displacement_set<const D: usize>(base: &Epoch<D>, e: &Epoch<D>) -> Result<PointSet<D>> {
    displacement_between(base, base, e)
}

/// Points measured at `base`, `from` and `to`, in baseline order, with `x` = baseline
/// position, `u = x_to − x_from` and the combined sigma of `from` and `to`.
fn displacement_between<const D: usize>(
    base: &Epoch<D>,
    from: &Epoch<D>,
    e: &Epoch<D>,
) -> Result<PointSet<D>> {
    let now: HashMap<&str, &EpochPoint<D>> = e.points.iter().map(|p| (p.id.as_str(), p)).collect();
    let then: HashMap<&str, &EpochPoint<D>> =
        from.points.iter().map(|p| (p.id.as_str(), p)).collect();
    let mut pts = Vec::with_capacity(base.points.len());
    for p0 in &base.points {
        let (Some(pe), Some(pb)) = (now.get(p0.id.as_str()), then.get(p0.id.as_str())) else {
            continue;
        };
        let mut u = [0.0; D];
        for (k, uk) in u.iter_mut().enumerate() {
            *uk = pe.x[k] - pb.x[k];
        }
        let sigma = match (pb.sigma, pe.sigma) {
            (Some(sb), Some(se)) => {
                let mut s = [0.0; D];
                for (k, sk) in s.iter_mut().enumerate() {
                    *sk = sb[k].hypot(se[k]);
                }
                Some(s)
            }
            _ => None,
        };
        pts.push(Point {
            id: p0.id.clone(),
            x: p0.x,
            u,
            sigma,
            cov: None,
        });
    }
    PointSet::new(pts).map_err(|err| e.wrap(err))
}

/// Accepted estimates and `(label, reason)` of quality rejections.
type Estimates<const D: usize> = (Vec<GradientEstimate<D>>, Vec<(String, String)>);

/// Run the region's estimator on the regions `available` (indices into the region list).
fn estimate<const D: usize>(
    regions: &Regions,
    set: &PointSet<D>,
    available: &[usize],
) -> Result<Estimates<D>> {
    match regions {
        Regions::Elements {
            elements,
            policy,
            thresholds,
        } => {
            let subset: Vec<ElementSpec> = available.iter().map(|&i| elements[i].clone()).collect();
            let (acc, rej) = element_strains(set, &subset, *policy, thresholds)?;
            Ok((acc, rej.into_iter().map(|r| (r.label, r.reason)).collect()))
        }
        Regions::Groups { groups, options } => {
            let subset: Vec<Group> = available.iter().map(|&i| groups[i].clone()).collect();
            Ok((fit_groups(set, &subset, options)?, Vec::new()))
        }
    }
}

/// Strain with the free thermal strain `th` removed from the normal components.
fn compensate<const D: usize>(strain: &[f64], th: f64) -> Vec<f64> {
    strain
        .iter()
        .enumerate()
        .map(|(c, v)| if c < D { v - th } else { *v })
        .collect()
}

/// Rotation components of a gradient (see [`rotation_component_names`]).
fn rotation<const D: usize>(g: &SMatrix<f64, D, D>) -> Vec<f64> {
    let w = |i: usize, j: usize| 0.5 * (g[(i, j)] - g[(j, i)]);
    if D == 2 {
        vec![w(1, 0)]
    } else {
        vec![w(2, 1), w(0, 2), w(1, 0)]
    }
}

fn diff(a: &[f64], b: &[f64]) -> Vec<f64> {
    a.iter().zip(b).map(|(x, y)| x - y).collect()
}

/// Given standard deviations keyed by `(region, epoch)`, checked.
type SigmaMap = HashMap<(String, String), Vec<f64>>;

fn given_sigmas<const D: usize>(
    weighting: &RateWeighting,
    epochs: &[Epoch<D>],
    members: &[(&str, &[String])],
) -> Result<Option<SigmaMap>> {
    let RateWeighting::Given(list) = weighting else {
        return Ok(None);
    };
    let n = strain_component_names::<D>().len();
    let mut map = HashMap::with_capacity(list.len());
    for s in list {
        let bad = |reason: String| CoreError::InvalidParameter {
            name: "strain_sigma",
            reason,
        };
        if !members.iter().any(|(l, _)| *l == s.region) {
            return Err(bad(format!("unknown region `{}`", s.region)));
        }
        if !epochs.iter().any(|e| e.label == s.epoch) {
            return Err(bad(format!("unknown epoch `{}`", s.epoch)));
        }
        if s.sigma.len() != n {
            return Err(bad(format!(
                "region `{}`, epoch `{}`: {} values, expected {n}",
                s.region,
                s.epoch,
                s.sigma.len()
            )));
        }
        if let Some(v) = s.sigma.iter().find(|v| !(v.is_finite() && **v > 0.0)) {
            return Err(bad(format!(
                "region `{}`, epoch `{}`: standard deviation must be positive and finite, got {v}",
                s.region, s.epoch
            )));
        }
        if map
            .insert((s.region.clone(), s.epoch.clone()), s.sigma.clone())
            .is_some()
        {
            return Err(bad(format!(
                "region `{}`, epoch `{}` is given twice",
                s.region, s.epoch
            )));
        }
    }
    Ok(Some(map))
}

/// How the rate regression of one region is weighted.
#[derive(Clone, Copy)]
enum Weights<'a> {
    /// Weight 1, the baseline included.
    Equal,
    /// Given standard deviations for `(region, epoch)`, the baseline included.
    Given(&'a SigmaMap, &'a str),
    /// [`EpochStrain::strain_std`], the baseline (label) left out, intercept free.
    Precision(&'a str),
}

/// Rates of every component of one region from its samples; `value` picks the
/// uncompensated or compensated strain vector.
fn region_rate<const D: usize>(
    samples: &[EpochStrain<D>],
    names: &'static [&'static str],
    weights: Weights<'_>,
    value: impl Fn(&EpochStrain<D>) -> &Vec<f64>,
) -> Result<Rate> {
    if let Weights::Precision(baseline) = weights {
        let after: Vec<&EpochStrain<D>> = samples.iter().filter(|s| s.epoch != baseline).collect();
        let sig: Option<Vec<&Vec<f64>>> = after
            .iter()
            .map(|s| {
                s.strain_std
                    .as_ref()
                    .filter(|v| v.iter().all(|x| x.is_finite() && *x > 0.0))
            })
            .collect();
        if let Some(sig) = sig.filter(|_| after.len() >= 2) {
            let t: Vec<f64> = after.iter().map(|s| s.days_from_baseline).collect();
            let ys: Vec<Vec<f64>> = (0..names.len())
                .map(|c| after.iter().map(|s| value(s)[c]).collect())
                .collect();
            let sc: Vec<Vec<f64>> = (0..names.len())
                .map(|c| sig.iter().map(|s| s[c]).collect())
                .collect();
            return fit_components(names, &t, &ys, Some(&sc), false);
        }
    }
    if samples.len() < 2 {
        return Ok(Rate::TooFewEpochs {
            available: samples.len(),
        });
    }
    let t: Vec<f64> = samples.iter().map(|s| s.days_from_baseline).collect();
    let sig: Option<Vec<&Vec<f64>>> = match weights {
        Weights::Equal | Weights::Precision(_) => None,
        Weights::Given(map, region) => Some(
            samples
                .iter()
                .map(|s| {
                    map.get(&(region.to_owned(), s.epoch.clone()))
                        .ok_or_else(|| CoreError::InvalidParameter {
                            name: "strain_sigma",
                            reason: format!(
                                "no standard deviation given for region `{region}` at epoch `{}`",
                                s.epoch
                            ),
                        })
                })
                .collect::<Result<_>>()?,
        ),
    };
    let ys: Vec<Vec<f64>> = (0..names.len())
        .map(|c| samples.iter().map(|s| value(s)[c]).collect())
        .collect();
    let sc: Option<Vec<Vec<f64>>> = sig.map(|v| {
        (0..names.len())
            .map(|c| v.iter().map(|s| s[c]).collect())
            .collect()
    });
    fit_components(names, &t, &ys, sc.as_deref(), true)
}

/// One weighted slope per component: `ys[c]` the values, `sigma[c]` their standard
/// deviations (or equal weights).
fn fit_components(
    names: &'static [&'static str],
    t: &[f64],
    ys: &[Vec<f64>],
    sigma: Option<&[Vec<f64>]>,
    includes_baseline: bool,
) -> Result<Rate> {
    let mut components = Vec::with_capacity(names.len());
    let mut dof = 0;
    for (c, &name) in names.iter().enumerate() {
        let sc = sigma.map(|s| s[c].as_slice());
        let fit = weighted_slope(t, &ys[c], sc).map_err(|e| match e {
            CoreError::InvalidParameter { name: n, reason } => CoreError::InvalidParameter {
                name: n,
                reason: format!("rate of `{name}`: {reason}"),
            },
            other => other,
        })?;
        dof = fit.dof;
        components.push(ComponentRate {
            component: name,
            per_day: fit.slope,
            per_year: fit.slope * DAYS_PER_JULIAN_YEAR,
            std_per_day: fit.std_slope,
            std_per_year: fit.std_slope.map(|s| s * DAYS_PER_JULIAN_YEAR),
            variance_factor: fit.variance_factor,
        });
    }
    Ok(Rate::Estimated(RegionRate {
        n_epochs: t.len(),
        dof,
        weighted: sigma.is_some(),
        includes_baseline,
        components,
    }))
}

/// Standard deviations of the strain components from the covariance `c` of row-major
/// `vec(G)` (see [`EpochStrain::strain_std`]).
fn strain_sd<const D: usize>(c: &DMatrix<f64>) -> Vec<f64> {
    component_pairs::<D>()
        .iter()
        .map(|&(i, j)| {
            let a = i * D + j;
            let bb = j * D + i;
            let v = if i == j {
                c[(a, a)]
            } else {
                (c[(a, a)] + c[(bb, bb)] + 2.0 * c[(a, bb)]) / 4.0
            };
            v.max(0.0).sqrt()
        })
        .collect()
}

/// True when every point of the estimate states a precision and, for groups, the fit
/// weights by it.
fn states_precision<const D: usize>(
    regions: &Regions,
    set: &PointSet<D>,
    est: &GradientEstimate<D>,
) -> bool {
    let pts = set.points();
    let all = est
        .members
        .iter()
        .all(|&m| pts.get(m).is_some_and(|p| p.covariance().is_some()));
    match regions {
        Regions::Elements { .. } => all,
        Regions::Groups { options, .. } => all && options.use_precision,
    }
}

/// A-priori covariance of `vec(G)` (variance factor 1) of an estimate on `set`, or
/// `None` when it is not available (see [`EpochStrain::strain_std`]).
fn apriori_cov_gradient<const D: usize>(
    regions: &Regions,
    set: &PointSet<D>,
    est: &GradientEstimate<D>,
) -> Result<Option<DMatrix<f64>>> {
    if !states_precision(regions, set, est) {
        return Ok(None);
    }
    match regions {
        Regions::Elements { .. } => element_gradient_covariance_from_points(set, &est.members),
        Regions::Groups { .. } => Ok(est.fit.as_ref().and_then(|f| {
            if f.exact {
                Some(f.cov_gradient.clone())
            } else {
                f.variance_factor
                    .filter(|v| v.is_finite() && *v > 0.0)
                    .map(|v| &f.cov_gradient / v)
            }
        })),
    }
}

/// The test of H0 "no strain change" of region `ri` between epochs `from` and `to`
/// (see [`Increment::test`]).
fn increment_test<const D: usize>(
    regions: &Regions,
    base: &Epoch<D>,
    by_label: &HashMap<&str, &Epoch<D>>,
    ri: usize,
    from: &str,
    to: &str,
    opts: &SeriesOptions,
) -> Result<Option<TestResult>> {
    let (Some(ea), Some(eb)) = (by_label.get(from), by_label.get(to)) else {
        return Ok(None);
    };
    let set = displacement_between(base, ea, eb)?;
    let (acc, _) = estimate(regions, &set, &[ri]).map_err(|err| eb.wrap(err))?;
    let Some(est) = acc.into_iter().next() else {
        return Ok(None);
    };
    if !states_precision(regions, &set, &est) {
        return Ok(None);
    }
    let params = match regions {
        Regions::Elements { .. } => {
            let Some(cov) = element_gradient_covariance_from_points(&set, &est.members)? else {
                return Ok(None);
            };
            DeformationParameters::from_gradient(
                &est.gradient,
                &cov,
                VarianceFactor::Apriori { sigma0_sq: 1.0 },
            )?
        }
        Regions::Groups { .. } => {
            let Some(fit) = &est.fit else {
                return Ok(None);
            };
            if opts.trust_apriori || fit.exact || fit.redundancy == 0 {
                DeformationParameters::from_estimate(&est, Some(1.0))?
            } else if fit
                .variance_factor
                .is_some_and(|v| v.is_finite() && v > 0.0)
            {
                DeformationParameters::from_estimate(&est, None)?
            } else {
                return Ok(None);
            }
        }
    };
    test_zero_strain(&params, opts.alpha).map(Some)
}
