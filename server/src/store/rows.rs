//! Row shapes shared by both databases. Each is generic over how the database keeps
//! a time (`OffsetDateTime` in PostgreSQL, integer microseconds in SQLite) and over
//! the UUID column; the conversion into the service's types is written once here.

use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use super::StoreError;
use crate::model::{
    Analysis, AnalysisKind, AnalysisStatus, ApiKey, Batch, Frame, IdempotentBatch, Material,
    Reading, Scope, StoredPoint, Structure, from_unix_micros,
};
use crate::units::LengthUnit;

/// A count, size or limit as an SQL `BIGINT` (saturating: nothing the service stores
/// comes near 2^63).
pub fn big(n: impl TryInto<i64>) -> i64 {
    n.try_into().unwrap_or(i64::MAX)
}

/// A time as one database keeps it.
pub trait DbTime: Sized {
    /// Into a UTC time.
    fn into_time(self) -> Result<OffsetDateTime, StoreError>;
    /// From a UTC time (already truncated to microseconds).
    fn from_time(t: OffsetDateTime) -> Self;
}

impl DbTime for OffsetDateTime {
    fn into_time(self) -> Result<OffsetDateTime, StoreError> {
        Ok(self)
    }
    fn from_time(t: OffsetDateTime) -> Self {
        t
    }
}

impl DbTime for i64 {
    fn into_time(self) -> Result<OffsetDateTime, StoreError> {
        from_unix_micros(self).ok_or_else(|| StoreError::corrupt(format!("time {self} µs")))
    }
    fn from_time(t: OffsetDateTime) -> Self {
        crate::model::to_unix_micros(t)
    }
}

/// An optional time.
pub fn opt_time<T: DbTime>(t: Option<T>) -> Result<Option<OffsetDateTime>, StoreError> {
    t.map(DbTime::into_time).transpose()
}

/// Columns of `structures` (without the internal key).
#[derive(Debug, sqlx::FromRow)]
pub struct StructureRow<T> {
    pub id: String,
    pub name: String,
    pub dimension: i16,
    pub frame: Json<Frame>,
    pub length_unit: String,
    pub material: Option<Json<Material>>,
    pub metadata: Json<serde_json::Value>,
    pub created_at: T,
    pub updated_at: T,
}

/// The column list of [`StructureRow`], for `SELECT` (a literal, for `concat!`).
macro_rules! structure_columns {
    () => {
        "s.id, s.name, s.dimension, s.frame, s.length_unit, s.material, s.metadata, s.created_at, s.updated_at"
    };
}
pub(crate) use structure_columns;

impl<T: DbTime> StructureRow<T> {
    /// Into the service's type.
    pub fn into_structure(self) -> Result<Structure, StoreError> {
        let length_unit = LengthUnit::from_label(&self.length_unit)
            .ok_or_else(|| StoreError::corrupt(format!("length unit {:?}", self.length_unit)))?;
        let dimension = u8::try_from(self.dimension)
            .ok()
            .filter(|d| matches!(d, 2 | 3))
            .ok_or_else(|| StoreError::corrupt(format!("dimension {}", self.dimension)))?;
        Ok(Structure {
            id: self.id,
            name: self.name,
            dimension,
            frame: self.frame.0,
            length_unit,
            material: self.material.map(|m| m.0),
            metadata: self.metadata.0,
            created_at: self.created_at.into_time()?,
            updated_at: self.updated_at.into_time()?,
        })
    }
}

/// Columns of `points` (without the keys).
#[derive(Debug, sqlx::FromRow)]
pub struct PointRow {
    pub id: String,
    pub x: f64,
    pub y: f64,
    pub z: Option<f64>,
    pub sigma_x: Option<f64>,
    pub sigma_y: Option<f64>,
    pub sigma_z: Option<f64>,
}

/// The column list of [`PointRow`], for `SELECT` (a literal, for `concat!`).
macro_rules! point_columns {
    () => {
        "p.id, p.x, p.y, p.z, p.sigma_x, p.sigma_y, p.sigma_z"
    };
}
pub(crate) use point_columns;

impl PointRow {
    /// Into the service's type; `dimension` decides whether `z` is read.
    pub fn into_point(self, dimension: u8) -> Result<StoredPoint, StoreError> {
        let three = dimension == 3;
        let mut x = vec![self.x, self.y];
        if three {
            x.push(
                self.z
                    .ok_or_else(|| StoreError::corrupt(format!("point {} has no z", self.id)))?,
            );
        }
        let sigma = match (self.sigma_x, self.sigma_y, self.sigma_z) {
            (Some(a), Some(b), c) if three => Some(vec![
                a,
                b,
                c.ok_or_else(|| StoreError::corrupt(format!("point {} has no sigma_z", self.id)))?,
            ]),
            (Some(a), Some(b), _) => Some(vec![a, b]),
            _ => None,
        };
        Ok(StoredPoint {
            id: self.id,
            x,
            sigma,
        })
    }
}

/// Refuse a point that does not fit a structure of `dimension`: wrong number of
/// coordinates or standard deviations, or a value that is not finite (NaN would be
/// stored by PostgreSQL and turned into NULL by SQLite).
pub fn check_point(p: &StoredPoint, dimension: i16) -> Result<(), StoreError> {
    let dim = usize::try_from(dimension).unwrap_or(0);
    let sizes_ok = p.x.len() == dim && p.sigma.as_ref().is_none_or(|s| s.len() == dim);
    let finite =
        p.x.iter()
            .chain(p.sigma.iter().flatten())
            .all(|v| v.is_finite());
    if sizes_ok && finite {
        Ok(())
    } else {
        Err(StoreError::Invalid(format!(
            "point {} does not fit a {dim}D structure (coordinates {:?}, sigma {:?})",
            p.id, p.x, p.sigma
        )))
    }
}

/// The coordinate and precision columns of a point to bind: `(x, y, z, sx, sy, sz)`.
pub fn point_values(
    p: &StoredPoint,
) -> (f64, f64, Option<f64>, Option<f64>, Option<f64>, Option<f64>) {
    let at = |v: &[f64], i: usize| v.get(i).copied();
    let s = p.sigma.as_deref();
    (
        p.x.first().copied().unwrap_or(f64::NAN),
        p.x.get(1).copied().unwrap_or(f64::NAN),
        at(&p.x, 2),
        s.and_then(|s| at(s, 0)),
        s.and_then(|s| at(s, 1)),
        s.and_then(|s| at(s, 2)),
    )
}

/// Columns of `api_keys`.
#[derive(Debug, sqlx::FromRow)]
pub struct KeyRow<T> {
    pub id: Uuid,
    pub label: String,
    pub prefix: String,
    pub token_sha256: String,
    pub scope: String,
    pub structures: Option<Json<Vec<String>>>,
    pub created_at: T,
    pub revoked_at: Option<T>,
}

/// The column list of [`KeyRow`], for `SELECT` (a literal, for `concat!`).
macro_rules! key_columns {
    () => {
        "id, label, prefix, token_sha256, scope, structures, created_at, revoked_at"
    };
}
pub(crate) use key_columns;

impl<T: DbTime> KeyRow<T> {
    /// Into the service's type.
    pub fn into_key(self) -> Result<ApiKey, StoreError> {
        let scope = Scope::parse(&self.scope)
            .ok_or_else(|| StoreError::corrupt(format!("scope {:?}", self.scope)))?;
        Ok(ApiKey {
            id: self.id,
            label: self.label,
            prefix: self.prefix,
            scope,
            structures: self.structures.map(|s| s.0),
            created_at: self.created_at.into_time()?,
            revoked_at: opt_time(self.revoked_at)?,
            token_sha256: self.token_sha256,
        })
    }
}

/// Columns of `batches` joined with the structure's ID.
#[derive(Debug, sqlx::FromRow)]
pub struct BatchRow<T> {
    pub id: Uuid,
    pub structure_id: String,
    pub received_at: T,
    pub readings: i64,
    pub points: i64,
    pub epochs: i64,
    pub first_epoch: T,
    pub last_epoch: T,
}

/// The column list of [`BatchRow`] (`b` = batches, `s` = structures), for `SELECT`.
macro_rules! batch_columns {
    () => {
        "b.id, s.id AS structure_id, b.received_at, b.readings, b.points, b.epochs, \
         b.first_epoch, b.last_epoch"
    };
}
pub(crate) use batch_columns;

impl<T: DbTime> BatchRow<T> {
    /// Into the service's type.
    pub fn into_batch(self) -> Result<Batch, StoreError> {
        let count = |v: i64| u64::try_from(v).map_err(StoreError::corrupt);
        Ok(Batch {
            id: self.id,
            structure_id: self.structure_id,
            received_at: self.received_at.into_time()?,
            readings: count(self.readings)?,
            points: count(self.points)?,
            epochs: count(self.epochs)?,
            first_epoch: self.first_epoch.into_time()?,
            last_epoch: self.last_epoch.into_time()?,
        })
    }
}

/// Columns of `analyses` (without the structure key; the structure ID joined in).
#[derive(Debug, sqlx::FromRow)]
pub struct AnalysisRow<T> {
    pub id: Uuid,
    pub structure_id: String,
    pub kind: String,
    pub status: String,
    pub method: String,
    pub epoch: Option<T>,
    pub baseline_epoch: Option<T>,
    pub series_first: Option<T>,
    pub series_last: Option<T>,
    pub parameters: Json<serde_json::Value>,
    pub inputs: Json<serde_json::Value>,
    pub software_version: String,
    pub result: Option<Json<serde_json::Value>>,
    pub error: Option<String>,
    pub created_at: T,
    pub duration_ms: i64,
}

/// The column list of [`AnalysisRow`] with the result document, for `SELECT` from
/// `analyses a JOIN structures s` (a literal, for `concat!`).
macro_rules! analysis_columns {
    () => {
        "a.id, s.id AS structure_id, a.kind, a.status, a.method, a.epoch, a.baseline_epoch, \
         a.series_first, a.series_last, a.parameters, a.inputs, a.software_version, a.result, \
         a.error, a.created_at, a.duration_ms"
    };
}
pub(crate) use analysis_columns;

/// As [`analysis_columns`] but with a NULL result (lists leave the document out).
macro_rules! analysis_list_columns {
    () => {
        "a.id, s.id AS structure_id, a.kind, a.status, a.method, a.epoch, a.baseline_epoch, \
         a.series_first, a.series_last, a.parameters, a.inputs, a.software_version, \
         CAST(NULL AS JSONB) AS result, a.error, a.created_at, a.duration_ms"
    };
}
pub(crate) use analysis_list_columns;

impl<T: DbTime> AnalysisRow<T> {
    /// Into the service's type.
    pub fn into_analysis(self) -> Result<Analysis, StoreError> {
        Ok(Analysis {
            id: self.id,
            structure_id: self.structure_id,
            kind: AnalysisKind::parse(&self.kind)
                .ok_or_else(|| StoreError::corrupt(format!("analysis kind {:?}", self.kind)))?,
            status: AnalysisStatus::parse(&self.status)
                .ok_or_else(|| StoreError::corrupt(format!("analysis status {:?}", self.status)))?,
            method: self.method,
            epoch: opt_time(self.epoch)?,
            baseline_epoch: opt_time(self.baseline_epoch)?,
            series_first: opt_time(self.series_first)?,
            series_last: opt_time(self.series_last)?,
            parameters: self.parameters.0,
            inputs: self.inputs.0,
            software_version: self.software_version,
            result: self.result.map(|r| r.0),
            error: self.error,
            created_at: self.created_at.into_time()?,
            duration_ms: u64::try_from(self.duration_ms)
                .map_err(|_| StoreError::corrupt(format!("duration {}", self.duration_ms)))?,
        })
    }
}

/// A batch with its idempotency record.
#[derive(Debug, sqlx::FromRow)]
pub struct IdempotentRow<T> {
    #[sqlx(flatten)]
    pub batch: BatchRow<T>,
    pub body_sha256: String,
    pub response: Json<serde_json::Value>,
}

impl<T: DbTime> IdempotentRow<T> {
    /// Into the service's type.
    pub fn into_idempotent(self) -> Result<IdempotentBatch, StoreError> {
        Ok(IdempotentBatch {
            batch: self.batch.into_batch()?,
            body_sha256: self.body_sha256,
            response: self.response.0,
        })
    }
}

/// Columns of `readings` joined with the point's ID.
#[derive(Debug, sqlx::FromRow)]
pub struct ReadingRow<T> {
    pub point_id: String,
    pub epoch: T,
    pub ux: f64,
    pub uy: f64,
    pub uz: Option<f64>,
    pub sigma_x: Option<f64>,
    pub sigma_y: Option<f64>,
    pub sigma_z: Option<f64>,
}

/// The column list of [`ReadingRow`] (`r` = readings, `p` = points), for `SELECT`.
macro_rules! reading_columns {
    () => {
        "p.id AS point_id, r.epoch, r.ux, r.uy, r.uz, r.sigma_x, r.sigma_y, r.sigma_z"
    };
}
pub(crate) use reading_columns;

impl<T: DbTime> ReadingRow<T> {
    /// Into the service's type; `dimension` decides whether `uz` and `sigma_z` are read.
    pub fn into_reading(self, dimension: u8) -> Result<Reading, StoreError> {
        let three = dimension == 3;
        let missing = |what: &str| {
            StoreError::corrupt(format!("a reading of {} has no {what}", self.point_id))
        };
        let mut u = vec![self.ux, self.uy];
        if three {
            u.push(self.uz.ok_or_else(|| missing("uz"))?);
        }
        let sigma = match (self.sigma_x, self.sigma_y) {
            (Some(a), Some(b)) if three => {
                Some(vec![a, b, self.sigma_z.ok_or_else(|| missing("sigma_z"))?])
            }
            (Some(a), Some(b)) => Some(vec![a, b]),
            _ => None,
        };
        Ok(Reading {
            epoch: self.epoch.into_time()?,
            point_id: self.point_id,
            u,
            sigma,
        })
    }
}

/// What a batch writer counts while readings go in: distinct points and epochs, and
/// the first and last epoch (microseconds since the Unix epoch).
#[derive(Debug, Default)]
pub struct BatchTally {
    pub readings: u64,
    pub points: std::collections::HashSet<i64>,
    pub epochs: std::collections::HashSet<i64>,
    pub first: i64,
    pub last: i64,
}

impl BatchTally {
    /// Count one reading.
    pub fn add(&mut self, point_key: i64, epoch_us: i64) {
        if self.readings == 0 {
            self.first = epoch_us;
            self.last = epoch_us;
        } else {
            self.first = self.first.min(epoch_us);
            self.last = self.last.max(epoch_us);
        }
        self.readings += 1;
        self.points.insert(point_key);
        self.epochs.insert(epoch_us);
    }

    /// The batch summary, or [`StoreError::Invalid`] when nothing was written.
    pub fn summary(
        &self,
        id: Uuid,
        structure_id: &str,
        received_at: OffsetDateTime,
    ) -> Result<Batch, StoreError> {
        if self.readings == 0 {
            return Err(StoreError::Invalid(
                "a batch needs at least one reading".into(),
            ));
        }
        let t = |us: i64| {
            from_unix_micros(us).ok_or_else(|| StoreError::Invalid(format!("epoch {us} µs")))
        };
        Ok(Batch {
            id,
            structure_id: structure_id.to_owned(),
            received_at,
            readings: self.readings,
            points: self.points.len() as u64,
            epochs: self.epochs.len() as u64,
            first_epoch: t(self.first)?,
            last_epoch: t(self.last)?,
        })
    }
}

/// The conflict for a reading of `point` at `epoch` that is stored already.
pub fn duplicate(point: &str, epoch: OffsetDateTime) -> StoreError {
    let t = crate::model::rfc3339(epoch);
    StoreError::Conflict(format!(
        "a reading of point {point} at epoch {t} is already stored; readings are unique per point and epoch"
    ))
}
/// Refuse an analysis whose status and result/error do not agree.
pub fn check_analysis(a: &Analysis) -> Result<(), StoreError> {
    let ok = match a.status {
        AnalysisStatus::Succeeded => a.result.is_some() && a.error.is_none(),
        AnalysisStatus::Failed => a.result.is_none() && a.error.is_some(),
    };
    if ok {
        Ok(())
    } else {
        Err(StoreError::Invalid(format!(
            "analysis {}: a succeeded analysis has a result and no error, a failed one an error and no result",
            a.id
        )))
    }
}
