//! Webhook delivery: events of the monitoring loop POSTed to subscribers' URLs.
//!
//! Events and their deliveries are written by the store in the transaction that causes
//! them (the outbox, see [`crate::model::webhooks`]). This module sends them:
//!
//! - [`sign`]: the signing secret and the `Kinema-Signature` header (HMAC-SHA256 over
//!   `"{timestamp}.{body}"`);
//! - [`policy`]: which destination addresses may be reached (the allow-list,
//!   `KINEMA_WEBHOOK_ALLOW`), checked on the URL when a subscription is made and on
//!   every resolved address when an attempt connects;
//! - the wait between attempts is [`crate::backoff`] (exponential, capped, with "equal jitter");
//! - [`send`]: one HTTP attempt;
//! - [`dispatch`]: the loop that claims due deliveries and sends them, one subscription
//!   at a time in `seq` order;
//! - [`settings`]: the settings of all of the above.
//!
//! Delivery is at least once: a receiver may get an event twice (a retry after a lost
//! answer, a replay) and drops duplicates by the `Kinema-Event-Id` header.

pub mod dispatch;
pub mod policy;
pub mod send;
pub mod settings;
pub mod sign;

pub use self::dispatch::{run, spawn, worker_name};
pub use self::settings::WebhookSettings;
