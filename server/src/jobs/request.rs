//! What a job runs: the analysis asked for (`POST /v1/structures/{id}/analyses`), the
//! checks made before it is queued, and the structure's automatic analysis that turns
//! an arriving batch into jobs.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use utoipa::ToSchema;

use crate::analysis::params::{FieldOptions, MethodSpec};
use crate::analysis::series::MAX_SERIES_EPOCHS;
use crate::api::problem::{ApiError, FieldError};
use crate::ingest::validate::parse_epoch;
use crate::model::{Structure, rfc3339};
use crate::store::DynStore;
use crate::units::StrainUnit;

/// Body of `POST /v1/structures/{id}/analyses`: what to analyse, chosen by `kind`.
/// It is also what a job stores as its `request`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum AnalysisInput {
    /// The strain field at one epoch, from the readings at it (displacements from the
    /// reference coordinates) or from their difference to the readings at a baseline
    /// epoch.
    Epoch {
        /// The epoch analysed: an epoch with readings, RFC 3339 (any offset; compared
        /// in UTC to the microsecond).
        epoch: String,
        /// An earlier epoch with readings whose displacements are subtracted, RFC
        /// 3339; absent = displacements from the reference coordinates.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        baseline_epoch: Option<String>,
        /// The estimator (`delaunay`, `elements`, `groups`, `neighbourhood`,
        /// `network`); lengths in it are in the structure's length unit.
        method: MethodSpec,
        /// Options of the estimator; absent members take their defaults.
        #[serde(default)]
        options: FieldOptions,
        /// Unit of the strains in the result: `strain` or `microstrain` (default).
        #[serde(default)]
        strain_unit: StrainUnit,
    },
    /// The strain of fixed regions (elements or groups) followed through the epochs
    /// in `[from, to]`: cumulative strain from the baseline epoch, increments between
    /// consecutive epochs and rates (least-squares slope against time). No
    /// temperature compensation: epoch temperatures are not stored.
    Series {
        /// First time of the range, RFC 3339, inclusive; absent = from the first epoch.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        from: Option<String>,
        /// Last time of the range, RFC 3339, inclusive; absent = to the last epoch.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        to: Option<String>,
        /// The baseline epoch, an epoch with readings, RFC 3339; its positions are the
        /// reference geometry and cumulative strains are measured from it. Absent =
        /// the first epoch of the range; one outside the range is added to it.
        #[serde(default, skip_serializing_if = "Option::is_none")]
        baseline_epoch: Option<String>,
        /// The regions: `elements` or `groups` (other estimators do not follow fixed
        /// regions).
        method: MethodSpec,
        /// Options of the estimator; absent members take their defaults. `alpha` is
        /// also the level of the test of each increment.
        #[serde(default)]
        options: FieldOptions,
        /// Unit of the strains (and strain rates) in the result: `strain` or
        /// `microstrain` (default).
        #[serde(default)]
        strain_unit: StrainUnit,
    },
}

/// The times of an [`AnalysisInput`], parsed (UTC, microseconds).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Times {
    /// Epoch analysis: the epoch and the baseline epoch.
    Epoch(OffsetDateTime, Option<OffsetDateTime>),
    /// Series: from, to, baseline epoch.
    Series(
        Option<OffsetDateTime>,
        Option<OffsetDateTime>,
        Option<OffsetDateTime>,
    ),
}

fn epoch_field(text: &str, pointer: &str) -> Result<OffsetDateTime, FieldError> {
    parse_epoch(text).map_err(|m| FieldError::new(pointer, m))
}

fn opt_field(text: Option<&String>, pointer: &str) -> Result<Option<OffsetDateTime>, FieldError> {
    text.map(|t| epoch_field(t, pointer)).transpose()
}

impl AnalysisInput {
    /// Parse and order-check the times: RFC 3339 at the microsecond; an epoch's
    /// baseline earlier than the epoch; a series' `from` not after `to`.
    ///
    /// # Errors
    /// The first bad field, with its pointer.
    pub fn times(&self) -> Result<Times, FieldError> {
        match self {
            Self::Epoch {
                epoch,
                baseline_epoch,
                ..
            } => {
                let e = epoch_field(epoch, "/epoch")?;
                let b = opt_field(baseline_epoch.as_ref(), "/baseline_epoch")?;
                if let Some(b) = b
                    && b >= e
                {
                    return Err(FieldError::new(
                        "/baseline_epoch",
                        "the baseline epoch must be earlier than the epoch",
                    ));
                }
                Ok(Times::Epoch(e, b))
            }
            Self::Series {
                from,
                to,
                baseline_epoch,
                ..
            } => {
                let f = opt_field(from.as_ref(), "/from")?;
                let t = opt_field(to.as_ref(), "/to")?;
                let b = opt_field(baseline_epoch.as_ref(), "/baseline_epoch")?;
                if let (Some(a), Some(z)) = (f, t)
                    && a > z
                {
                    return Err(FieldError::new(
                        "/to",
                        "`to` must not be earlier than `from`",
                    ));
                }
                Ok(Times::Series(f, t, b))
            }
        }
    }

    /// The estimator's name.
    pub fn method_name(&self) -> &'static str {
        match self {
            Self::Epoch { method, .. } | Self::Series { method, .. } => method.name(),
        }
    }
}

async fn epoch_exists(
    store: &DynStore,
    id: &str,
    t: OffsetDateTime,
    pointer: &str,
) -> Result<(), ApiError> {
    if store.list_epochs(id, Some(t), Some(t)).await?.is_empty() {
        return Err(ApiError::field(
            pointer,
            format!(
                "structure {id} has no readings at {}; see GET /v1/structures/{id}/epochs",
                rfc3339(t)
            ),
        ));
    }
    Ok(())
}

/// The checks made before an analysis is queued, so that a request that cannot run
/// is answered 422 at once: times, method and options, the epochs named exist, a
/// series has 2 to [`MAX_SERIES_EPOCHS`] epochs. Data that cannot be computed on (all
/// points collinear, …) is found only when the job runs, and stored as a failed
/// analysis.
///
/// # Errors
/// [`ApiError::Invalid`] with a pointer for each bad field; store errors.
pub async fn check(store: &DynStore, s: &Structure, input: &AnalysisInput) -> Result<(), ApiError> {
    let times = input.times().map_err(|e| ApiError::fields(vec![e]))?;
    match (input, times) {
        (
            AnalysisInput::Epoch {
                method, options, ..
            },
            Times::Epoch(e, b),
        ) => {
            let points = store.list_points(&s.id).await?;
            let errs = crate::analysis::params::validate_for(method, options, &points, s.dimension);
            if !errs.is_empty() {
                return Err(ApiError::fields(errs));
            }
            epoch_exists(store, &s.id, e, "/epoch").await?;
            if let Some(b) = b {
                epoch_exists(store, &s.id, b, "/baseline_epoch").await?;
            }
            Ok(())
        }
        (
            AnalysisInput::Series {
                method, options, ..
            },
            Times::Series(from, to, baseline),
        ) => {
            let points = store.list_points(&s.id).await?;
            let errs = crate::analysis::series::validate(method, options, &points, s.dimension);
            if !errs.is_empty() {
                return Err(ApiError::fields(errs));
            }
            if let Some(b) = baseline {
                epoch_exists(store, &s.id, b, "/baseline_epoch").await?;
            }
            series_times(store, &s.id, from, to, baseline)
                .await?
                .map(|_| ())
                .map_err(|m| ApiError::field("/from", m))
        }
        _ => Err(ApiError::Internal(
            "times of another kind of analysis".into(),
        )),
    }
}

/// The epochs of a series: those with readings in `[from, to]`, plus the baseline when
/// it lies outside the range, oldest first, and the baseline (default: the first).
/// The inner `Err` says why they cannot make a series (none, or not 2 to
/// [`MAX_SERIES_EPOCHS`]): checked before the job is queued and again when it runs.
///
/// # Errors
/// Store errors.
pub async fn series_times(
    store: &DynStore,
    id: &str,
    from: Option<OffsetDateTime>,
    to: Option<OffsetDateTime>,
    baseline: Option<OffsetDateTime>,
) -> Result<Result<(OffsetDateTime, Vec<OffsetDateTime>), String>, crate::store::StoreError> {
    let mut times: Vec<OffsetDateTime> = store
        .list_epochs(id, from, to)
        .await?
        .into_iter()
        .map(|e| e.epoch)
        .collect();
    let baseline = match (baseline, times.first()) {
        (Some(b), _) => {
            if !times.contains(&b) {
                times.push(b);
                times.sort_unstable();
            }
            b
        }
        (None, Some(&first)) => first,
        (None, None) => {
            return Ok(Err(
                "the structure has no epoch with readings in the range".into()
            ));
        }
    };
    if !(2..=MAX_SERIES_EPOCHS).contains(&times.len()) {
        return Ok(Err(format!(
            "a series needs 2 to {MAX_SERIES_EPOCHS} epochs with readings; the range (with the baseline) has {}",
            times.len()
        )));
    }
    Ok(Ok((baseline, times)))
}

/// Which baseline the automatic analysis of an epoch uses.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum AutoBaseline {
    /// Displacements from the reference coordinates (no baseline epoch).
    #[default]
    Reference,
    /// The structure's first epoch with readings (the strain since the first survey).
    FirstEpoch,
    /// The epoch with readings just before (the strain increment since the last
    /// survey).
    PreviousEpoch,
}

/// A structure's automatic analysis: an epoch analysis queued for every epoch of an
/// arriving batch (the latest [`MAX_AUTO_JOBS_PER_BATCH`] when a batch has more),
/// with this estimator, these options and this baseline.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct AutoAnalysis {
    /// The estimator (`delaunay`, `elements`, `groups`, `neighbourhood`, `network`);
    /// lengths in it are in the structure's length unit.
    pub method: MethodSpec,
    /// Options of the estimator; absent members take their defaults.
    #[serde(default)]
    pub options: FieldOptions,
    /// Unit of the strains in the results: `strain` or `microstrain` (default).
    #[serde(default)]
    pub strain_unit: StrainUnit,
    /// The baseline of each epoch: `reference` (default), `first_epoch` or
    /// `previous_epoch`. An epoch that has no earlier epoch is analysed from the
    /// reference coordinates.
    #[serde(default)]
    pub baseline: AutoBaseline,
}

/// Most jobs one batch queues through the automatic analysis (its latest epochs).
pub const MAX_AUTO_JOBS_PER_BATCH: usize = 100;

impl AutoAnalysis {
    /// Check the estimator and options against the structure's `points` and
    /// `dimension` (each bad field with its pointer).
    pub fn validate(&self, points: &[crate::model::StoredPoint], dimension: u8) -> Vec<FieldError> {
        crate::analysis::params::validate_for(&self.method, &self.options, points, dimension)
    }

    /// The analyses to queue for a batch whose epochs are `batch` given the epochs
    /// stored before it, `stored` (both in any order, duplicates allowed): one epoch
    /// analysis per distinct batch epoch, oldest first, the latest
    /// [`MAX_AUTO_JOBS_PER_BATCH`] at most.
    pub fn plan(&self, batch: &[OffsetDateTime], stored: &[OffsetDateTime]) -> Vec<AnalysisInput> {
        let mut mine: Vec<OffsetDateTime> = batch.to_vec();
        mine.sort_unstable();
        mine.dedup();
        let mut all: Vec<OffsetDateTime> = stored.iter().chain(batch).copied().collect();
        all.sort_unstable();
        all.dedup();
        let skip = mine.len().saturating_sub(MAX_AUTO_JOBS_PER_BATCH);
        mine.into_iter()
            .skip(skip)
            .map(|e| {
                let baseline = match self.baseline {
                    AutoBaseline::Reference => None,
                    AutoBaseline::FirstEpoch => all.first().copied().filter(|f| *f < e),
                    AutoBaseline::PreviousEpoch => {
                        all.iter().copied().take_while(|t| *t < e).last()
                    }
                };
                AnalysisInput::Epoch {
                    epoch: rfc3339(e),
                    baseline_epoch: baseline.map(rfc3339),
                    method: self.method.clone(),
                    options: self.options.clone(),
                    strain_unit: self.strain_unit,
                }
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use time::macros::datetime;

    fn auto(baseline: AutoBaseline) -> AutoAnalysis {
        AutoAnalysis {
            method: MethodSpec::Delaunay,
            options: FieldOptions::default(),
            strain_unit: StrainUnit::Microstrain,
            baseline,
        }
    }

    fn baselines(plan: &[AnalysisInput]) -> Vec<(String, Option<String>)> {
        plan.iter()
            .map(|a| match a {
                AnalysisInput::Epoch {
                    epoch,
                    baseline_epoch,
                    ..
                } => (epoch.clone(), baseline_epoch.clone()),
                AnalysisInput::Series { .. } => panic!("a series in the plan"),
            })
            .collect()
    }

    #[test]
    fn plan_resolves_each_baseline_policy() {
        let d1 = datetime!(2026-01-01 00:00 UTC);
        let d2 = datetime!(2026-02-01 00:00 UTC);
        let d3 = datetime!(2026-03-01 00:00 UTC);
        let d4 = datetime!(2026-04-01 00:00 UTC);
        let batch = [d4, d3, d4];
        let stored = [d2, d1];
        let s = |t: OffsetDateTime| rfc3339(t);
        assert_eq!(
            baselines(&auto(AutoBaseline::Reference).plan(&batch, &stored)),
            vec![(s(d3), None), (s(d4), None)]
        );
        assert_eq!(
            baselines(&auto(AutoBaseline::FirstEpoch).plan(&batch, &stored)),
            vec![(s(d3), Some(s(d1))), (s(d4), Some(s(d1)))]
        );
        assert_eq!(
            baselines(&auto(AutoBaseline::PreviousEpoch).plan(&batch, &stored)),
            vec![(s(d3), Some(s(d2))), (s(d4), Some(s(d3)))]
        );
        // The very first epoch has nothing earlier: from the reference coordinates.
        assert_eq!(
            baselines(&auto(AutoBaseline::PreviousEpoch).plan(&[d1], &[])),
            vec![(s(d1), None)]
        );
        assert_eq!(
            baselines(&auto(AutoBaseline::FirstEpoch).plan(&[d1], &[])),
            vec![(s(d1), None)]
        );
    }

    #[test]
    fn plan_keeps_the_latest_epochs_of_a_long_batch() {
        let t0 = datetime!(2026-01-01 00:00 UTC);
        let batch: Vec<OffsetDateTime> = (0..150).map(|h| t0 + time::Duration::hours(h)).collect();
        let plan = auto(AutoBaseline::Reference).plan(&batch, &[]);
        assert_eq!(plan.len(), MAX_AUTO_JOBS_PER_BATCH);
        assert_eq!(
            baselines(&plan)[0].0,
            rfc3339(t0 + time::Duration::hours(50))
        );
    }

    #[test]
    fn times_are_checked_with_pointers() {
        let bad = AnalysisInput::Epoch {
            epoch: "2026-02-01T00:00:00Z".into(),
            baseline_epoch: Some("2026-03-01T00:00:00Z".into()),
            method: MethodSpec::Delaunay,
            options: FieldOptions::default(),
            strain_unit: StrainUnit::Microstrain,
        };
        assert_eq!(
            bad.times().expect_err("late baseline").pointer,
            "/baseline_epoch"
        );
        let bad = AnalysisInput::Series {
            from: Some("2026-03-01T00:00:00Z".into()),
            to: Some("2026-02-01T00:00:00Z".into()),
            baseline_epoch: None,
            method: MethodSpec::Delaunay,
            options: FieldOptions::default(),
            strain_unit: StrainUnit::Microstrain,
        };
        assert_eq!(bad.times().expect_err("to before from").pointer, "/to");
        let bad = AnalysisInput::Epoch {
            epoch: "yesterday".into(),
            baseline_epoch: None,
            method: MethodSpec::Delaunay,
            options: FieldOptions::default(),
            strain_unit: StrainUnit::Microstrain,
        };
        assert_eq!(bad.times().expect_err("not RFC 3339").pointer, "/epoch");
    }
}
