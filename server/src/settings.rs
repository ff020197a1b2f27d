//! Settings of the monitoring loop (job workers; webhook delivery lives in
//! [`crate::webhooks`]), each a `kinema serve` flag and a `KINEMA_*` variable.

use std::time::Duration;

/// How this process runs analysis jobs.
#[derive(Debug, Clone)]
pub struct JobSettings {
    /// Jobs this process runs at once (0 = none: the process only serves the API).
    pub workers: usize,
    /// How long a claim on a job lasts without renewal; a worker renews it at a third of
    /// this, and a job whose worker died is claimed again once it has expired.
    pub lease: Duration,
    /// Attempts a job gets before it fails.
    pub max_attempts: u32,
    /// Wait after the first failed attempt; doubled after each further one (with
    /// jitter), at most [`JobSettings::retry_max`].
    pub retry_base: Duration,
    /// Longest wait between attempts.
    pub retry_max: Duration,
    /// How often an idle worker looks for jobs (a job queued by this process wakes
    /// its workers at once).
    pub poll: Duration,
    /// Fault injection for tests only: each attempt waits this long after its claim
    /// before it computes (0 = off), so that a test can stop a worker in the middle.
    pub fault_pause: Duration,
    /// Time one attempt may compute; a longer one is stored as a failed analysis (the
    /// same data would take as long again), and the computation's result is dropped
    /// when it ends (it cannot be interrupted).
    pub timeout: Duration,
}

impl Default for JobSettings {
    fn default() -> Self {
        Self {
            workers: 2,
            lease: Duration::from_secs(60),
            max_attempts: 3,
            retry_base: Duration::from_secs(5),
            retry_max: Duration::from_secs(300),
            poll: Duration::from_millis(500),
            fault_pause: Duration::ZERO,
            timeout: Duration::from_secs(600),
        }
    }
}

/// A setting out of its range.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{setting}: {detail}")]
pub struct SettingsError {
    /// The variable's name.
    pub setting: &'static str,
    /// What is wrong.
    pub detail: String,
}

impl JobSettings {
    /// The back-off between attempts of a job.
    pub fn backoff(&self) -> crate::backoff::Backoff {
        crate::backoff::Backoff {
            base: self.retry_base,
            max: self.retry_max,
        }
    }

    /// Check the ranges (call at start-up): a lease of at least 100 ms, at least one
    /// attempt, positive back-off, poll and time limit, `retry_max ≥ retry_base`.
    pub fn validate(&self) -> Result<(), SettingsError> {
        let err = |setting, detail: &str| {
            Err(SettingsError {
                setting,
                detail: detail.to_owned(),
            })
        };
        if self.lease < Duration::from_millis(100) {
            return err("KINEMA_JOB_LEASE_MS", "must be at least 100");
        }
        if self.max_attempts == 0 {
            return err("KINEMA_JOB_MAX_ATTEMPTS", "must be at least 1");
        }
        if self.retry_base.is_zero() {
            return err("KINEMA_JOB_RETRY_BASE_MS", "must be positive");
        }
        if self.retry_max < self.retry_base {
            return err(
                "KINEMA_JOB_RETRY_MAX_MS",
                "must not be shorter than KINEMA_JOB_RETRY_BASE_MS",
            );
        }
        if self.poll.is_zero() {
            return err("KINEMA_JOB_POLL_MS", "must be positive");
        }
        if self.timeout.is_zero() {
            return err("KINEMA_JOB_TIMEOUT_SECS", "must be positive");
        }
        Ok(())
    }
}

/// Every setting of the monitoring loop.
#[derive(Debug, Clone, Default)]
pub struct Settings {
    /// Analysis jobs.
    pub jobs: JobSettings,
    /// Webhook delivery.
    pub webhooks: crate::webhooks::WebhookSettings,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn job_defaults_are_valid_and_bad_ranges_name_their_variable() {
        let d = JobSettings::default();
        assert_eq!(d.validate(), Ok(()));
        let bad = [
            (
                JobSettings {
                    lease: Duration::from_millis(99),
                    ..d.clone()
                },
                "KINEMA_JOB_LEASE_MS",
            ),
            (
                JobSettings {
                    max_attempts: 0,
                    ..d.clone()
                },
                "KINEMA_JOB_MAX_ATTEMPTS",
            ),
            (
                JobSettings {
                    retry_base: Duration::ZERO,
                    ..d.clone()
                },
                "KINEMA_JOB_RETRY_BASE_MS",
            ),
            (
                JobSettings {
                    retry_max: Duration::from_secs(1),
                    ..d.clone()
                },
                "KINEMA_JOB_RETRY_MAX_MS",
            ),
            (
                JobSettings {
                    poll: Duration::ZERO,
                    ..d.clone()
                },
                "KINEMA_JOB_POLL_MS",
            ),
            (
                JobSettings {
                    timeout: Duration::ZERO,
                    ..d.clone()
                },
                "KINEMA_JOB_TIMEOUT_SECS",
            ),
        ];
        for (s, name) in bad {
            assert_eq!(s.validate().map_err(|e| e.setting), Err(name));
        }
    }
}
