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

/// Every setting of the monitoring loop.
#[derive(Debug, Clone, Default)]
pub struct Settings {
    /// Analysis jobs.
    pub jobs: JobSettings,
    /// Webhook delivery.
    pub webhooks: crate::webhooks::WebhookSettings,
}
