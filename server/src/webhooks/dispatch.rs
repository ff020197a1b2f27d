//! The dispatcher: a loop that claims a subscription with due deliveries, sends them
//! one at a time in `seq` order, logs every attempt, and gives the claim back.
//!
//! - A subscription's deliveries keep their order: the round stops at the first
//!   attempt that fails (that delivery waits for its back-off, and the ones behind it
//!   wait with it) and at the first delivery that is not due.
//! - A claim is a lease ([`WebhookSettings::lease`]); no attempt is started that could
//!   outlast it, so another dispatcher (in this process or another one on the same
//!   PostgreSQL database) never sends the same subscription's deliveries at the same
//!   time, and one that died loses its claim when the lease expires.
//! - After a failed attempt `n` the delivery is due again after the back-off
//!   ([`crate::backoff`]); after [`WebhookSettings::max_attempts`] it fails and can be
//!   replayed by hand (`POST /v1/webhooks/{id}/deliveries/{delivery_id}/replay`).
//! - Store errors are logged and the loop waits (longer after each one, up to 30 s);
//!   it never panics on them.
//!
//! Delivery is at least once: an attempt whose answer arrived but whose log could not
//! be written is sent again, and receivers drop duplicates by `Kinema-Event-Id`.

use std::sync::Arc;
use std::time::Duration;

use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;
use uuid::Uuid;

use super::WebhookSettings;
use super::send::{Attempt, Outgoing, Sender};
use crate::backoff::later;
use crate::model::{DeliveryAttempt, DeliveryNext, now_utc};
use crate::store::{DynStore, Store, StoreError};

/// Longest wait after repeated store errors.
const MAX_ERROR_WAIT: Duration = Duration::from_secs(30);

/// Slack kept between the end of the last attempt and the end of the claim.
pub(crate) const LEASE_MARGIN: Duration = Duration::from_secs(1);

/// Run one dispatcher until `shutdown` is cancelled: claim due deliveries as `worker`
/// (a name unique among all dispatchers on the database, e.g. from [`worker_name`]),
/// send them, log the attempts, sleep [`WebhookSettings::poll`] when nothing is due.
///
/// Cancelling `shutdown` stops the loop between attempts; an attempt in progress is
/// finished and logged first (it takes at most [`WebhookSettings::timeout`]). Settings
/// that fail [`WebhookSettings::validate`] (or an HTTP client that cannot be set up) are
/// logged as an error and the function returns at once; validate them at start-up to
/// refuse to start instead.
pub async fn run(
    store: DynStore,
    settings: Arc<WebhookSettings>,
    worker: String,
    shutdown: CancellationToken,
) {
    if let Err(e) = settings.validate() {
        tracing::error!(worker, error = %e, "webhook dispatcher cannot start");
        return;
    }
    let sender = match Sender::new(&settings) {
        Ok(s) => s,
        Err(e) => {
            tracing::error!(worker, error = %e, "webhook dispatcher cannot start");
            return;
        }
    };
    tracing::info!(worker, allow = %settings.allow, "webhook dispatcher started");
    let mut errors: u32 = 0;
    while !shutdown.is_cancelled() {
        let wait = match round(store.as_ref(), &sender, &settings, &worker, &shutdown).await {
            Ok(Some(n)) if n > 0 => {
                errors = 0;
                continue;
            }
            Ok(_) => {
                errors = 0;
                settings.poll
            }
            Err(e) => {
                errors = errors.saturating_add(1);
                let wait = error_wait(settings.poll, errors);
                tracing::warn!(worker, error = %e, retry_in_ms = wait.as_millis(), "webhook dispatcher: store error");
                wait
            }
        };
        tokio::select! {
            () = shutdown.cancelled() => break,
            () = tokio::time::sleep(wait) => {}
        }
    }
    tracing::info!(worker, "webhook dispatcher stopped");
}

/// Start [`WebhookSettings::dispatchers`] dispatchers on the current tokio runtime,
/// named by [`worker_name`]; they stop when `shutdown` is cancelled (await the handles
/// to let attempts in progress finish).
pub fn spawn(
    store: DynStore,
    settings: Arc<WebhookSettings>,
    shutdown: CancellationToken,
) -> Vec<JoinHandle<()>> {
    (0..settings.dispatchers)
        .map(|i| {
            tokio::spawn(run(
                store.clone(),
                settings.clone(),
                worker_name(i),
                shutdown.clone(),
            ))
        })
        .collect()
}

/// The name of this process's dispatcher `index`, unique among processes
/// ([`crate::worker_id::worker_name`]), e.g. `bridge-srv-2:4711:3fa1c2/webhooks-0`.
pub fn worker_name(index: usize) -> String {
    crate::worker_id::worker_name("webhooks", index)
}

/// The wait after `errors` store errors in a row: the poll interval doubled per error,
/// at most 30 s.
fn error_wait(poll: Duration, errors: u32) -> Duration {
    crate::backoff::Backoff {
        base: poll,
        max: MAX_ERROR_WAIT.max(poll),
    }
    .ceiling(errors)
}

/// One round: claim a subscription with due deliveries, send them in `seq` order up to
/// the first failure (or the first that is not due, or the end of the claim), log each
/// attempt, release the claim. Returns how many attempts were made (`None` when nothing
/// was due).
pub async fn round(
    store: &dyn Store,
    sender: &Sender,
    settings: &WebhookSettings,
    worker: &str,
    shutdown: &CancellationToken,
) -> Result<Option<usize>, StoreError> {
    let now = now_utc();
    let lease_until = later(now, settings.lease);
    let Some(batch) = store
        .claim_dispatch(worker, now, lease_until, settings.batch)
        .await?
    else {
        return Ok(None);
    };
    let sub = &batch.subscription;
    let mut attempts = 0;
    let mut outcome = Ok(());
    for (delivery, event) in &batch.items {
        let now = now_utc();
        if delivery.next_attempt_at > now
            || later(now, settings.timeout + LEASE_MARGIN) > lease_until
            || shutdown.is_cancelled()
        {
            break;
        }
        let number = delivery.attempts.saturating_add(1);
        let body = match serde_json::to_vec(&event.body) {
            Ok(b) => b,
            Err(e) => {
                outcome = Err(StoreError::corrupt(format!("event {}: {e}", event.id)));
                break;
            }
        };
        let attempt = sender
            .send(&Outgoing {
                url: &sub.url,
                secret: &sub.secret,
                event_id: event.id,
                event_type: event.event_type,
                delivery_id: delivery.id,
                attempt: number,
                body: &body,
            })
            .await;
        let next = next_step(&attempt, number, settings);
        let log = DeliveryAttempt {
            delivery_id: delivery.id,
            attempt: number,
            at: attempt.at,
            worker: worker.to_owned(),
            status_code: attempt.status_code,
            error: attempt.error.clone(),
            duration_ms: u64::try_from(attempt.duration.as_millis()).unwrap_or(u64::MAX),
        };
        attempts += 1;
        trace_attempt(worker, sub.id, &log, next);
        match store.record_attempt(worker, &log, next).await {
            Ok(()) => {}
            // The claim was lost (it expired and another dispatcher took the
            // subscription) or the subscription was deleted meanwhile: stop, nothing
            // is wrong with the store.
            Err(e @ (StoreError::Conflict(_) | StoreError::NotFound(_))) => {
                tracing::warn!(worker, subscription = %sub.id, error = %e, "webhook dispatcher: attempt not logged; round stopped");
                break;
            }
            Err(e) => {
                outcome = Err(e);
                break;
            }
        }
        if !attempt.delivered() {
            break;
        }
    }
    if let Err(e) = store.release_dispatch(worker, sub.id).await {
        tracing::warn!(worker, subscription = %sub.id, error = %e, "webhook dispatcher: claim not released (it expires with its lease)");
    }
    outcome.map(|()| Some(attempts))
}

/// What follows attempt `number`: delivered, retry after the back-off, or give up after
/// the last allowed attempt.
pub fn next_step(attempt: &Attempt, number: u32, settings: &WebhookSettings) -> DeliveryNext {
    if attempt.delivered() {
        DeliveryNext::Delivered
    } else if number >= settings.max_attempts {
        DeliveryNext::GiveUp
    } else {
        let ended = later(attempt.at, attempt.duration);
        DeliveryNext::RetryAt(later(ended, settings.backoff().delay(number)))
    }
}

fn trace_attempt(worker: &str, subscription: Uuid, a: &DeliveryAttempt, next: DeliveryNext) {
    let delivery = a.delivery_id;
    let error = a.error.as_deref().unwrap_or("");
    match next {
        DeliveryNext::Delivered => tracing::info!(
            worker, %subscription, %delivery, attempt = a.attempt, status = a.status_code,
            duration_ms = a.duration_ms, "webhook delivered"
        ),
        DeliveryNext::RetryAt(at) => tracing::warn!(
            worker, %subscription, %delivery, attempt = a.attempt, status = a.status_code,
            error, retry_at = %at, "webhook attempt failed"
        ),
        DeliveryNext::GiveUp => tracing::warn!(
            worker, %subscription, %delivery, attempt = a.attempt, status = a.status_code,
            error, "webhook delivery failed: no attempts left (replay it by hand)"
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn attempt(error: Option<&str>) -> Attempt {
        Attempt {
            at: time::macros::datetime!(2026-03-01 12:00:00 UTC),
            status_code: Some(if error.is_some() { 503 } else { 204 }),
            error: error.map(str::to_owned),
            duration: Duration::from_millis(250),
        }
    }

    #[test]
    fn a_failed_attempt_is_retried_after_the_backoff_until_the_last() {
        let s = WebhookSettings::default();
        assert_eq!(next_step(&attempt(None), 1, &s), DeliveryNext::Delivered);
        assert_eq!(next_step(&attempt(None), 8, &s), DeliveryNext::Delivered);
        let failed = attempt(Some("HTTP 503"));
        for n in 1..s.max_attempts {
            let DeliveryNext::RetryAt(at) = next_step(&failed, n, &s) else {
                panic!("attempt {n} must be retried");
            };
            // The wait counts from the end of the attempt and is in [c/2, c].
            let wait = at - (failed.at + failed.duration);
            let c = s.backoff().ceiling(n);
            assert!(wait >= c / 2 && wait <= c, "attempt {n}: {wait}");
        }
        assert_eq!(next_step(&failed, 8, &s), DeliveryNext::GiveUp);
        assert_eq!(next_step(&failed, 9, &s), DeliveryNext::GiveUp);
    }

    #[test]
    fn store_errors_back_off_up_to_30_seconds() {
        let p = Duration::from_millis(500);
        assert_eq!(error_wait(p, 1), p);
        assert_eq!(error_wait(p, 2), Duration::from_secs(1));
        assert_eq!(error_wait(p, 4), Duration::from_secs(4));
        assert_eq!(error_wait(p, 7), Duration::from_secs(30));
        assert_eq!(error_wait(p, u32::MAX), Duration::from_secs(30));
        // A poll interval above the cap is kept.
        assert_eq!(
            error_wait(Duration::from_secs(60), 3),
            Duration::from_secs(60)
        );
    }

    #[test]
    fn times_saturate_and_names_carry_the_process() {
        let t = time::macros::datetime!(2026-03-01 12:00:00 UTC);
        assert_eq!(
            later(t, Duration::from_secs(60)),
            t + time::Duration::minutes(1)
        );
        assert_eq!(
            later(t, Duration::MAX),
            time::PrimitiveDateTime::MAX.assume_utc()
        );
        let a = worker_name(0);
        assert!(a.ends_with("/webhooks-0") && a.contains(&std::process::id().to_string()));
    }
}
