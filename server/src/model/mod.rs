//! The service's resources as they cross the API and the storage trait: structures,
//! monitoring points, API keys, sensor batches and their readings, analyses, and (in
//! submodules) jobs, alerts and webhooks. Lengths are stored in metres; the API converts at
//! the edge with the structure's declared length unit.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use utoipa::ToSchema;
use uuid::Uuid;

use crate::units::LengthUnit;

pub mod alerts;
pub mod jobs;
pub mod webhooks;

pub use self::alerts::{
    AlertEvent, AlertEventKind, AlertEventQuery, AlertRuleRecord, AlertState, Evaluation,
    NewAlertEvent,
};
pub use self::jobs::{
    Job, JobAttemptError, JobOrigin, JobOutcome, JobQuery, JobStatus, Lease, NewJob,
};
pub use self::webhooks::{
    Delivery, DeliveryAttempt, DeliveryNext, DeliveryQuery, DeliveryStatus, DispatchBatch, Event,
    EventType, NewEvent, Subscription,
};

/// Longest asset or point ID, characters.
pub const MAX_ID_LEN: usize = 64;

/// Why an ID is not acceptable, or `None` when it is: 1–64 characters of
/// `A-Za-z0-9._-` (a structure's ID is the client's own asset ID; point IDs likewise).
pub fn id_problem(id: &str) -> Option<String> {
    if id.is_empty() {
        return Some("an ID must not be empty".into());
    }
    if id.len() > MAX_ID_LEN {
        return Some(format!(
            "an ID has at most {MAX_ID_LEN} characters, this one has {}",
            id.chars().count()
        ));
    }
    if let Some(c) = id
        .chars()
        .find(|c| !(c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-')))
    {
        return Some(format!(
            "an ID holds only A-Z, a-z, 0-9, '.', '_' and '-', not {c:?}"
        ));
    }
    None
}

/// The coordinate frame of a structure's reference coordinates and displacements.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum Frame {
    /// A local Cartesian frame of the structure: `x`, `y` (and `z`) in its length unit,
    /// right-handed; angles are counter-clockwise from +x.
    Local,
    /// East-North-Up about a WGS84 origin: `x` = east, `y` = north, `z` = up, in the
    /// structure's length unit. Angles are counter-clockwise from east; results also
    /// give the azimuth clockwise from north. GeoJSON export needs this frame.
    Enu {
        /// The frame's origin on the WGS84 ellipsoid.
        origin: WgsOrigin,
    },
}

/// A point on the WGS84 ellipsoid.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct WgsOrigin {
    /// Geodetic latitude, degrees, −90 to 90, north positive.
    pub lat_deg: f64,
    /// Geodetic longitude, degrees, east positive.
    pub lon_deg: f64,
    /// Ellipsoidal height, metres.
    #[serde(default)]
    pub h_m: f64,
}

/// Elastic constants of a structure's material, used to add stresses to results.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct Material {
    /// A name for people, e.g. "concrete C30/37" (free text).
    #[serde(default)]
    pub name: Option<String>,
    /// Young's modulus E, gigapascals (GPa), positive.
    pub youngs_modulus_gpa: f64,
    /// Poisson's ratio ν, dimensionless, −1 < ν < 0.5.
    pub poisson_ratio: f64,
}

/// A monitored structure, keyed by the client's own asset ID.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct Structure {
    /// The client's asset ID: 1–64 characters of `A-Za-z0-9._-`.
    pub id: String,
    /// Name for people.
    pub name: String,
    /// 2 (plane network: x, y) or 3 (spatial network: x, y, z).
    pub dimension: u8,
    /// Frame of the reference coordinates and displacements.
    pub frame: Frame,
    /// Unit of the structure's coordinates, displacements and standard deviations in
    /// the API (`m` or `mm`). Requests may override it per request where noted.
    pub length_unit: LengthUnit,
    /// Elastic constants, when stresses are wanted.
    pub material: Option<Material>,
    /// Free-form JSON object for the asset-management system's own keys (at most
    /// 16 KiB when serialised). Kinema stores and returns it unchanged.
    #[schema(value_type = Object)]
    pub metadata: serde_json::Value,
    /// When the structure was first stored, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// When the structure was last changed, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub updated_at: OffsetDateTime,
}

/// A monitoring point as stored: reference coordinates in metres.
#[derive(Debug, Clone, PartialEq)]
pub struct StoredPoint {
    /// Point ID within the structure.
    pub id: String,
    /// Reference coordinates, metres (2 or 3 values, as the structure's dimension).
    pub x: Vec<f64>,
    /// A-priori standard deviations of the displacement components, metres; `None`
    /// when the point states no precision.
    pub sigma: Option<Vec<f64>>,
}

/// Access level of an API key. Levels include the ones below them:
/// `admin` ⊇ `write` ⊇ `read`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Scope {
    /// Read structures, points, readings and analyses; use the compute endpoints.
    Read,
    /// Also create and change structures, points, sensor batches and analyses.
    Write,
    /// Also manage API keys.
    Admin,
}

impl Scope {
    /// `read`, `write` or `admin`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Read => "read",
            Self::Write => "write",
            Self::Admin => "admin",
        }
    }

    /// Parse `read`, `write` or `admin`.
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "read" => Some(Self::Read),
            "write" => Some(Self::Write),
            "admin" => Some(Self::Admin),
            _ => None,
        }
    }
}

/// An API key as stored: never the token itself, only its SHA-256.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct ApiKey {
    /// The key's ID (not secret).
    pub id: Uuid,
    /// A label for people, e.g. the logger or system that uses the key.
    pub label: String,
    /// The first characters of the token, to recognise it (not enough to use it).
    pub prefix: String,
    /// Access level.
    pub scope: Scope,
    /// Structures the key may see; `null` for all. Others look as if they did not exist.
    pub structures: Option<Vec<String>>,
    /// When the key was created, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// When the key was revoked, RFC 3339 UTC; `null` while it is valid.
    #[serde(with = "time::serde::rfc3339::option")]
    pub revoked_at: Option<OffsetDateTime>,
    /// SHA-256 of the token, lowercase hex (kept out of every response).
    #[serde(skip)]
    pub token_sha256: String,
}

impl ApiKey {
    /// Whether this key may see structure `id`.
    pub fn sees(&self, id: &str) -> bool {
        self.structures
            .as_ref()
            .is_none_or(|list| list.iter().any(|s| s == id))
    }
}

/// One stored reading: displacement of a point at an epoch, metres.
#[derive(Debug, Clone, PartialEq)]
pub struct Reading {
    /// Point ID within the structure.
    pub point_id: String,
    /// When the point was measured, UTC, microsecond resolution.
    pub epoch: OffsetDateTime,
    /// Displacement from the point's reference coordinates, metres (2 or 3 values, as
    /// the structure's dimension).
    pub u: Vec<f64>,
    /// A-priori standard deviations of the displacement components, metres; `None`
    /// when the reading states none (then the point's own sigma applies, if any).
    pub sigma: Option<Vec<f64>>,
}

/// An epoch with readings, and how many.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct EpochSummary {
    /// The epoch, UTC.
    pub epoch: OffsetDateTime,
    /// Readings stored at this epoch (one per point at most).
    pub readings: u64,
}

/// A stored sensor batch: what one `POST /v1/structures/{id}/batches` wrote.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct Batch {
    /// The batch's ID (UUID v4, made by the service).
    pub id: Uuid,
    /// The structure's asset ID.
    pub structure_id: String,
    /// When the service stored the batch, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub received_at: OffsetDateTime,
    /// Readings in the batch.
    pub readings: u64,
    /// Distinct monitoring points with readings in the batch.
    pub points: u64,
    /// Distinct epochs in the batch.
    pub epochs: u64,
    /// Earliest epoch of the batch, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub first_epoch: OffsetDateTime,
    /// Latest epoch of the batch, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub last_epoch: OffsetDateTime,
}

/// What an `Idempotency-Key` is bound to: the first request's body hash and the
/// response it got.
#[derive(Debug, Clone, PartialEq)]
pub struct IdempotentBatch {
    /// The batch the first request stored.
    pub batch: Batch,
    /// SHA-256 of the first request's body, lowercase hex.
    pub body_sha256: String,
    /// The response body the first request got (JSON), returned again on replay.
    pub response: serde_json::Value,
}

/// What an analysis computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum AnalysisKind {
    /// The strain field at one epoch, relative to the reference state or to a
    /// baseline epoch.
    Epoch,
    /// The strain of fixed regions followed through the epochs of a time range:
    /// cumulative strain from a baseline epoch, increments and rates.
    Series,
}

impl AnalysisKind {
    /// `epoch` or `series`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Epoch => "epoch",
            Self::Series => "series",
        }
    }

    /// Parse [`AnalysisKind::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "epoch" => Some(Self::Epoch),
            "series" => Some(Self::Series),
            _ => None,
        }
    }
}

/// How an analysis ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum AnalysisStatus {
    /// The estimator ran; `result` holds the document.
    Succeeded,
    /// The estimator could not compute on the data; `error` says why.
    Failed,
}

impl AnalysisStatus {
    /// `succeeded` or `failed`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Succeeded => "succeeded",
            Self::Failed => "failed",
        }
    }

    /// Parse [`AnalysisStatus::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "succeeded" => Some(Self::Succeeded),
            "failed" => Some(Self::Failed),
            _ => None,
        }
    }
}

/// A stored analysis of a structure.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Analysis {
    /// The analysis's ID.
    pub id: Uuid,
    /// The structure's asset ID.
    pub structure_id: String,
    /// What was computed.
    pub kind: AnalysisKind,
    /// How it ended.
    pub status: AnalysisStatus,
    /// Estimator name (`delaunay`, `elements`, `groups`, `neighbourhood`, `network`).
    pub method: String,
    /// The epoch analysed (kind `epoch`), RFC 3339 UTC; `null` for a series.
    #[serde(with = "time::serde::rfc3339::option")]
    pub epoch: Option<OffsetDateTime>,
    /// The baseline epoch, RFC 3339 UTC: for an epoch analysis the epoch whose
    /// readings were subtracted (`null` when the displacements are from the reference
    /// coordinates); for a series the epoch the cumulative strains are measured from.
    #[serde(with = "time::serde::rfc3339::option")]
    pub baseline_epoch: Option<OffsetDateTime>,
    /// First epoch of a series (kind `series`), RFC 3339 UTC; `null` for an epoch
    /// analysis.
    #[serde(with = "time::serde::rfc3339::option")]
    pub series_first: Option<OffsetDateTime>,
    /// Last epoch of a series (kind `series`), RFC 3339 UTC; `null` for an epoch
    /// analysis.
    #[serde(with = "time::serde::rfc3339::option")]
    pub series_last: Option<OffsetDateTime>,
    /// The request's method, options and units, as given.
    #[schema(value_type = Object)]
    pub parameters: serde_json::Value,
    /// What went in: point counts, the epochs used, reading counts and the points left
    /// out (with why).
    #[schema(value_type = Object)]
    pub inputs: serde_json::Value,
    /// Version of Kinema that computed it.
    pub software_version: String,
    /// The result document (as `POST /v1/compute/strain-field` returns it) when
    /// succeeded; left out of lists and of failed analyses.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schema(value_type = Option<Object>)]
    pub result: Option<serde_json::Value>,
    /// Why the estimator failed; `null` when it succeeded.
    pub error: Option<String>,
    /// When the analysis was run, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// Time the computation took, milliseconds.
    pub duration_ms: u64,
}

/// Which analyses of a structure to list: newest first by `(created_at, id)`.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct AnalysisQuery {
    /// Only analyses created at or after this time.
    pub from: Option<OffsetDateTime>,
    /// Only analyses created before this time.
    pub to: Option<OffsetDateTime>,
    /// Only analyses with this status.
    pub status: Option<AnalysisStatus>,
    /// Only analyses after this `(created_at, id)` in the listing order (the last
    /// item of the previous page).
    pub after: Option<(OffsetDateTime, Uuid)>,
    /// Most analyses returned.
    pub limit: usize,
}

/// The current time, truncated to whole microseconds (what both databases keep).
pub fn now_utc() -> OffsetDateTime {
    truncate_to_micros(OffsetDateTime::now_utc())
}

/// `t` as RFC 3339 text (`2026-11-30T06:00:00Z`; empty in the impossible case that it
/// cannot be formatted), as the API writes times.
pub fn rfc3339(t: OffsetDateTime) -> String {
    t.format(&time::format_description::well_known::Rfc3339)
        .unwrap_or_default()
}

/// `t` without its sub-microsecond part.
pub fn truncate_to_micros(t: OffsetDateTime) -> OffsetDateTime {
    let micros = t.nanosecond() / 1000 * 1000;
    t.replace_nanosecond(micros).unwrap_or(t)
}

/// `t` as microseconds since 1970-01-01T00:00:00Z (how SQLite keeps times).
pub fn to_unix_micros(t: OffsetDateTime) -> i64 {
    (t.unix_timestamp_nanos() / 1000) as i64
}

/// Inverse of [`to_unix_micros`]; `None` outside the representable range.
pub fn from_unix_micros(us: i64) -> Option<OffsetDateTime> {
    OffsetDateTime::from_unix_timestamp_nanos(i128::from(us) * 1000).ok()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_follow_the_documented_alphabet() {
        assert!(id_problem("ALRW-01").is_none());
        assert!(id_problem("a.b_c-9").is_none());
        assert!(id_problem("").is_some());
        assert!(id_problem("has space").is_some());
        assert!(id_problem("é").is_some());
        assert!(id_problem(&"x".repeat(64)).is_none());
        assert!(id_problem(&"x".repeat(65)).is_some());
    }

    #[test]
    fn scopes_are_ordered_read_write_admin() {
        assert!(Scope::Read < Scope::Write && Scope::Write < Scope::Admin);
        for s in [Scope::Read, Scope::Write, Scope::Admin] {
            assert_eq!(Scope::parse(s.as_str()), Some(s));
        }
    }

    #[test]
    fn micros_round_trip() {
        let t = now_utc();
        assert_eq!(from_unix_micros(to_unix_micros(t)), Some(t));
    }
}
