//! Persistence: one [`Store`] trait, two implementations — SQLite (embedded default,
//! one file, zero set-up) and PostgreSQL (production; several server instances may
//! share one database). The same contract tests (`server/tests/store_contract.rs`) run
//! against both.
//!
//! Rules every implementation keeps:
//! - every write that belongs together is one transaction; an error leaves nothing
//!   behind;
//! - lengths are metres and times are UTC with microsecond resolution;
//! - SQL binds every value (never formats one in).

pub mod error;
mod monitor_rows;
mod monitor_sql;
pub mod postgres;
mod rows;
mod shared;
pub mod sqlite;

use std::collections::HashMap;
use std::sync::Arc;

use async_trait::async_trait;
use time::OffsetDateTime;
use uuid::Uuid;

pub use self::error::StoreError;
use crate::model::{
    AlertEvent, AlertEventQuery, AlertRuleRecord, AlertState, Analysis, AnalysisQuery, ApiKey,
    Batch, Delivery, DeliveryAttempt, DeliveryNext, DeliveryQuery, DispatchBatch, EpochSummary,
    Evaluation, IdempotentBatch, Job, JobOutcome, JobQuery, Lease, NewJob, Reading, StoredPoint,
    Structure, Subscription,
};

/// Which database a store talks to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Backend {
    /// An SQLite file.
    Sqlite,
    /// A PostgreSQL server.
    Postgres,
}

impl Backend {
    /// `sqlite` or `postgres`.
    pub fn name(self) -> &'static str {
        match self {
            Self::Sqlite => "sqlite",
            Self::Postgres => "postgres",
        }
    }
}

/// Whether a put created the resource or replaced an existing one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Written {
    /// It did not exist before.
    Created,
    /// It existed and was replaced.
    Updated,
}

/// How many points a put created and how many it replaced.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct PointsWritten {
    /// Points that were new.
    pub created: u64,
    /// Points that existed and got new reference coordinates or precision.
    pub updated: u64,
}

/// A validated reading on its way into the database: internal point key, UTC epoch
/// with microsecond resolution, values in metres.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NewReading {
    /// The point's internal key, from [`BatchWriter::points`].
    pub point_key: i64,
    /// The epoch, UTC, whole microseconds.
    pub epoch: OffsetDateTime,
    /// Displacement components, metres; the third is ignored in a 2D structure.
    pub u: [f64; 3],
    /// A-priori standard deviations, metres (third ignored in 2D); `None` when the
    /// reading states none.
    pub sigma: Option<[f64; 3]>,
}

/// What the service records about a batch besides its readings.
#[derive(Debug, Clone, PartialEq)]
pub struct BatchMeta {
    /// When the request arrived, UTC, whole microseconds.
    pub received_at: OffsetDateTime,
    /// Media type of the body (`application/json` or `text/csv`).
    pub media_type: String,
    /// The client's `Idempotency-Key`, if it sent one.
    pub idempotency_key: Option<String>,
    /// SHA-256 of the body, lowercase hex.
    pub body_sha256: String,
    /// Jobs to queue in the same transaction (the structure's automatic analysis of the
    /// batch's epochs); empty when it has none.
    pub jobs: Vec<NewJob>,
}

/// How alert rules are applied to a finished analysis inside the store's transaction:
/// `(structure, rules, current states, analysis, now) → changes`. The service passes
/// [`crate::alerts::evaluate`]; tests may pass their own.
pub type Evaluator = dyn Fn(&Structure, &[AlertRuleRecord], &[AlertState], &Analysis, OffsetDateTime) -> Evaluation
    + Send
    + Sync;

/// What [`Store::complete_job`] stored.
#[derive(Debug, Clone, PartialEq)]
pub struct Completed {
    /// The job as it is now (ended, or queued again for a retry).
    pub job: Job,
    /// The alert events recorded, in order.
    pub alert_events: Vec<AlertEvent>,
    /// How many webhook deliveries were queued.
    pub deliveries: u64,
}

/// A batch being written: one open transaction. Chunks of readings go in with
/// [`BatchWriter::write`]; [`BatchWriter::commit`] stores the batch record and makes
/// everything visible at once. Dropping the writer without committing rolls back:
/// nothing of the batch stays.
#[async_trait]
pub trait BatchWriter: Send {
    /// The new batch's ID (UUID v4, chosen when the writer began).
    fn batch_id(&self) -> Uuid;

    /// The structure's dimension (2 or 3).
    fn dimension(&self) -> u8;

    /// The structure's points: point ID → internal key, read inside the transaction.
    fn points(&self) -> Arc<HashMap<String, i64>>;

    /// Insert readings. A reading of a point at an epoch that is already stored is a
    /// [`StoreError::Conflict`] naming the point and the epoch; after any error the
    /// writer must be dropped.
    async fn write(&mut self, chunk: &[NewReading]) -> Result<(), StoreError>;

    /// Store the batch record (with `meta`, and as the stored response the returned
    /// summary) and commit. No readings at all is [`StoreError::Invalid`]; an
    /// `Idempotency-Key` that another batch of the structure took meanwhile is a
    /// [`StoreError::Conflict`].
    async fn commit(self: Box<Self>, meta: BatchMeta) -> Result<Batch, StoreError>;
}

/// The storage contract of the service. See the module notes for the rules.
#[async_trait]
pub trait Store: Send + Sync + 'static {
    /// The database behind this store.
    fn backend(&self) -> Backend;

    /// Apply the migrations under `migrations/<backend>` that have not run yet.
    async fn migrate(&self) -> Result<(), StoreError>;

    /// Round trip to the database (for `/readyz`).
    async fn ping(&self) -> Result<(), StoreError>;

    /// Create structure `s.id`, or replace its name, frame, unit, material and metadata.
    /// `created_at` of an existing structure is kept; `updated_at` is taken from `s`.
    /// Changing the dimension of a structure that has points is a
    /// [`StoreError::Conflict`]. Returns the structure as stored.
    async fn put_structure(&self, s: &Structure) -> Result<(Written, Structure), StoreError>;

    /// One structure by ID.
    async fn get_structure(&self, id: &str) -> Result<Option<Structure>, StoreError>;

    /// Structures in ID order: at most `limit`, with IDs after `after`, and only those
    /// in `only` when it is given.
    async fn list_structures(
        &self,
        after: Option<&str>,
        limit: usize,
        only: Option<&[String]>,
    ) -> Result<Vec<Structure>, StoreError>;

    /// Delete a structure with everything that belongs to it; false when it did not exist.
    async fn delete_structure(&self, id: &str) -> Result<bool, StoreError>;

    /// Create or replace points of an existing structure, all in one transaction.
    /// The caller has validated IDs, dimension and values.
    async fn put_points(
        &self,
        structure: &str,
        points: &[StoredPoint],
    ) -> Result<PointsWritten, StoreError>;

    /// All points of a structure in ID order.
    async fn list_points(&self, structure: &str) -> Result<Vec<StoredPoint>, StoreError>;

    /// Store a new API key (its token hash must be new).
    async fn insert_key(&self, key: &ApiKey) -> Result<(), StoreError>;

    /// The key whose token has this SHA-256 (lowercase hex), revoked or not.
    async fn key_by_hash(&self, token_sha256: &str) -> Result<Option<ApiKey>, StoreError>;

    /// All keys, oldest first.
    async fn list_keys(&self) -> Result<Vec<ApiKey>, StoreError>;

    /// Revoke a key; false when no valid key has this ID.
    async fn revoke_key(&self, id: Uuid) -> Result<bool, StoreError>;

    /// Start writing a sensor batch into structure `structure` (one transaction;
    /// in PostgreSQL the structure row is share-locked so that its points cannot
    /// change meanwhile). [`StoreError::NotFound`] when the structure does not exist.
    ///
    /// With an `idempotency_key`, writers of the same structure and key are serialised:
    /// the second one starts only when the first has committed or rolled back, so that
    /// it can find the first one's batch and replay it (SQLite: the single write lock;
    /// PostgreSQL: a transaction-scoped advisory lock on the structure and key).
    async fn begin_batch(
        &self,
        structure: &str,
        idempotency_key: Option<&str>,
    ) -> Result<Box<dyn BatchWriter>, StoreError>;

    /// One batch of a structure.
    async fn get_batch(&self, structure: &str, id: Uuid) -> Result<Option<Batch>, StoreError>;

    /// Batches of a structure in `(received_at, id)` order: at most `limit`, after
    /// `after` when given.
    async fn list_batches(
        &self,
        structure: &str,
        after: Option<(OffsetDateTime, Uuid)>,
        limit: usize,
    ) -> Result<Vec<Batch>, StoreError>;

    /// The batch stored under `Idempotency-Key` `key` of a structure (keys are per
    /// structure), with its body hash and stored response.
    async fn batch_by_idempotency_key(
        &self,
        structure: &str,
        key: &str,
    ) -> Result<Option<IdempotentBatch>, StoreError>;

    /// Epochs of a structure with readings, oldest first, with how many readings each;
    /// only those within `from..=to` when given. Empty for an unknown structure.
    async fn list_epochs(
        &self,
        structure: &str,
        from: Option<OffsetDateTime>,
        to: Option<OffsetDateTime>,
    ) -> Result<Vec<EpochSummary>, StoreError>;

    /// The first epoch of a structure with readings (`None` when there is none, or no
    /// such structure): an indexed lookup, not a scan of the history.
    async fn first_epoch(&self, structure: &str) -> Result<Option<OffsetDateTime>, StoreError>;

    /// The latest epoch of a structure with readings before `before` (`None` when there
    /// is none): an indexed lookup, not a scan of the history.
    async fn epoch_before(
        &self,
        structure: &str,
        before: OffsetDateTime,
    ) -> Result<Option<OffsetDateTime>, StoreError>;

    /// The readings of a structure at one epoch, in point ID order (metres). Empty
    /// when there are none (or the structure does not exist).
    async fn readings_at(
        &self,
        structure: &str,
        epoch: OffsetDateTime,
    ) -> Result<Vec<Reading>, StoreError>;
    /// Store an analysis of structure `a.structure_id` (its ID must be new; a
    /// succeeded analysis has a result and no error, a failed one an error and no
    /// result). [`StoreError::NotFound`] when the structure does not exist.
    async fn insert_analysis(&self, a: &Analysis) -> Result<(), StoreError>;

    /// One analysis of `structure`, with its result document; `None` when it does not
    /// exist or belongs to another structure.
    async fn get_analysis(&self, structure: &str, id: Uuid)
    -> Result<Option<Analysis>, StoreError>;

    /// Analyses of `structure` matching `q`, newest first by `(created_at, id)`,
    /// without their result documents (`result` is `None`).
    async fn list_analyses(
        &self,
        structure: &str,
        q: &AnalysisQuery,
    ) -> Result<Vec<Analysis>, StoreError>;

    // ---- jobs ----

    /// Queue a job. [`StoreError::NotFound`] when the structure does not exist.
    async fn enqueue_job(&self, job: &NewJob) -> Result<Job, StoreError>;

    /// One job by ID (of any structure; the caller checks access by `structure_id`).
    async fn get_job(&self, id: Uuid) -> Result<Option<Job>, StoreError>;

    /// Jobs of `structure` matching `q`, newest first by `(created_at, id)`.
    async fn list_jobs(&self, structure: &str, q: &JobQuery) -> Result<Vec<Job>, StoreError>;

    /// Claim the oldest claimable job for `worker` with a lease until `lease_until`:
    /// a `queued` job whose `run_after` is at or before `now`, or a `running` job whose
    /// lease expired before `now` (its lost attempt is recorded as an error, `lease
    /// expired`). A claimable job that has used all its attempts is not claimed but
    /// failed, with an `analysis.failed` event and its deliveries, in the same
    /// transaction. PostgreSQL claims with `FOR UPDATE SKIP LOCKED`, so that workers
    /// in several processes never claim the same job at once. Returns the claimed job
    /// (status `running`, `attempts` counted) and its lease; `None` when there is none.
    async fn claim_job(
        &self,
        worker: &str,
        now: OffsetDateTime,
        lease_until: OffsetDateTime,
    ) -> Result<Option<(Job, Lease)>, StoreError>;

    /// Extend a current lease to `lease_until`. [`StoreError::Conflict`] when the lease
    /// is not current (expired and claimed by another worker, or the job ended).
    async fn renew_lease(
        &self,
        lease: &Lease,
        lease_until: OffsetDateTime,
    ) -> Result<(), StoreError>;

    /// End an attempt, all in one transaction, only while `lease` is current
    /// ([`StoreError::Conflict`] otherwise, and nothing is written: this is what keeps
    /// one result per job).
    ///
    /// - [`JobOutcome::Analysis`]: store the analysis, link it to the job, end the job
    ///   (`succeeded` or `failed` after the analysis's status), apply `evaluate` to the
    ///   structure's rules and states (PostgreSQL locks the structure row first, so that
    ///   evaluations of one structure do not interleave), write its states and alert
    ///   events, and record the `analysis.*` event and the `alert.raised` /
    ///   `alert.cleared` events with a delivery for every matching subscription.
    /// - [`JobOutcome::Error`]: record the error; queue the job again for `retry_at`,
    ///   or, when it has used all its attempts, fail it with an `analysis.failed` event.
    async fn complete_job(
        &self,
        lease: &Lease,
        outcome: &JobOutcome,
        evaluate: &Evaluator,
        now: OffsetDateTime,
    ) -> Result<Completed, StoreError>;

    // ---- automatic analysis ----

    /// Set (`Some`) or remove (`None`) the automatic analysis of a structure (a JSON
    /// object validated by the API). [`StoreError::NotFound`] when the structure does
    /// not exist.
    async fn put_auto_analysis(
        &self,
        structure: &str,
        config: Option<&serde_json::Value>,
    ) -> Result<(), StoreError>;

    /// The automatic analysis of a structure, if it has one.
    async fn get_auto_analysis(
        &self,
        structure: &str,
    ) -> Result<Option<serde_json::Value>, StoreError>;

    // ---- alerts ----

    /// Create or replace rule `r.id` of structure `r.structure_id` (`created_at` of an
    /// existing rule is kept). Replacing a rule keeps its states. [`StoreError::NotFound`]
    /// when the structure does not exist; [`StoreError::Conflict`] when the ID belongs
    /// to a rule of another structure.
    async fn put_alert_rule(&self, r: &AlertRuleRecord) -> Result<Written, StoreError>;

    /// One rule of a structure.
    async fn get_alert_rule(
        &self,
        structure: &str,
        id: Uuid,
    ) -> Result<Option<AlertRuleRecord>, StoreError>;

    /// The rules of a structure, oldest first.
    async fn list_alert_rules(&self, structure: &str) -> Result<Vec<AlertRuleRecord>, StoreError>;

    /// Delete a rule with its states (its events stay in the log); false when it did
    /// not exist.
    async fn delete_alert_rule(&self, structure: &str, id: Uuid) -> Result<bool, StoreError>;

    /// The current alert states of a structure, by rule then region.
    async fn list_alert_states(&self, structure: &str) -> Result<Vec<AlertState>, StoreError>;

    /// Alert events of a structure matching `q`, oldest first by `seq`.
    async fn list_alert_events(
        &self,
        structure: &str,
        q: &AlertEventQuery,
    ) -> Result<Vec<AlertEvent>, StoreError>;

    // ---- webhooks ----

    /// Store a new subscription (its ID must be new). [`StoreError::NotFound`] when it
    /// names a structure that does not exist.
    async fn insert_subscription(&self, s: &Subscription) -> Result<(), StoreError>;

    /// One subscription, with its secret.
    async fn get_subscription(&self, id: Uuid) -> Result<Option<Subscription>, StoreError>;

    /// All subscriptions, oldest first; only those of `structure` (not the global ones)
    /// when given.
    async fn list_subscriptions(
        &self,
        structure: Option<&str>,
    ) -> Result<Vec<Subscription>, StoreError>;

    /// Delete a subscription with its deliveries and their log; false when it did not
    /// exist.
    async fn delete_subscription(&self, id: Uuid) -> Result<bool, StoreError>;

    /// Deliveries of a subscription matching `q`, oldest first by `seq`.
    async fn list_deliveries(
        &self,
        subscription: Uuid,
        q: &DeliveryQuery,
    ) -> Result<Vec<Delivery>, StoreError>;

    /// One delivery of a subscription with its attempts, oldest first.
    async fn get_delivery(
        &self,
        subscription: Uuid,
        id: Uuid,
    ) -> Result<Option<(Delivery, Vec<DeliveryAttempt>)>, StoreError>;

    /// Queue the event of a delivery again for its subscription, as a new delivery at
    /// the end of the subscription's order, due at `now` (same event ID and body).
    /// `None` when the subscription has no such delivery.
    async fn replay_delivery(
        &self,
        subscription: Uuid,
        id: Uuid,
        now: OffsetDateTime,
    ) -> Result<Option<Delivery>, StoreError>;

    /// Claim, for dispatcher `worker` until `lease_until`, one subscription that has a
    /// pending delivery due at `now` and no other dispatcher's live claim, and return
    /// its pending deliveries from the oldest on (at most `max`), each with its event.
    /// PostgreSQL claims with `FOR UPDATE SKIP LOCKED`. `None` when nothing is due.
    async fn claim_dispatch(
        &self,
        worker: &str,
        now: OffsetDateTime,
        lease_until: OffsetDateTime,
        max: usize,
    ) -> Result<Option<DispatchBatch>, StoreError>;

    /// Log an attempt of a delivery and move it on (`next`), while `worker` holds the
    /// subscription's claim ([`StoreError::Conflict`] otherwise, and nothing is written).
    async fn record_attempt(
        &self,
        worker: &str,
        attempt: &DeliveryAttempt,
        next: DeliveryNext,
    ) -> Result<(), StoreError>;

    /// Give up `worker`'s claim on a subscription (no error when it holds none).
    async fn release_dispatch(&self, worker: &str, subscription: Uuid) -> Result<(), StoreError>;
}

/// A shared handle to the store chosen at start-up.
pub type DynStore = Arc<dyn Store>;

/// Open the store for `url`: `postgres://…` / `postgresql://…` for PostgreSQL, and
/// `sqlite:PATH` (or a bare file path) for SQLite; the SQLite file is created when
/// missing. Does not migrate.
pub async fn open(url: &str) -> Result<DynStore, StoreError> {
    if url.starts_with("postgres://") || url.starts_with("postgresql://") {
        Ok(Arc::new(postgres::PgStore::connect(url).await?))
    } else {
        Ok(Arc::new(sqlite::SqliteStore::open(url).await?))
    }
}

/// A URL for log lines and `--help`: the password of a PostgreSQL URL is masked.
pub fn redact_url(url: &str) -> String {
    if let Some((scheme, rest)) = url.split_once("://")
        && let Some((cred, host)) = rest.rsplit_once('@')
        && let Some((user, _password)) = cred.split_once(':')
    {
        return format!("{scheme}://{user}:***@{host}");
    }
    url.to_owned()
}

#[cfg(test)]
mod tests {
    use super::redact_url;

    #[test]
    fn passwords_are_masked_in_urls() {
        assert_eq!(
            redact_url("postgres://u:secret@db:5432/k"),
            "postgres://u:***@db:5432/k"
        );
        assert_eq!(redact_url("postgres://u@db/k"), "postgres://u@db/k");
        assert_eq!(redact_url("sqlite:kinema.db"), "sqlite:kinema.db");
    }
}
