//! Row shapes of the monitoring loop's tables (jobs, alerts, webhooks), shared by both
//! databases like [`super::rows`]: generic over how the database keeps a time, with
//! the conversion into the service's types written once here. Counts and levels are
//! `INTEGER` columns (`i32`); sequence numbers and durations are 64-bit.

use sqlx::types::Json;
use uuid::Uuid;

use super::StoreError;
use super::rows::{DbTime, opt_time};
use crate::model::{
    AlertEvent, AlertEventKind, AlertRuleRecord, AlertState, Delivery, DeliveryAttempt,
    DeliveryStatus, Event, EventType, Job, JobAttemptError, JobOrigin, JobStatus, Subscription,
};

/// A stored count or level (`INTEGER`, never negative) as the service's `u32`.
fn count(v: i32, what: &str) -> Result<u32, StoreError> {
    u32::try_from(v).map_err(|_| StoreError::corrupt(format!("{what} {v}")))
}

/// A `u32` count or level for an `INTEGER` column (saturating; the API bounds them far
/// below).
pub fn int(v: u32) -> i32 {
    i32::try_from(v).unwrap_or(i32::MAX)
}

/// A stored event type.
fn event_type(s: &str) -> Result<EventType, StoreError> {
    EventType::parse(s).ok_or_else(|| StoreError::corrupt(format!("event type {s:?}")))
}

/// Columns of `jobs` joined with the structure's ID.
#[derive(Debug, sqlx::FromRow)]
pub struct JobRow<T> {
    pub id: Uuid,
    pub structure_id: String,
    pub status: String,
    pub origin: String,
    pub batch_id: Option<Uuid>,
    pub request: Json<serde_json::Value>,
    pub attempts: i32,
    pub max_attempts: i32,
    pub run_after: T,
    pub worker: Option<String>,
    pub lease_expires_at: Option<T>,
    pub errors: Json<Vec<JobAttemptError>>,
    pub analysis_id: Option<Uuid>,
    pub created_at: T,
    pub finished_at: Option<T>,
}

/// The column list of [`JobRow`] (`j` = jobs, `s` = structures), for `SELECT`.
macro_rules! job_columns {
    () => {
        "j.id, s.id AS structure_id, j.status, j.origin, j.batch_id, j.request, j.attempts, \
         j.max_attempts, j.run_after, j.worker, j.lease_expires_at, j.errors, j.analysis_id, \
         j.created_at, j.finished_at"
    };
}
pub(crate) use job_columns;

impl<T: DbTime> JobRow<T> {
    /// Into the service's type.
    pub fn into_job(self) -> Result<Job, StoreError> {
        Ok(Job {
            id: self.id,
            structure_id: self.structure_id,
            status: JobStatus::parse(&self.status)
                .ok_or_else(|| StoreError::corrupt(format!("job status {:?}", self.status)))?,
            origin: JobOrigin::parse(&self.origin)
                .ok_or_else(|| StoreError::corrupt(format!("job origin {:?}", self.origin)))?,
            batch_id: self.batch_id,
            request: self.request.0,
            attempts: count(self.attempts, "job attempts")?,
            max_attempts: count(self.max_attempts, "job max_attempts")?,
            run_after: self.run_after.into_time()?,
            worker: self.worker,
            lease_expires_at: opt_time(self.lease_expires_at)?,
            errors: self.errors.0,
            analysis_id: self.analysis_id,
            created_at: self.created_at.into_time()?,
            finished_at: opt_time(self.finished_at)?,
        })
    }
}

/// Columns of `alert_rules` joined with the structure's ID.
#[derive(Debug, sqlx::FromRow)]
pub struct AlertRuleRow<T> {
    pub id: Uuid,
    pub structure_id: String,
    pub definition: Json<serde_json::Value>,
    pub created_at: T,
    pub updated_at: T,
}

/// The column list of [`AlertRuleRow`] (`r` = alert_rules, `s` = structures).
macro_rules! alert_rule_columns {
    () => {
        "r.id, s.id AS structure_id, r.definition, r.created_at, r.updated_at"
    };
}
pub(crate) use alert_rule_columns;

impl<T: DbTime> AlertRuleRow<T> {
    /// Into the service's type.
    pub fn into_rule(self) -> Result<AlertRuleRecord, StoreError> {
        Ok(AlertRuleRecord {
            id: self.id,
            structure_id: self.structure_id,
            definition: self.definition.0,
            created_at: self.created_at.into_time()?,
            updated_at: self.updated_at.into_time()?,
        })
    }
}

/// Columns of `alert_states`.
#[derive(Debug, sqlx::FromRow)]
pub struct AlertStateRow<T> {
    pub rule_id: Uuid,
    pub region: String,
    pub level: i32,
    pub data: Json<serde_json::Value>,
    pub updated_at: T,
}

/// The column list of [`AlertStateRow`] (`st` = alert_states).
macro_rules! alert_state_columns {
    () => {
        "st.rule_id, st.region, st.level, st.data, st.updated_at"
    };
}
pub(crate) use alert_state_columns;

impl<T: DbTime> AlertStateRow<T> {
    /// Into the service's type.
    pub fn into_state(self) -> Result<AlertState, StoreError> {
        Ok(AlertState {
            rule_id: self.rule_id,
            region: self.region,
            level: count(self.level, "alert level")?,
            data: self.data.0,
            updated_at: self.updated_at.into_time()?,
        })
    }
}

/// Columns of `alert_events` joined with the structure's ID.
#[derive(Debug, sqlx::FromRow)]
pub struct AlertEventRow<T> {
    pub id: Uuid,
    pub seq: i64,
    pub structure_id: String,
    pub rule_id: Uuid,
    pub region: String,
    pub kind: String,
    pub from_level: i32,
    pub to_level: i32,
    pub analysis_id: Uuid,
    pub evidence: Json<serde_json::Value>,
    pub created_at: T,
}

/// The column list of [`AlertEventRow`] (`ae` = alert_events, `s` = structures).
macro_rules! alert_event_columns {
    () => {
        "ae.id, ae.seq, s.id AS structure_id, ae.rule_id, ae.region, ae.kind, ae.from_level, \
         ae.to_level, ae.analysis_id, ae.evidence, ae.created_at"
    };
}
pub(crate) use alert_event_columns;

impl<T: DbTime> AlertEventRow<T> {
    /// Into the service's type.
    pub fn into_event(self) -> Result<AlertEvent, StoreError> {
        Ok(AlertEvent {
            id: self.id,
            seq: self.seq,
            structure_id: self.structure_id,
            rule_id: self.rule_id,
            region: self.region,
            kind: AlertEventKind::parse(&self.kind)
                .ok_or_else(|| StoreError::corrupt(format!("alert event kind {:?}", self.kind)))?,
            from_level: count(self.from_level, "alert level")?,
            to_level: count(self.to_level, "alert level")?,
            analysis_id: self.analysis_id,
            evidence: self.evidence.0,
            created_at: self.created_at.into_time()?,
        })
    }
}

/// Columns of `webhook_subscriptions` with the structure's ID (`NULL` for a global
/// subscription).
#[derive(Debug, sqlx::FromRow)]
pub struct SubscriptionRow<T> {
    pub id: Uuid,
    pub structure_id: Option<String>,
    pub url: String,
    pub events: Json<Vec<EventType>>,
    pub description: String,
    pub secret: String,
    pub created_at: T,
}

/// The column list of [`SubscriptionRow`] (`w` = webhook_subscriptions, `s` =
/// structures, left-joined).
macro_rules! subscription_columns {
    () => {
        "w.id, s.id AS structure_id, w.url, w.events, w.description, w.secret, w.created_at"
    };
}
pub(crate) use subscription_columns;

impl<T: DbTime> SubscriptionRow<T> {
    /// Into the service's type.
    pub fn into_subscription(self) -> Result<Subscription, StoreError> {
        Ok(Subscription {
            id: self.id,
            structure_id: self.structure_id,
            url: self.url,
            events: self.events.0,
            description: self.description,
            secret: self.secret,
            created_at: self.created_at.into_time()?,
        })
    }
}

/// Columns of `deliveries` with their event's type.
#[derive(Debug, sqlx::FromRow)]
pub struct DeliveryRow<T> {
    pub id: Uuid,
    pub seq: i64,
    pub subscription_id: Uuid,
    pub event_id: Uuid,
    pub event_type: String,
    pub status: String,
    pub attempts: i32,
    pub next_attempt_at: T,
    pub last_error: Option<String>,
    pub delivered_at: Option<T>,
    pub created_at: T,
}

/// The column list of [`DeliveryRow`] (`d` = deliveries, `e` = events).
macro_rules! delivery_columns {
    () => {
        "d.id, d.seq, d.subscription_id, d.event_id, e.type AS event_type, d.status, d.attempts, \
         d.next_attempt_at, d.last_error, d.delivered_at, d.created_at"
    };
}
pub(crate) use delivery_columns;

impl<T: DbTime> DeliveryRow<T> {
    /// Into the service's type.
    pub fn into_delivery(self) -> Result<Delivery, StoreError> {
        Ok(Delivery {
            id: self.id,
            seq: self.seq,
            subscription_id: self.subscription_id,
            event_id: self.event_id,
            event_type: event_type(&self.event_type)?,
            status: DeliveryStatus::parse(&self.status)
                .ok_or_else(|| StoreError::corrupt(format!("delivery status {:?}", self.status)))?,
            attempts: count(self.attempts, "delivery attempts")?,
            next_attempt_at: self.next_attempt_at.into_time()?,
            last_error: self.last_error,
            delivered_at: opt_time(self.delivered_at)?,
            created_at: self.created_at.into_time()?,
        })
    }
}

/// A delivery with the rest of its event (ID and type are the delivery's).
#[derive(Debug, sqlx::FromRow)]
pub struct DispatchRow<T> {
    #[sqlx(flatten)]
    pub delivery: DeliveryRow<T>,
    pub event_structure_id: String,
    pub event_occurred_at: T,
    pub event_body: Json<serde_json::Value>,
}

/// The column list of [`DispatchRow`] (`d` = deliveries, `e` = events, `es` = the
/// event's structure).
macro_rules! dispatch_columns {
    () => {
        concat!(
            $crate::store::monitor_rows::delivery_columns!(),
            ", es.id AS event_structure_id, e.occurred_at AS event_occurred_at, \
             e.body AS event_body"
        )
    };
}
pub(crate) use dispatch_columns;

impl<T: DbTime> DispatchRow<T> {
    /// Into the service's types.
    pub fn into_pair(self) -> Result<(Delivery, Event), StoreError> {
        let delivery = self.delivery.into_delivery()?;
        let event = Event {
            id: delivery.event_id,
            event_type: delivery.event_type,
            structure_id: self.event_structure_id,
            occurred_at: self.event_occurred_at.into_time()?,
            body: self.event_body.0,
        };
        Ok((delivery, event))
    }
}

/// Columns of `delivery_attempts`.
#[derive(Debug, sqlx::FromRow)]
pub struct AttemptRow<T> {
    pub delivery_id: Uuid,
    pub attempt: i32,
    pub at: T,
    pub worker: String,
    pub status_code: Option<i32>,
    pub error: Option<String>,
    pub duration_ms: i64,
}

impl<T: DbTime> AttemptRow<T> {
    /// Into the service's type.
    pub fn into_attempt(self) -> Result<DeliveryAttempt, StoreError> {
        Ok(DeliveryAttempt {
            delivery_id: self.delivery_id,
            attempt: count(self.attempt, "delivery attempt")?,
            at: self.at.into_time()?,
            worker: self.worker,
            status_code: self
                .status_code
                .map(|c| {
                    u16::try_from(c).map_err(|_| StoreError::corrupt(format!("HTTP status {c}")))
                })
                .transpose()?,
            error: self.error,
            duration_ms: u64::try_from(self.duration_ms)
                .map_err(|_| StoreError::corrupt(format!("duration {}", self.duration_ms)))?,
        })
    }
}
