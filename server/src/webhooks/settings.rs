//! Settings of webhook delivery; each is meant as a `kinema serve` flag and a
//! `KINEMA_WEBHOOK_*` variable (the names are on the fields).

use std::time::Duration;

use super::policy::AllowList;
use crate::backoff::Backoff;
pub use crate::settings::SettingsError;

/// How this process delivers webhooks.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct WebhookSettings {
    /// Delivery loops this process runs (0 = none: deliveries wait for another process).
    /// `KINEMA_WEBHOOK_DISPATCHERS`, default 1.
    pub dispatchers: usize,
    /// The destinations that may be reached. `KINEMA_WEBHOOK_ALLOW`, default `public`
    /// (see [`super::policy`]).
    pub allow: AllowList,
    /// Attempts a delivery gets before it fails (it can then be replayed by hand).
    /// `KINEMA_WEBHOOK_MAX_ATTEMPTS`, default 8.
    pub max_attempts: u32,
    /// Ceiling of the wait after the first failed attempt; doubled after each further
    /// one, see [`crate::backoff`]. `KINEMA_WEBHOOK_RETRY_BASE_MS`, default 10 000 ms.
    pub retry_base: Duration,
    /// Largest ceiling of the wait between attempts. `KINEMA_WEBHOOK_RETRY_MAX_SECS`,
    /// default 3600 s.
    pub retry_max: Duration,
    /// Time one attempt may take (connect, send, answer). `KINEMA_WEBHOOK_TIMEOUT_SECS`,
    /// default 10 s.
    pub timeout: Duration,
    /// How long a dispatcher's claim on a subscription lasts; no attempt is started
    /// that could outlast it, and a dispatcher that died loses its claim when it
    /// expires. At least twice [`WebhookSettings::timeout`] plus 1 s. `KINEMA_WEBHOOK_LEASE_SECS`,
    /// default 120 s.
    pub lease: Duration,
    /// Most deliveries of one subscription taken per claim. `KINEMA_WEBHOOK_BATCH`,
    /// default 20.
    pub batch: usize,
    /// How often an idle dispatcher looks for due deliveries.
    /// `KINEMA_WEBHOOK_POLL_MS`, default 1000 ms.
    pub poll: Duration,
}

impl Default for WebhookSettings {
    fn default() -> Self {
        Self {
            dispatchers: 1,
            allow: AllowList::default(),
            max_attempts: 8,
            retry_base: Duration::from_secs(10),
            retry_max: Duration::from_secs(3600),
            timeout: Duration::from_secs(10),
            lease: Duration::from_secs(120),
            batch: 20,
            poll: Duration::from_secs(1),
        }
    }
}

impl WebhookSettings {
    /// The back-off between attempts.
    pub fn backoff(&self) -> Backoff {
        Backoff {
            base: self.retry_base,
            max: self.retry_max,
        }
    }

    /// Check the ranges (call at start-up): at least one attempt, positive durations,
    /// `retry_max ≥ retry_base`, `lease ≥ 2 · timeout`, a batch of at least one.
    pub fn validate(&self) -> Result<(), SettingsError> {
        let err = |setting, detail: &str| {
            Err(SettingsError {
                setting,
                detail: detail.to_owned(),
            })
        };
        if self.max_attempts == 0 {
            return err("KINEMA_WEBHOOK_MAX_ATTEMPTS", "must be at least 1");
        }
        if self.retry_base.is_zero() {
            return err("KINEMA_WEBHOOK_RETRY_BASE_MS", "must be positive");
        }
        if self.retry_max < self.retry_base {
            return err(
                "KINEMA_WEBHOOK_RETRY_MAX_SECS",
                "must not be shorter than KINEMA_WEBHOOK_RETRY_BASE_MS",
            );
        }
        if self.timeout.is_zero() {
            return err("KINEMA_WEBHOOK_TIMEOUT_SECS", "must be positive");
        }
        if self.lease < self.timeout * 2 + super::dispatch::LEASE_MARGIN {
            return err(
                "KINEMA_WEBHOOK_LEASE_SECS",
                "must be at least twice KINEMA_WEBHOOK_TIMEOUT_SECS plus 1 s",
            );
        }
        if self.batch == 0 {
            return err("KINEMA_WEBHOOK_BATCH", "must be at least 1");
        }
        if self.poll.is_zero() {
            return err("KINEMA_WEBHOOK_POLL_MS", "must be positive");
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_defaults_are_valid_and_bad_ranges_name_their_variable() {
        let d = WebhookSettings::default();
        assert_eq!(d.validate(), Ok(()));
        assert_eq!(d.allow.to_string(), "public");
        let bad = [
            (
                WebhookSettings {
                    max_attempts: 0,
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_MAX_ATTEMPTS",
            ),
            (
                WebhookSettings {
                    retry_base: Duration::ZERO,
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_RETRY_BASE_MS",
            ),
            (
                WebhookSettings {
                    retry_max: Duration::from_secs(1),
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_RETRY_MAX_SECS",
            ),
            (
                WebhookSettings {
                    timeout: Duration::ZERO,
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_TIMEOUT_SECS",
            ),
            (
                WebhookSettings {
                    lease: Duration::from_secs(19),
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_LEASE_SECS",
            ),
            (
                WebhookSettings {
                    batch: 0,
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_BATCH",
            ),
            (
                WebhookSettings {
                    poll: Duration::ZERO,
                    ..d.clone()
                },
                "KINEMA_WEBHOOK_POLL_MS",
            ),
        ];
        for (s, name) in bad {
            let e = s.validate().expect_err(name);
            assert_eq!(e.setting, name);
        }
        // The lease must leave room for a whole attempt after the margin: 2 × 10 s + 1 s.
        let ok = WebhookSettings {
            lease: Duration::from_secs(21),
            ..d.clone()
        };
        assert_eq!(ok.validate(), Ok(()));
        let short = WebhookSettings {
            lease: Duration::from_secs(20),
            ..d
        };
        assert_eq!(
            short.validate().map_err(|e| e.setting),
            Err("KINEMA_WEBHOOK_LEASE_SECS")
        );
    }
}
