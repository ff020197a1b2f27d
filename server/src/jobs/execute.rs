//! Running one job's analysis: read the structure, its points and the readings the
//! request needs, and compute on a blocking thread. Whatever the data make of it, the
//! answer is an [`Analysis`] to store (succeeded, or failed with the reason); only
//! what may pass (the database, a panic) is an [`ExecError`], and the job is tried
//! again.

use time::OffsetDateTime;
use uuid::Uuid;

use super::request::{AnalysisInput, Times, series_times};
use crate::analysis::AnalysisError;
use crate::analysis::epoch::{Displacement, EpochRequest, run_epoch};
use crate::analysis::series::{SeriesAnalysisRequest, SeriesEpoch, run_series};
use crate::model::{Analysis, AnalysisKind, AnalysisStatus, Reading, now_utc};
use crate::store::{DynStore, StoreError};

/// Why an attempt could not produce an analysis; the job is tried again.
#[derive(Debug, thiserror::Error)]
pub enum ExecError {
    /// The database failed.
    #[error("database: {0}")]
    Store(#[from] StoreError),
    /// The structure no longer exists (the job goes with it).
    #[error("structure {0} no longer exists")]
    Gone(String),
    /// The computation panicked or was cancelled (a bug).
    #[error("analysis task: {0}")]
    Task(String),
}

fn displacements(readings: Vec<Reading>) -> Vec<Displacement> {
    readings
        .into_iter()
        .map(|r| Displacement {
            point_id: r.point_id,
            u: r.u,
            sigma: r.sigma,
        })
        .collect()
}

/// A failed analysis of `input` of structure `structure_id` with `error` (parameters
/// that do not fit the data, epochs without readings, a computation over its time, …).
pub fn failed(
    structure_id: &str,
    input: &AnalysisInput,
    times: Option<Times>,
    error: String,
) -> Analysis {
    let (kind, epoch, baseline, first, last) = match times {
        Some(Times::Epoch(e, b)) => (AnalysisKind::Epoch, Some(e), b, None, None),
        Some(Times::Series(f, t, b)) => (AnalysisKind::Series, None, b, f, t),
        None => match input {
            AnalysisInput::Epoch { .. } => (AnalysisKind::Epoch, None, None, None, None),
            AnalysisInput::Series { .. } => (AnalysisKind::Series, None, None, None, None),
        },
    };
    Analysis {
        id: Uuid::new_v4(),
        structure_id: structure_id.to_owned(),
        kind,
        status: AnalysisStatus::Failed,
        method: input.method_name().to_owned(),
        epoch,
        baseline_epoch: baseline,
        series_first: first,
        series_last: last,
        parameters: serde_json::to_value(input).unwrap_or(serde_json::Value::Null),
        inputs: serde_json::json!({}),
        software_version: env!("CARGO_PKG_VERSION").to_owned(),
        result: None,
        error: Some(error),
        created_at: now_utc(),
        duration_ms: 0,
    }
}

fn describe(e: AnalysisError) -> String {
    match e {
        AnalysisError::Invalid(errs) => errs
            .iter()
            .map(|f| format!("{}: {}", f.pointer, f.detail))
            .collect::<Vec<_>>()
            .join("; "),
        AnalysisError::Parameters(m) | AnalysisError::NotComputable(m) => m,
        AnalysisError::Internal(m) => format!("internal error: {m}"),
    }
}

async fn compute<F>(f: F) -> Result<Result<Analysis, AnalysisError>, ExecError>
where
    F: FnOnce() -> Result<Analysis, AnalysisError> + Send + 'static,
{
    tokio::task::spawn_blocking(f)
        .await
        .map_err(|e| ExecError::Task(e.to_string()))
}

/// Run the analysis `input` of structure `structure_id` on what is stored now.
///
/// # Errors
/// [`ExecError`] when the attempt should be made again.
pub async fn execute(
    store: &DynStore,
    structure_id: &str,
    input: &AnalysisInput,
) -> Result<Analysis, ExecError> {
    let s = store
        .get_structure(structure_id)
        .await?
        .ok_or_else(|| ExecError::Gone(structure_id.to_owned()))?;
    let times = match input.times() {
        Ok(t) => t,
        Err(e) => {
            return Ok(failed(
                &s.id,
                input,
                None,
                format!("{}: {}", e.pointer, e.detail),
            ));
        }
    };
    let points = store.list_points(structure_id).await?;
    let outcome = match (input, times) {
        (
            AnalysisInput::Epoch {
                method,
                options,
                strain_unit,
                ..
            },
            Times::Epoch(epoch, baseline_epoch),
        ) => {
            let at = displacements(store.readings_at(structure_id, epoch).await?);
            let base = match baseline_epoch {
                Some(b) => Some(displacements(store.readings_at(structure_id, b).await?)),
                None => None,
            };
            let req = EpochRequest {
                epoch,
                baseline_epoch,
                method: method.clone(),
                options: options.clone(),
                strain_unit: *strain_unit,
            };
            let s2 = s.clone();
            compute(move || run_epoch(&s2, &points, &at, base.as_deref(), &req)).await?
        }
        (
            AnalysisInput::Series {
                method,
                options,
                strain_unit,
                ..
            },
            Times::Series(from, to, baseline),
        ) => match series_epochs(store, structure_id, from, to, baseline).await? {
            Err(m) => return Ok(failed(&s.id, input, Some(times), m)),
            Ok((baseline_epoch, epochs)) => {
                let req = SeriesAnalysisRequest {
                    from,
                    to,
                    baseline_epoch,
                    method: method.clone(),
                    options: options.clone(),
                    strain_unit: *strain_unit,
                };
                let s2 = s.clone();
                compute(move || run_series(&s2, &points, &epochs, &req)).await?
            }
        },
        _ => return Err(ExecError::Task("times of another kind of analysis".into())),
    };
    match outcome {
        Ok(a) => Ok(a),
        // A bug, not the data: the attempt is retried (and the job fails when it keeps
        // happening).
        Err(AnalysisError::Internal(m)) => Err(ExecError::Task(m)),
        Err(e) => Ok(failed(&s.id, input, Some(times), describe(e))),
    }
}

/// The epochs of a series with their readings and the baseline, or why there are
/// not enough.
async fn series_epochs(
    store: &DynStore,
    id: &str,
    from: Option<OffsetDateTime>,
    to: Option<OffsetDateTime>,
    baseline: Option<OffsetDateTime>,
) -> Result<Result<(OffsetDateTime, Vec<SeriesEpoch>), String>, ExecError> {
    let (baseline, times) = match series_times(store, id, from, to, baseline).await? {
        Ok(t) => t,
        Err(m) => return Ok(Err(m)),
    };
    let mut epochs = Vec::with_capacity(times.len());
    for t in times {
        let readings = displacements(store.readings_at(id, t).await?);
        if readings.is_empty() {
            return Ok(Err(format!(
                "epoch {} has no readings",
                crate::model::rfc3339(t)
            )));
        }
        epochs.push(SeriesEpoch { epoch: t, readings });
    }
    Ok(Ok((baseline, epochs)))
}
