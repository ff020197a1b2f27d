//! The job workers of one process: each claims a job from the database
//! ([`crate::store::Store::claim_job`], with a lease it renews while it works), runs it
//! ([`super::execute`]) and ends it with [`crate::store::Store::complete_job`], which
//! stores the analysis, evaluates the alert rules and queues the webhooks in one
//! transaction. A worker that dies stops renewing; its job is claimed again once the
//! lease has expired, and only the claim that is current can store a result.

use std::sync::Arc;
use std::time::{Duration, Instant};

use time::OffsetDateTime;
use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;

use super::execute::execute;
use super::request::AnalysisInput;
use crate::api::AppState;
use crate::model::{Job, JobOutcome, Lease, now_utc};
use crate::settings::JobSettings;
use crate::store::{Completed, StoreError};

fn after(now: OffsetDateTime, d: Duration) -> OffsetDateTime {
    now + time::Duration::try_from(d).unwrap_or(time::Duration::DAY)
}

/// A random fraction in [0, 1) from the operating system's generator (0.5 if it fails).
fn unit_random() -> f64 {
    let mut b = [0u8; 8];
    match getrandom::fill(&mut b) {
        Ok(()) => (u64::from_le_bytes(b) >> 11) as f64 / (1u64 << 53) as f64,
        Err(_) => 0.5,
    }
}

/// The wait before attempt `attempt + 1` after attempt `attempt` (from 1) failed:
/// `base·2^(attempt−1)`, at most `max`, with "equal jitter" (half fixed, half random,
/// common practice) so that jobs that failed together do not retry together.
pub fn retry_delay(attempt: u32, base: Duration, max: Duration) -> Duration {
    let exp = base.saturating_mul(1u32 << attempt.saturating_sub(1).min(20));
    let d = exp.min(max);
    d / 2 + d.mul_f64(unit_random() / 2.0)
}

/// A name for this process's workers: host, process ID and a random tag (so that a
/// restarted process with the same ID is another worker).
pub fn process_name() -> String {
    let host = std::env::var("HOSTNAME")
        .ok()
        .or_else(|| std::fs::read_to_string("/etc/hostname").ok())
        .map(|h| h.trim().to_owned())
        .filter(|h| !h.is_empty())
        .unwrap_or_else(|| "kinema".to_owned());
    let mut tag = [0u8; 3];
    let tag = match getrandom::fill(&mut tag) {
        Ok(()) => crate::keys::hex(&tag),
        Err(_) => "000000".to_owned(),
    };
    format!("{host}:{}:{tag}", std::process::id())
}

/// Renew `lease` every third of the lease time until `stop` is cancelled.
async fn keep_lease(
    state: AppState,
    lease: Lease,
    settings: Arc<JobSettings>,
    stop: CancellationToken,
) {
    let every = (settings.lease / 3).max(Duration::from_millis(10));
    loop {
        tokio::select! {
            () = stop.cancelled() => return,
            () = tokio::time::sleep(every) => {}
        }
        let until = after(now_utc(), settings.lease);
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

async fn attempt(state: &AppState, settings: &JobSettings, job: &Job) -> JobOutcome {
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
    match execute(&state.store, &job.structure_id, &input).await {
        Ok(a) => {
            state.metrics.analysis(
                a.kind.as_str(),
                a.status.as_str(),
                started.elapsed().as_secs_f64(),
            );
            JobOutcome::Analysis(Box::new(a))
        }
        Err(e) => JobOutcome::Error {
            error: e.to_string(),
            retry_at: after(
                now_utc(),
                retry_delay(job.attempts, settings.retry_base, settings.retry_max),
            ),
        },
    }
}

/// Claim one job as `worker`, run it and end it. `Ok(None)` when no job was claimable.
///
/// # Errors
/// Store errors of the claim or of the completion (a lost lease is
/// [`StoreError::Conflict`]: another worker has the job and this attempt's result is
/// dropped).
pub async fn run_once(
    state: &AppState,
    settings: &Arc<JobSettings>,
    worker: &str,
) -> Result<Option<Completed>, StoreError> {
    let now = now_utc();
    let Some((job, lease)) = state
        .store
        .claim_job(worker, now, after(now, settings.lease))
        .await?
    else {
        return Ok(None);
    };
    tracing::info!(job = %job.id, structure = %job.structure_id, attempt = lease.attempt, worker, "job claimed");
    let stop = CancellationToken::new();
    let keeper = tokio::spawn(keep_lease(
        state.clone(),
        lease.clone(),
        settings.clone(),
        stop.clone(),
    ));
    let outcome = attempt(state, settings, &job).await;
    stop.cancel();
    let _ = keeper.await;
    let done = state
        .store
        .complete_job(&lease, &outcome, &crate::alerts::evaluate, now_utc())
        .await?;
    tracing::info!(job = %job.id, status = done.job.status.as_str(), alerts = done.alert_events.len(), deliveries = done.deliveries, "job ended");
    Ok(Some(done))
}

/// Run jobs as `worker` until `shutdown`: claim and run while there are claimable
/// jobs, then wait for [`JobSettings::poll`] or a wake-up from this process
/// ([`AppState::wake`]).
pub async fn run(
    state: AppState,
    settings: Arc<JobSettings>,
    worker: String,
    shutdown: CancellationToken,
) {
    loop {
        if shutdown.is_cancelled() {
            return;
        }
        let idle = match run_once(&state, &settings, &worker).await {
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
                () = tokio::time::sleep(settings.poll) => {}
            }
        }
    }
}

/// Start [`JobSettings::workers`] workers named `<process>/<n>`; they stop when
/// `shutdown` is cancelled (a job in progress is finished first).
pub fn spawn(state: &AppState, shutdown: &CancellationToken) -> Vec<JoinHandle<()>> {
    let settings = Arc::new(state.settings.jobs.clone());
    let process = process_name();
    (0..settings.workers)
        .map(|n| {
            tokio::spawn(run(
                state.clone(),
                settings.clone(),
                format!("{process}/{n}"),
                shutdown.clone(),
            ))
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn retry_delay_doubles_within_its_jitter_and_is_capped() {
        let base = Duration::from_secs(4);
        let max = Duration::from_secs(60);
        for attempt in 1..=10u32 {
            let full = (base * 2u32.pow(attempt - 1)).min(max);
            for _ in 0..50 {
                let d = retry_delay(attempt, base, max);
                assert!(
                    d >= full / 2 && d <= full,
                    "attempt {attempt}: {d:?} vs {full:?}"
                );
            }
        }
        // Huge attempt numbers do not overflow.
        assert!(retry_delay(u32::MAX, base, max) <= max);
    }

    #[test]
    fn process_names_differ_between_calls() {
        assert_ne!(process_name(), process_name());
    }
}
