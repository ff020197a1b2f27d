//! The job workers of one process: each claims a job from the database
//! ([`crate::store::Store::claim_job`], with a lease it renews while it works), runs it
//! ([`super::execute`]) and ends it with [`crate::store::Store::complete_job`], which
//! stores the analysis, evaluates the alert rules and queues the webhooks in one
//! transaction. A worker that dies stops renewing; its job is claimed again once the
//! lease has expired, and only the claim that is current can store a result.

use std::time::{Duration, Instant};

use time::OffsetDateTime;
use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;

use super::execute::execute;
use super::request::AnalysisInput;
use crate::api::AppState;
use crate::backoff::later;
use crate::model::{Job, JobOutcome, Lease, now_utc};
use crate::settings::JobSettings;
use crate::store::{Completed, StoreError};

/// When attempt `attempt + 1` may start after attempt `attempt` failed at `now`
/// ([`crate::backoff`]: exponential, capped, equal jitter).
fn retry_at(settings: &JobSettings, attempt: u32, now: OffsetDateTime) -> OffsetDateTime {
    later(now, settings.backoff().delay(attempt))
}

/// Renew `lease` every third of the lease time until `stop` is cancelled.
async fn keep_lease(state: AppState, lease: Lease, stop: CancellationToken) {
    let settings = &state.settings.jobs;
    let every = (settings.lease / 3).max(Duration::from_millis(10));
    loop {
        tokio::select! {
            () = stop.cancelled() => return,
            () = tokio::time::sleep(every) => {}
        }
        let until = later(now_utc(), settings.lease);
        match state.store.renew_lease(&lease, until).await {
            Ok(()) => {}
            Err(StoreError::Conflict(m)) => {
                tracing::warn!(job = %lease.job_id, worker = %lease.worker, "lease lost: {m}");
                return;
            }
            Err(e) => tracing::warn!(job = %lease.job_id, "lease renewal failed: {e}"),
        }
    }
}

async fn attempt(state: &AppState, job: &Job) -> JobOutcome {
    let settings = &state.settings.jobs;
    if !settings.fault_pause.is_zero() {
        tokio::time::sleep(settings.fault_pause).await;
    }
    let input: AnalysisInput = match serde_json::from_value(job.request.clone()) {
        Ok(i) => i,
        Err(e) => {
            return JobOutcome::Error {
                error: format!("the stored request does not parse: {e}"),
                retry_at: now_utc(),
            };
        }
    };
    let started = Instant::now();
    let run = execute(&state.store, &job.structure_id, &input);
    let error = match tokio::time::timeout(settings.timeout, run).await {
        Ok(Ok(a)) => {
            state.metrics.analysis(
                a.kind.as_str(),
                a.status.as_str(),
                started.elapsed().as_secs_f64(),
            );
            return JobOutcome::Analysis(Box::new(a));
        }
        Ok(Err(e)) => e.to_string(),
        // The same data would take as long again: a failed analysis, not a retry. (The
        // computation cannot be interrupted; its thread finishes and its result is
        // dropped.)
        Err(_) => {
            let error = format!(
                "the computation took longer than {} s (KINEMA_JOB_TIMEOUT_SECS)",
                settings.timeout.as_secs()
            );
            let a = super::execute::failed(&job.structure_id, &input, input.times().ok(), error);
            return JobOutcome::Analysis(Box::new(a));
        }
    };
    JobOutcome::Error {
        error,
        retry_at: retry_at(settings, job.attempts, now_utc()),
    }
}

/// How often [`complete`] tries to store an attempt's end before giving up on it.
const COMPLETE_TRIES: u32 = 4;

/// End the attempt (`Store::complete_job` with the alert evaluation), in a task of its
/// own so that a panic (in the evaluation of a rule, say) becomes an error outcome
/// instead of a job that stays `running`. A database error is retried with back-off
/// while the lease is kept; when it persists, the attempt is ended as an error.
async fn complete(
    state: &AppState,
    lease: &Lease,
    outcome: JobOutcome,
) -> Result<Completed, StoreError> {
    let settings = &state.settings.jobs;
    let mut outcome = outcome;
    let mut tries = 0;
    loop {
        tries += 1;
        let (st, l, o) = (state.clone(), lease.clone(), outcome.clone());
        let task = tokio::spawn(async move {
            st.store
                .complete_job(&l, &o, &crate::alerts::evaluate, now_utc())
                .await
        });
        let error = match task.await {
            Ok(Ok(done)) => return Ok(done),
            Ok(Err(StoreError::Conflict(m))) => return Err(StoreError::Conflict(m)),
            Ok(Err(e)) if tries < COMPLETE_TRIES => {
                tracing::warn!(job = %lease.job_id, "storing the end of the attempt failed, retrying: {e}");
                tokio::time::sleep(Duration::from_millis(200) * 2u32.pow(tries)).await;
                continue;
            }
            Ok(Err(e)) => format!("storing the result failed: {e}"),
            Err(e) => format!("ending the attempt panicked: {e}"),
        };
        if matches!(outcome, JobOutcome::Error { .. }) {
            // Even the error could not be stored: leave the job to its lease.
            return Err(StoreError::Invalid(error));
        }
        tracing::warn!(job = %lease.job_id, "{error}");
        outcome = JobOutcome::Error {
            error,
            retry_at: retry_at(settings, lease.attempt, now_utc()),
        };
        tries = 0;
    }
}

/// Claim one job as `worker`, run it and end it. `Ok(None)` when no job was claimable.
///
/// # Errors
/// Store errors of the claim or of the completion (a lost lease is
/// [`StoreError::Conflict`]: another worker has the job and this attempt's result is
/// dropped).
pub async fn run_once(state: &AppState, worker: &str) -> Result<Option<Completed>, StoreError> {
    let settings = &state.settings.jobs;
    let now = now_utc();
    let Some((job, lease)) = state
        .store
        .claim_job(worker, now, later(now, settings.lease))
        .await?
    else {
        return Ok(None);
    };
    tracing::info!(job = %job.id, structure = %job.structure_id, attempt = lease.attempt, worker, "job claimed");
    let stop = CancellationToken::new();
    // The keeper stops with this function, however it ends (also when it is dropped).
    let _stop_keeper = stop.clone().drop_guard();
    tokio::spawn(keep_lease(state.clone(), lease.clone(), stop.clone()));
    // The attempt runs in a task of its own: a panic is an error outcome.
    let outcome = {
        let (st, j) = (state.clone(), job.clone());
        match tokio::spawn(async move { attempt(&st, &j).await }).await {
            Ok(o) => o,
            Err(e) => JobOutcome::Error {
                error: format!("the attempt panicked: {e}"),
                retry_at: retry_at(settings, lease.attempt, now_utc()),
            },
        }
    };
    let done = complete(state, &lease, outcome).await?;
    tracing::info!(job = %job.id, status = done.job.status.as_str(), alerts = done.alert_events.len(), deliveries = done.deliveries, "job ended");
    Ok(Some(done))
}

/// Run jobs as `worker` until `shutdown`: claim and run while there are claimable
/// jobs, then wait for [`JobSettings::poll`] or a wake-up from this process
/// ([`AppState::wake`]).
pub async fn run(state: AppState, worker: String, shutdown: CancellationToken) {
    loop {
        if shutdown.is_cancelled() {
            return;
        }
        let idle = match run_once(&state, &worker).await {
            Ok(Some(_)) => false,
            Ok(None) => true,
            Err(StoreError::Conflict(m)) => {
                tracing::warn!(worker, "job result dropped: {m}");
                false
            }
            Err(e) => {
                tracing::warn!(worker, "job worker: {e}");
                true
            }
        };
        if idle {
            tokio::select! {
                () = shutdown.cancelled() => return,
                () = state.wake.notified() => {}
                () = tokio::time::sleep(state.settings.jobs.poll) => {}
            }
        }
    }
}

/// Start [`JobSettings::workers`] workers named `<process>/jobs-<n>`; they stop when
/// `shutdown` is cancelled (a job in progress is finished first).
pub fn spawn(state: &AppState, shutdown: &CancellationToken) -> Vec<JoinHandle<()>> {
    (0..state.settings.jobs.workers)
        .map(|n| {
            let name = crate::worker_id::worker_name("jobs", n);
            tokio::spawn(run(state.clone(), name, shutdown.clone()))
        })
        .collect()
}

/// Run claimable jobs as `worker` until none is left (what a worker does between two
/// idle polls), and return how many attempts ran: for tests and benchmarks that run
/// the queue in process.
///
/// # Errors
/// As [`run_once`].
pub async fn drain(state: &AppState, worker: &str) -> Result<usize, StoreError> {
    let mut n = 0;
    while run_once(state, worker).await?.is_some() {
        n += 1;
    }
    Ok(n)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn retries_wait_by_the_backoff() {
        let now = now_utc();
        assert_eq!(
            later(now, Duration::from_secs(60)),
            now + time::Duration::minutes(1)
        );
        assert!(later(now, Duration::MAX) > now);
        let s = JobSettings::default();
        // Equal jitter after the first failure: between half the base (5 s) and the base.
        let t = retry_at(&s, 1, now);
        let lo = now + time::Duration::milliseconds(2500);
        let hi = now + time::Duration::seconds(5);
        assert!(t >= lo && t <= hi, "{t}");
        assert!(retry_at(&s, u32::MAX, now) <= now + time::Duration::seconds(300));
    }
}
