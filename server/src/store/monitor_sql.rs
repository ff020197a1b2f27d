//! The SQL of the monitoring loop (jobs, automatic analysis, alerts, webhooks), the
//! same on both databases, written once like `store::shared`.
//!
//! - `lock`: `""` (SQLite) or `" FOR UPDATE"` (PostgreSQL);
//! - `skip_locked`: `""` (SQLite, one writer at a time) or `" FOR UPDATE SKIP LOCKED"`.

/// Jobs, automatic analysis, alerts and webhooks for one backend.
macro_rules! monitor_sql {
    (
        store = $Store:ty,
        db = $Db:ty,
        pool = $Pool:ty,
        time = $Time:ty,
        lock = $lock:literal,
        skip_locked = $skip_locked:literal $(,)?
    ) => {
        use time::OffsetDateTime;
        use uuid::Uuid;

        use $crate::model::{
            AlertEvent, AlertEventQuery, AlertRuleRecord, AlertState, Delivery, DeliveryAttempt,
            DeliveryNext, DeliveryQuery, DispatchBatch, Job, JobOutcome, JobQuery, Lease, NewJob,
            Subscription,
        };
        use $crate::store::{Completed, Evaluator, StoreError, Written};

        pub(super) async fn enqueue_job(_store: &$Store, _job: &NewJob) -> Result<Job, StoreError> {
            todo!()
        }
        pub(super) async fn get_job(_pool: &$Pool, _id: Uuid) -> Result<Option<Job>, StoreError> {
            todo!()
        }
        pub(super) async fn list_jobs(
            _pool: &$Pool,
            _structure: &str,
            _q: &JobQuery,
        ) -> Result<Vec<Job>, StoreError> {
            todo!()
        }
        pub(super) async fn claim_job(
            _store: &$Store,
            _worker: &str,
            _now: OffsetDateTime,
            _lease_until: OffsetDateTime,
        ) -> Result<Option<(Job, Lease)>, StoreError> {
            todo!()
        }
        pub(super) async fn renew_lease(
            _store: &$Store,
            _lease: &Lease,
            _lease_until: OffsetDateTime,
        ) -> Result<(), StoreError> {
            todo!()
        }
        pub(super) async fn complete_job(
            _store: &$Store,
            _lease: &Lease,
            _outcome: &JobOutcome,
            _evaluate: &Evaluator,
            _now: OffsetDateTime,
        ) -> Result<Completed, StoreError> {
            todo!()
        }
        pub(super) async fn put_auto_analysis(
            _store: &$Store,
            _structure: &str,
            _config: Option<&serde_json::Value>,
        ) -> Result<(), StoreError> {
            todo!()
        }
        pub(super) async fn get_auto_analysis(
            _pool: &$Pool,
            _structure: &str,
        ) -> Result<Option<serde_json::Value>, StoreError> {
            todo!()
        }
        pub(super) async fn put_alert_rule(
            _store: &$Store,
            _r: &AlertRuleRecord,
        ) -> Result<Written, StoreError> {
            todo!()
        }
        pub(super) async fn get_alert_rule(
            _pool: &$Pool,
            _structure: &str,
            _id: Uuid,
        ) -> Result<Option<AlertRuleRecord>, StoreError> {
            todo!()
        }
        pub(super) async fn list_alert_rules(
            _pool: &$Pool,
            _structure: &str,
        ) -> Result<Vec<AlertRuleRecord>, StoreError> {
            todo!()
        }
        pub(super) async fn delete_alert_rule(
            _store: &$Store,
            _structure: &str,
            _id: Uuid,
        ) -> Result<bool, StoreError> {
            todo!()
        }
        pub(super) async fn list_alert_states(
            _pool: &$Pool,
            _structure: &str,
        ) -> Result<Vec<AlertState>, StoreError> {
            todo!()
        }
        pub(super) async fn list_alert_events(
            _pool: &$Pool,
            _structure: &str,
            _q: &AlertEventQuery,
        ) -> Result<Vec<AlertEvent>, StoreError> {
            todo!()
        }
        pub(super) async fn insert_subscription(
            _store: &$Store,
            _s: &Subscription,
        ) -> Result<(), StoreError> {
            todo!()
        }
        pub(super) async fn get_subscription(
            _pool: &$Pool,
            _id: Uuid,
        ) -> Result<Option<Subscription>, StoreError> {
            todo!()
        }
        pub(super) async fn list_subscriptions(
            _pool: &$Pool,
            _structure: Option<&str>,
        ) -> Result<Vec<Subscription>, StoreError> {
            todo!()
        }
        pub(super) async fn delete_subscription(
            _store: &$Store,
            _id: Uuid,
        ) -> Result<bool, StoreError> {
            todo!()
        }
        pub(super) async fn list_deliveries(
            _pool: &$Pool,
            _subscription: Uuid,
            _q: &DeliveryQuery,
        ) -> Result<Vec<Delivery>, StoreError> {
            todo!()
        }
        pub(super) async fn get_delivery(
            _pool: &$Pool,
            _subscription: Uuid,
            _id: Uuid,
        ) -> Result<Option<(Delivery, Vec<DeliveryAttempt>)>, StoreError> {
            todo!()
        }
        pub(super) async fn replay_delivery(
            _store: &$Store,
            _subscription: Uuid,
            _id: Uuid,
            _now: OffsetDateTime,
        ) -> Result<Option<Delivery>, StoreError> {
            todo!()
        }
        pub(super) async fn claim_dispatch(
            _store: &$Store,
            _worker: &str,
            _now: OffsetDateTime,
            _lease_until: OffsetDateTime,
            _max: usize,
        ) -> Result<Option<DispatchBatch>, StoreError> {
            todo!()
        }
        pub(super) async fn record_attempt(
            _store: &$Store,
            _worker: &str,
            _attempt: &DeliveryAttempt,
            _next: DeliveryNext,
        ) -> Result<(), StoreError> {
            todo!()
        }
        pub(super) async fn release_dispatch(
            _store: &$Store,
            _worker: &str,
            _subscription: Uuid,
        ) -> Result<(), StoreError> {
            todo!()
        }
    };
}

pub(crate) use monitor_sql;
