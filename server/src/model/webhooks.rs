//! Webhook subscriptions, the events they receive, and the delivery log.
//!
//! Events are written in the transaction that causes them, together with one delivery
//! per matching subscription (the outbox): an event is never lost and never sent
//! before it is committed. Deliveries of one subscription are sent one at a time in
//! `seq` order.

use serde::{Deserialize, Serialize};
use serde_json::json;
use time::OffsetDateTime;
use utoipa::ToSchema;
use uuid::Uuid;

use super::alerts::{AlertEvent, AlertEventKind};
use super::{Analysis, AnalysisStatus, Job, rfc3339};

/// The kinds of event a subscription can receive.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize, ToSchema)]
pub enum EventType {
    /// A job's analysis was stored and succeeded.
    #[serde(rename = "analysis.finished")]
    AnalysisFinished,
    /// A job's analysis was stored as failed, or the job ran out of attempts.
    #[serde(rename = "analysis.failed")]
    AnalysisFailed,
    /// A region went up to a higher alert level.
    #[serde(rename = "alert.raised")]
    AlertRaised,
    /// A region went down to a lower alert level (or below every level).
    #[serde(rename = "alert.cleared")]
    AlertCleared,
}

impl EventType {
    /// Every event type.
    pub const ALL: [EventType; 4] = [
        Self::AnalysisFinished,
        Self::AnalysisFailed,
        Self::AlertRaised,
        Self::AlertCleared,
    ];

    /// `analysis.finished`, `analysis.failed`, `alert.raised` or `alert.cleared`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::AnalysisFinished => "analysis.finished",
            Self::AnalysisFailed => "analysis.failed",
            Self::AlertRaised => "alert.raised",
            Self::AlertCleared => "alert.cleared",
        }
    }

    /// Parse [`EventType::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|t| t.as_str() == s)
    }
}

/// A webhook subscription.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Subscription {
    /// The subscription's ID.
    pub id: Uuid,
    /// Only events of this structure; `null` = events of every structure.
    pub structure_id: Option<String>,
    /// Where events are POSTed (`http` or `https`).
    pub url: String,
    /// The event types sent, at least one.
    pub events: Vec<EventType>,
    /// What the subscription is for (free text).
    pub description: String,
    /// The signing secret (HMAC-SHA256 key). Never serialised: shown once, in the
    /// answer to the request that created the subscription.
    #[serde(skip)]
    pub secret: String,
    /// When it was created, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
}

/// An event to record (with its deliveries) in the transaction that causes it.
#[derive(Debug, Clone, PartialEq)]
pub struct NewEvent {
    /// The stable event ID receivers use to drop duplicates.
    pub id: Uuid,
    /// Its type.
    pub event_type: EventType,
    /// The structure it concerns.
    pub structure_id: String,
    /// When it happened, UTC.
    pub occurred_at: OffsetDateTime,
    /// The body sent: the JSON envelope `{id, type, occurred_at, structure_id, data}`.
    pub body: serde_json::Value,
}

impl NewEvent {
    fn envelope(
        id: Uuid,
        event_type: EventType,
        structure_id: &str,
        occurred_at: OffsetDateTime,
        data: serde_json::Value,
    ) -> Self {
        let body = json!({
            "id": id,
            "type": event_type.as_str(),
            "occurred_at": rfc3339(occurred_at),
            "structure_id": structure_id,
            "data": data,
            "caution": crate::output::CAUTION,
        });
        Self {
            id,
            event_type,
            structure_id: structure_id.to_owned(),
            occurred_at,
            body,
        }
    }

    /// `analysis.finished` or `analysis.failed` for a job that stored `analysis`.
    pub fn for_analysis(job: &Job, analysis: &Analysis, at: OffsetDateTime) -> Self {
        let t = match analysis.status {
            AnalysisStatus::Succeeded => EventType::AnalysisFinished,
            AnalysisStatus::Failed => EventType::AnalysisFailed,
        };
        let data = json!({
            "job_id": job.id,
            "origin": job.origin,
            "batch_id": job.batch_id,
            "analysis_id": analysis.id,
            "analysis_url": format!("/v1/structures/{}/analyses/{}", job.structure_id, analysis.id),
            "kind": analysis.kind,
            "status": analysis.status,
            "method": analysis.method,
            "epoch": analysis.epoch.map(rfc3339),
            "baseline_epoch": analysis.baseline_epoch.map(rfc3339),
            "error": analysis.error,
        });
        Self::envelope(Uuid::new_v4(), t, &job.structure_id, at, data)
    }

    /// `analysis.failed` for a job that ran out of attempts without an analysis.
    pub fn for_exhausted_job(job: &Job, at: OffsetDateTime) -> Self {
        let data = json!({
            "job_id": job.id,
            "origin": job.origin,
            "batch_id": job.batch_id,
            "analysis_id": null,
            "attempts": job.attempts,
            "errors": job.errors,
            "error": job.errors.last().map(|e| e.error.clone()),
        });
        Self::envelope(
            Uuid::new_v4(),
            EventType::AnalysisFailed,
            &job.structure_id,
            at,
            data,
        )
    }

    /// `alert.raised` or `alert.cleared` for a stored alert event (same ID); `None`
    /// for an event that is not sent (`not_significant`).
    pub fn for_alert(e: &AlertEvent) -> Option<Self> {
        let t = match e.kind {
            AlertEventKind::Raised => EventType::AlertRaised,
            AlertEventKind::Cleared => EventType::AlertCleared,
            AlertEventKind::NotSignificant => return None,
        };
        let data = json!({
            "alert_event_id": e.id,
            "rule_id": e.rule_id,
            "region": e.region,
            "from_level": e.from_level,
            "to_level": e.to_level,
            "analysis_id": e.analysis_id,
            "evidence": e.evidence,
        });
        Some(Self::envelope(e.id, t, &e.structure_id, e.created_at, data))
    }
}

/// A stored event.
#[derive(Debug, Clone, PartialEq)]
pub struct Event {
    /// The stable event ID.
    pub id: Uuid,
    /// Its type.
    pub event_type: EventType,
    /// The structure it concerns.
    pub structure_id: String,
    /// When it happened, UTC.
    pub occurred_at: OffsetDateTime,
    /// The body sent (see [`NewEvent::body`]).
    pub body: serde_json::Value,
}

/// Where a delivery is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum DeliveryStatus {
    /// Not delivered yet; next attempt at `next_attempt_at`.
    Pending,
    /// The receiver answered 2xx.
    Delivered,
    /// Every attempt failed; replay it by hand.
    Failed,
}

impl DeliveryStatus {
    /// `pending`, `delivered` or `failed`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Pending => "pending",
            Self::Delivered => "delivered",
            Self::Failed => "failed",
        }
    }

    /// Parse [`DeliveryStatus::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "pending" => Some(Self::Pending),
            "delivered" => Some(Self::Delivered),
            "failed" => Some(Self::Failed),
            _ => None,
        }
    }
}

/// One event's delivery to one subscription.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Delivery {
    /// The delivery's ID.
    pub id: Uuid,
    /// Position in the delivery order (increasing over all subscriptions; a
    /// subscription's deliveries are sent in this order).
    pub seq: i64,
    /// The subscription.
    pub subscription_id: Uuid,
    /// The event's stable ID (a replay sends the same event ID again).
    pub event_id: Uuid,
    /// The event's type.
    pub event_type: EventType,
    /// Where it is.
    pub status: DeliveryStatus,
    /// Attempts made.
    pub attempts: u32,
    /// When the next attempt is due (status `pending`), RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub next_attempt_at: OffsetDateTime,
    /// The last attempt's error or HTTP status line, if it failed.
    pub last_error: Option<String>,
    /// When it was delivered, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339::option")]
    pub delivered_at: Option<OffsetDateTime>,
    /// When the delivery was queued, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
}

/// One attempt of a delivery, as logged.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct DeliveryAttempt {
    /// The delivery.
    pub delivery_id: Uuid,
    /// The attempt's number, from 1.
    pub attempt: u32,
    /// When it was made, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub at: OffsetDateTime,
    /// The worker that made it.
    pub worker: String,
    /// The receiver's HTTP status, when it answered.
    pub status_code: Option<u16>,
    /// Why it failed (connection refused, timeout, a non-2xx status, an address the
    /// allow-list does not allow); `null` when it succeeded.
    pub error: Option<String>,
    /// How long it took, milliseconds.
    pub duration_ms: u64,
}

/// What the next step of a delivery is after an attempt.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DeliveryNext {
    /// Delivered.
    Delivered,
    /// Try again at this time.
    RetryAt(OffsetDateTime),
    /// Give up: the delivery fails (it can be replayed by hand).
    GiveUp,
}

/// The due deliveries of one subscription claimed by one dispatcher, in `seq` order,
/// each with its event.
#[derive(Debug, Clone, PartialEq)]
pub struct DispatchBatch {
    /// The subscription (with its secret).
    pub subscription: Subscription,
    /// Its pending deliveries from the oldest on, due or not (the dispatcher stops at
    /// the first that is not due or that fails, keeping the order).
    pub items: Vec<(Delivery, Event)>,
}

/// Which deliveries of a subscription to list: oldest first by `seq`.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct DeliveryQuery {
    /// Only deliveries with this status.
    pub status: Option<DeliveryStatus>,
    /// Only deliveries with `seq` greater than this.
    pub after_seq: Option<i64>,
    /// At most this many.
    pub limit: usize,
}
