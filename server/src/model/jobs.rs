//! Durable analysis jobs: what the queue in the database holds, how a worker's claim
//! on a job is identified, and how a job ends.
//!
//! A job is `queued` until a worker claims it (`running`, with a lease that the worker
//! renews); it ends `succeeded` (its analysis succeeded) or `failed` (its analysis was
//! stored as failed, or every attempt ended in an error). A worker that dies loses its
//! lease when the lease expires, and the job is claimed again by another worker.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use utoipa::ToSchema;
use uuid::Uuid;

use super::Analysis;

/// Where a job is in its life.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum JobStatus {
    /// Waiting for a worker (a new job, or one whose last attempt failed and that is
    /// waiting for `run_after`).
    Queued,
    /// Claimed by a worker whose lease has not expired (or has, and nobody has claimed
    /// it again yet).
    Running,
    /// Its analysis was stored and succeeded.
    Succeeded,
    /// Its analysis was stored as failed, or its attempts ran out.
    Failed,
}

impl JobStatus {
    /// `queued`, `running`, `succeeded` or `failed`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Queued => "queued",
            Self::Running => "running",
            Self::Succeeded => "succeeded",
            Self::Failed => "failed",
        }
    }

    /// Parse [`JobStatus::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "queued" => Some(Self::Queued),
            "running" => Some(Self::Running),
            "succeeded" => Some(Self::Succeeded),
            "failed" => Some(Self::Failed),
            _ => None,
        }
    }

    /// True for `succeeded` and `failed`.
    pub fn is_final(self) -> bool {
        matches!(self, Self::Succeeded | Self::Failed)
    }
}

/// What queued a job.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum JobOrigin {
    /// A client's `POST /v1/structures/{id}/analyses`.
    Request,
    /// An arriving batch, through the structure's automatic analysis.
    Batch,
}

impl JobOrigin {
    /// `request` or `batch`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Request => "request",
            Self::Batch => "batch",
        }
    }

    /// Parse [`JobOrigin::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "request" => Some(Self::Request),
            "batch" => Some(Self::Batch),
            _ => None,
        }
    }
}

/// One failed attempt of a job.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct JobAttemptError {
    /// The attempt's number, from 1.
    pub attempt: u32,
    /// When the error was recorded, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub at: OffsetDateTime,
    /// The worker that ran the attempt.
    pub worker: String,
    /// What went wrong (a worker that lost its lease: `lease expired`).
    pub error: String,
}

/// A job as stored.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Job {
    /// The job's ID.
    pub id: Uuid,
    /// The structure's asset ID.
    pub structure_id: String,
    /// Where the job is in its life.
    pub status: JobStatus,
    /// What queued it.
    pub origin: JobOrigin,
    /// The batch whose arrival queued it (origin `batch`).
    pub batch_id: Option<Uuid>,
    /// The analysis to run: the body of `POST /v1/structures/{id}/analyses` as
    /// validated, or (origin `batch`) the structure's automatic analysis with its epoch.
    #[schema(value_type = Object)]
    pub request: serde_json::Value,
    /// Attempts started so far (a claim starts one).
    pub attempts: u32,
    /// Attempts allowed before the job fails.
    pub max_attempts: u32,
    /// Not claimed before this time, RFC 3339 UTC (the back-off after a failed attempt).
    #[serde(with = "time::serde::rfc3339")]
    pub run_after: OffsetDateTime,
    /// The worker holding (or last holding) the job.
    pub worker: Option<String>,
    /// When the running worker's lease expires, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339::option")]
    pub lease_expires_at: Option<OffsetDateTime>,
    /// Errors of failed attempts, oldest first.
    pub errors: Vec<JobAttemptError>,
    /// The analysis the job stored (exactly one per job), once it has.
    pub analysis_id: Option<Uuid>,
    /// When the job was queued, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// When the job ended, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339::option")]
    pub finished_at: Option<OffsetDateTime>,
}

/// A job to queue.
#[derive(Debug, Clone, PartialEq)]
pub struct NewJob {
    /// Its ID (UUID v4, made by the caller).
    pub id: Uuid,
    /// The structure's asset ID.
    pub structure_id: String,
    /// What queued it.
    pub origin: JobOrigin,
    /// The batch that queued it.
    pub batch_id: Option<Uuid>,
    /// The analysis to run (see [`Job::request`]).
    pub request: serde_json::Value,
    /// Attempts allowed, at least 1.
    pub max_attempts: u32,
    /// When it was queued (also its first `run_after`).
    pub created_at: OffsetDateTime,
}

/// The identity of one claim on a job: the job, the worker and the attempt. Renewing,
/// completing or failing a job needs the claim that is current: a worker whose lease
/// expired and whose job was claimed again holds a stale claim and gets
/// [`crate::store::StoreError::Conflict`].
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Lease {
    /// The job.
    pub job_id: Uuid,
    /// The worker that claimed it.
    pub worker: String,
    /// The attempt the claim started (the job's `attempts` after the claim).
    pub attempt: u32,
}

/// How an attempt of a job ended.
#[derive(Debug, Clone, PartialEq)]
pub enum JobOutcome {
    /// The analysis was computed (succeeded or failed on the data) and is to be stored
    /// with the job; the job ends `succeeded` or `failed` after the analysis's status.
    Analysis(Box<Analysis>),
    /// The attempt failed for a reason that may pass (database, a panic, a stopped
    /// worker): the job is queued again for `retry_at`, or fails when it has used all
    /// its attempts.
    Error {
        /// What went wrong.
        error: String,
        /// When it may be claimed again.
        retry_at: OffsetDateTime,
    },
}

/// Which jobs of a structure to list: newest first by `(created_at, id)`.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct JobQuery {
    /// Only jobs with this status.
    pub status: Option<JobStatus>,
    /// Only jobs after this `(created_at, id)` in the listing order.
    pub after: Option<(OffsetDateTime, Uuid)>,
    /// At most this many.
    pub limit: usize,
}
