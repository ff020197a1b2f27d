//! `/v1/structures/{id}/batches`, `/epochs` and `/readings`: sensor batches pushed by
//! data loggers or survey exports, streamed into storage all or nothing, and the
//! readings they stored.

use std::io;

use axum::body::Body;
use axum::extract::{Path, State};
use axum::http::{HeaderMap, HeaderName, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use futures_util::StreamExt;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use time::OffsetDateTime;
use tokio::sync::mpsc;
use tokio_util::io::{StreamReader, SyncIoBridge};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;
use uuid::Uuid;

use super::AppState;
use super::auth::Caller;
use super::extract::{ApiQuery, is_json};
use super::page::{Page, PageQuery};
use super::problem::{ApiError, FieldError, Problem};
use crate::ingest::body::BodyReader;
use crate::ingest::validate::parse_epoch;
use crate::ingest::{self, Context, IngestError, Sink};
use crate::jobs::request::{AutoAnalysis, AutoBaseline, MAX_AUTO_JOBS_PER_BATCH};
use crate::keys::hex;
use crate::model::{
    Batch, IdempotentBatch, JobOrigin, NewJob, Scope, from_unix_micros, now_utc, to_unix_micros,
};
use crate::store::BatchMeta;
use crate::units::LengthUnit;

/// Header naming a replayed response (`true`).
pub const REPLAYED: &str = "idempotent-replayed";

/// Chunks in flight between the parser and the writer.
const CHANNEL_CHUNKS: usize = 4;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(post_batch, list_batches))
        .routes(routes!(get_batch))
        .routes(routes!(list_epochs))
        .routes(routes!(readings_at))
}

/// One reading of a JSON batch body.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ReadingInput {
    /// Point ID of a monitoring point of the structure.
    pub point_id: String,
    /// When the point was measured: RFC 3339 with any offset (stored in UTC), at most
    /// microsecond digits.
    pub epoch: String,
    /// Displacement from the point's reference coordinates, in the batch's length
    /// unit: `[dx, dy]` or `[dx, dy, dz]` as the structure's dimension.
    pub u: Vec<f64>,
    /// A-priori standard deviations of the displacement components, in the batch's
    /// length unit, positive; absent when the point's own precision applies.
    #[serde(default)]
    pub sigma: Option<Vec<f64>>,
}

/// A JSON batch body (streamed; put `length_unit` before `readings`).
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BatchInput {
    /// Unit of `u` and `sigma`: `m` or `mm`; default `?length_unit=`, else the
    /// structure's unit. Give it before `readings`.
    #[serde(default)]
    pub length_unit: Option<LengthUnit>,
    /// The readings, at least one; a point has at most one reading per epoch.
    pub readings: Vec<ReadingInput>,
}

/// Query of `POST /v1/structures/{id}/batches`.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct BatchQuery {
    /// Unit of the values, `m` or `mm` (default: the structure's unit).
    pub length_unit: Option<String>,
}

/// The answer to a request whose `Idempotency-Key` already has a batch: the first
/// response again when the request is the same (body, media type, unit), else 422.
async fn replay(
    id: &str,
    key: &str,
    prev: IdempotentBatch,
    media: Media,
    unit: Option<LengthUnit>,
    body: Body,
    limit: u64,
) -> Result<Response, ApiError> {
    let sha = hash_body(body, limit).await?;
    if request_fingerprint(media, unit, &sha) == prev.body_sha256 {
        return Ok(created(id, prev.batch.id, &prev.response, true));
    }
    Err(ApiError::IdempotencyMismatch(format!(
        "the Idempotency-Key {key:?} was used for another request (another body, media type \
         or length_unit; batch {}); use a new key for new readings",
        prev.batch.id
    )))
}

/// What an `Idempotency-Key` is bound to: SHA-256 (hex) over the media type, the
/// `?length_unit=` override and the SHA-256 of the body, so that the same body sent with
/// another unit or media type is a different request (kept in the `body_sha256` column).
fn request_fingerprint(media: Media, unit: Option<LengthUnit>, body_sha256: &str) -> String {
    let text = format!(
        "kinema-batch-v1\n{}\n{}\n{body_sha256}",
        media.label(),
        unit.map_or("", LengthUnit::label)
    );
    crate::keys::hex(&Sha256::digest(text.as_bytes()))
}

/// The media type of a batch body.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Media {
    Json,
    Csv,
}

impl Media {
    fn of(headers: &HeaderMap) -> Result<Self, ApiError> {
        let ct = headers
            .get(header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
            .to_owned();
        let essence = ct
            .split(';')
            .next()
            .unwrap_or("")
            .trim()
            .to_ascii_lowercase();
        if is_json(&ct) {
            Ok(Self::Json)
        } else if essence == "text/csv" {
            Ok(Self::Csv)
        } else {
            Err(ApiError::UnsupportedMediaType {
                got: ct,
                expected: "application/json or text/csv",
            })
        }
    }

    fn label(self) -> &'static str {
        match self {
            Self::Json => "application/json",
            Self::Csv => "text/csv",
        }
    }
}

/// The `Idempotency-Key` header: 1–255 visible ASCII characters.
fn idempotency_key(headers: &HeaderMap) -> Result<Option<String>, ApiError> {
    let Some(v) = headers.get("idempotency-key") else {
        return Ok(None);
    };
    let bad = || ApiError::Malformed {
        detail: "the Idempotency-Key header must be 1 to 255 visible ASCII characters".into(),
    };
    let s = v.to_str().map_err(|_| bad())?;
    if s.is_empty() || s.len() > 255 || !s.bytes().all(|b| b.is_ascii_graphic()) {
        return Err(bad());
    }
    Ok(Some(s.to_owned()))
}

/// A length unit in the query.
fn query_unit(q: &BatchQuery) -> Result<Option<LengthUnit>, ApiError> {
    q.length_unit
        .as_deref()
        .map(|u| {
            LengthUnit::from_label(u).ok_or_else(|| {
                ApiError::field("/length_unit", format!("length_unit is m or mm, not {u:?}"))
            })
        })
        .transpose()
}

impl From<IngestError> for ApiError {
    fn from(e: IngestError) -> Self {
        match e {
            IngestError::Malformed(detail) | IngestError::Read(detail) => {
                ApiError::Malformed { detail }
            }
            IngestError::Invalid(errors) => ApiError::fields(errors),
            IngestError::TooLarge(m) => ApiError::TooLarge(m),
            IngestError::Stopped => ApiError::Internal("the batch writer stopped".into()),
        }
    }
}

/// The body as a blocking reader, counted and hashed.
fn body_reader(
    body: Body,
    limit: u64,
) -> BodyReader<SyncIoBridge<impl tokio::io::AsyncRead + Unpin>> {
    let stream = body.into_data_stream().map(|r| r.map_err(io::Error::other));
    BodyReader::new(SyncIoBridge::new(StreamReader::new(stream)), limit)
}

/// SHA-256 of the whole body (lowercase hex), counted against `limit`.
async fn hash_body(body: Body, limit: u64) -> Result<String, ApiError> {
    let mut stream = body.into_data_stream();
    let mut hasher = Sha256::new();
    let mut n = 0u64;
    while let Some(chunk) = stream.next().await {
        let chunk = chunk.map_err(|e| ApiError::Malformed {
            detail: format!("the request body could not be read: {e}"),
        })?;
        n += chunk.len() as u64;
        if n > limit {
            return Err(ApiError::TooLarge(
                "the batch body is over the size limit (KINEMA_MAX_BATCH_BYTES); split it".into(),
            ));
        }
        hasher.update(&chunk);
    }
    Ok(hex(&hasher.finalize()))
}

/// The 201 response of a stored (or replayed) batch.
fn created(structure: &str, id: Uuid, body: &serde_json::Value, replayed: bool) -> Response {
    let mut resp = (StatusCode::CREATED, axum::Json(body)).into_response();
    if let Ok(v) = HeaderValue::from_str(&format!("/v1/structures/{structure}/batches/{id}")) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    if replayed {
        resp.headers_mut().insert(
            HeaderName::from_static(REPLAYED),
            HeaderValue::from_static("true"),
        );
    }
    resp
}

/// The structure's automatic analysis, if it has one.
///
/// A stored setting that no longer parses queues nothing (and is logged): a monitoring
/// setting never stops the data from being stored.
async fn auto_analysis(state: &AppState, id: &str) -> Result<Option<AutoAnalysis>, ApiError> {
    let Some(v) = state.store.get_auto_analysis(id).await? else {
        return Ok(None);
    };
    match serde_json::from_value(v) {
        Ok(a) => Ok(Some(a)),
        Err(e) => {
            tracing::error!(
                structure = id,
                "the stored automatic analysis does not parse; no job queued: {e}"
            );
            Ok(None)
        }
    }
}

/// The jobs the automatic analysis queues for a batch with `epochs`.
async fn auto_jobs(
    state: &AppState,
    id: &str,
    batch_id: Uuid,
    auto: &AutoAnalysis,
    epochs: &std::collections::BTreeSet<OffsetDateTime>,
) -> Result<Vec<NewJob>, ApiError> {
    let batch: Vec<_> = epochs.iter().copied().collect();
    // The stored epochs a baseline may be (the batch's own are not visible yet): the
    // first for `first_epoch`, the latest before each epoch the plan analyses for
    // `previous_epoch` (indexed lookups, not a scan of the history).
    let mut stored = Vec::new();
    match auto.baseline {
        AutoBaseline::Reference => {}
        AutoBaseline::FirstEpoch => stored.extend(state.store.first_epoch(id).await?),
        AutoBaseline::PreviousEpoch => {
            let skip = batch.len().saturating_sub(MAX_AUTO_JOBS_PER_BATCH);
            for &e in &batch[skip..] {
                stored.extend(state.store.epoch_before(id, e).await?);
            }
        }
    }
    let created_at = now_utc();
    // One microsecond apart, oldest epoch first: jobs queued by batches run one at a
    // time per structure in this order.
    auto.plan(&batch, &stored)
        .into_iter()
        .zip(0i64..)
        .map(|(input, i)| {
            Ok(NewJob {
                id: Uuid::new_v4(),
                structure_id: id.to_owned(),
                origin: JobOrigin::Batch,
                batch_id: Some(batch_id),
                request: serde_json::to_value(&input)
                    .map_err(|e| ApiError::Internal(e.to_string()))?,
                max_attempts: state.settings.jobs.max_attempts,
                created_at: created_at + time::Duration::microseconds(i),
            })
        })
        .collect()
}

/// Store a sensor batch, all or nothing.
///
/// The body is streamed: JSON (`application/json`, shape `BatchInput`) or CSV
/// (`text/csv`, header `point_id,epoch,ux,uy[,uz][,sigma_x,sigma_y[,sigma_z]]`, `uz`
/// and `sigma_z` exactly for 3D structures). `u` is the displacement from the point's
/// reference coordinates. Every reading is checked (known point, RFC 3339 epoch, one
/// finite component per dimension, positive sigma, one reading per point and epoch);
/// one bad reading refuses the batch with a pointer per bad field
/// (`/readings/<i>/<field>`, for CSV `/rows/<line>/<column>`) and nothing is stored.
/// With an `Idempotency-Key`, a retry with the same body gets the first response
/// again (`Idempotent-Replayed: true`); keys are per structure.
#[utoipa::path(post, path = "/v1/structures/{id}/batches", tag = "readings",
    params(("id" = String, Path, description = "The client's asset ID"), BatchQuery,
        ("Idempotency-Key" = Option<String>, Header, description = "1–255 visible ASCII characters; a retry with the same key and body gets the first response again")),
    request_body(content(
        (BatchInput = "application/json"),
        (String = "text/csv"),
    ), description = "The readings, as JSON or CSV"),
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Stored (or replayed, with `Idempotent-Replayed: true`)", body = Batch,
            headers(("Location" = String, description = "URL of the batch"))),
        (status = 400, description = "Malformed JSON or CSV (with line and column), or a bad Idempotency-Key", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "A reading of a point at an epoch is stored already, or a concurrent request holds the Idempotency-Key", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Over KINEMA_MAX_BATCH_BYTES or KINEMA_MAX_BATCH_READINGS", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Neither JSON nor CSV", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid readings (each with a pointer), an empty batch, or an Idempotency-Key reused with another body", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn post_batch(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(q): ApiQuery<BatchQuery>,
    headers: HeaderMap,
    body: Body,
) -> Result<Response, ApiError> {
    let s = caller.structure(&state, Scope::Write, &id).await?;
    let media = Media::of(&headers)?;
    let from_query = query_unit(&q)?;
    let key = idempotency_key(&headers)?;
    let limit = state.limits.max_batch_bytes;
    // Look for the key before opening a transaction (the usual retry of a finished
    // request), and again once the writer holds the key's lock: a retry that arrived
    // while the first request was still writing then finds its batch and replays it.
    if let Some(k) = &key
        && let Some(prev) = state.store.batch_by_idempotency_key(&id, k).await?
    {
        return replay(&id, k, prev, media, from_query, body, limit).await;
    }
    let auto = auto_analysis(&state, &id).await?;
    let received_at = now_utc();
    let mut writer = state.store.begin_batch(&id, key.as_deref()).await?;
    if let Some(k) = &key
        && let Some(prev) = state.store.batch_by_idempotency_key(&id, k).await?
    {
        drop(writer);
        return replay(&id, k, prev, media, from_query, body, limit).await;
    }
    let ctx = Context {
        dimension: writer.dimension(),
        points: writer.points(),
        unit: from_query.unwrap_or(s.length_unit),
        unit_from_query: from_query.is_some(),
        max_readings: state.limits.max_batch_readings,
    };
    let (tx, mut rx) = mpsc::channel(CHANNEL_CHUNKS);
    let mut reader = body_reader(body, limit);
    let parser = tokio::task::spawn_blocking(move || {
        let sink = Sink::new(tx);
        match media {
            Media::Json => ingest::json::parse(&mut reader, ctx, sink),
            Media::Csv => ingest::csv::parse(&mut reader, ctx, sink),
        }
    });
    let mut write_error = None;
    let mut epochs = std::collections::BTreeSet::new();
    while let Some(chunk) = rx.recv().await {
        if auto.is_some() {
            epochs.extend(chunk.iter().map(|r| r.epoch));
        }
        if let Err(e) = writer.write(&chunk).await {
            write_error = Some(e);
            break;
        }
    }
    drop(rx);
    let parsed = parser
        .await
        .map_err(|e| ApiError::Internal(format!("batch parser: {e}")))?;
    let outcome = match (parsed, write_error) {
        (Err(IngestError::Stopped), Some(e)) | (Ok(_), Some(e)) => return Err(e.into()),
        (Err(e), _) => return Err(e.into()),
        (Ok(o), None) => o,
    };
    let jobs = match &auto {
        Some(a) => auto_jobs(&state, &id, writer.batch_id(), a, &epochs).await?,
        None => Vec::new(),
    };
    let queued = !jobs.is_empty();
    let batch = writer
        .commit(BatchMeta {
            received_at,
            media_type: media.label().to_owned(),
            idempotency_key: key,
            body_sha256: request_fingerprint(media, from_query, &outcome.body_sha256),
            jobs,
        })
        .await?;
    if queued {
        state.wake.notify_waiters();
    }
    state.metrics.batch_ingested(batch.readings);
    let body = serde_json::to_value(&batch).map_err(|e| ApiError::Internal(e.to_string()))?;
    Ok(created(&id, batch.id, &body, false))
}

/// One batch of a structure.
#[utoipa::path(get, path = "/v1/structures/{id}/batches/{batch_id}", tag = "readings",
    params(("id" = String, Path, description = "The client's asset ID"),
        ("batch_id" = Uuid, Path, description = "The batch's ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The batch", body = Batch),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure or batch", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_batch(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, batch_id)): Path<(String, String)>,
) -> Result<axum::Json<Batch>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let nf = || ApiError::NotFound(format!("structure {id} has no batch {batch_id}"));
    let uuid = Uuid::parse_str(&batch_id).map_err(|_| nf())?;
    state
        .store
        .get_batch(&id, uuid)
        .await?
        .map(axum::Json)
        .ok_or_else(nf)
}

/// A page of batches.
#[derive(Debug, Serialize, ToSchema)]
pub struct BatchPage {
    /// Batches in the order they were stored (`received_at`, then ID).
    pub items: Vec<Batch>,
    /// Pass as `cursor` to get the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// The batches of a structure, oldest first.
#[utoipa::path(get, path = "/v1/structures/{id}/batches", tag = "readings",
    params(("id" = String, Path, description = "The client's asset ID"), PageQuery),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "A page of batches", body = BatchPage),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad cursor or limit", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_batches(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(q): ApiQuery<PageQuery>,
) -> Result<axum::Json<BatchPage>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let limit = q.limit()?;
    let after = q
        .after::<(i64, Uuid)>()?
        .map(|(us, id)| {
            from_unix_micros(us).map(|t| (t, id)).ok_or_else(|| {
                ApiError::field("/cursor", "the cursor is not one this service issued")
            })
        })
        .transpose()?;
    let mut items = state.store.list_batches(&id, after, limit + 1).await?;
    let next_cursor =
        Page::from_overfetch(&mut items, limit, |b| (to_unix_micros(b.received_at), b.id));
    Ok(axum::Json(BatchPage { items, next_cursor }))
}

/// Query of `GET /v1/structures/{id}/epochs`.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct EpochsQuery {
    /// Earliest epoch to list, RFC 3339 (inclusive); absent for no lower bound.
    pub from: Option<String>,
    /// Latest epoch to list, RFC 3339 (inclusive); absent for no upper bound.
    pub to: Option<String>,
}

/// An epoch with readings.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct EpochOut {
    /// The epoch, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub epoch: OffsetDateTime,
    /// Readings stored at this epoch (one per point at most).
    pub readings: u64,
}

/// The epochs of a structure.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct EpochsOut {
    /// Epochs with readings, oldest first.
    pub epochs: Vec<EpochOut>,
}

fn query_epoch(text: Option<&str>, pointer: &str) -> Result<Option<OffsetDateTime>, ApiError> {
    text.map(|t| parse_epoch(t).map_err(|e| ApiError::field(pointer, e)))
        .transpose()
}

/// The epochs of a structure that have readings, with how many each.
#[utoipa::path(get, path = "/v1/structures/{id}/epochs", tag = "readings",
    params(("id" = String, Path, description = "The client's asset ID"), EpochsQuery),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The epochs", body = EpochsOut),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "A bound is not an RFC 3339 time", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_epochs(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(q): ApiQuery<EpochsQuery>,
) -> Result<axum::Json<EpochsOut>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let from = query_epoch(q.from.as_deref(), "/from")?;
    let to = query_epoch(q.to.as_deref(), "/to")?;
    let epochs = state
        .store
        .list_epochs(&id, from, to)
        .await?
        .into_iter()
        .map(|e| EpochOut {
            epoch: e.epoch,
            readings: e.readings,
        })
        .collect();
    Ok(axum::Json(EpochsOut { epochs }))
}

/// Query of `GET /v1/structures/{id}/readings`.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ReadingsQuery {
    /// The epoch, RFC 3339 (any offset).
    pub epoch: Option<String>,
}

/// A stored reading.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ReadingOut {
    /// Point ID.
    pub point_id: String,
    /// Displacement from the point's reference coordinates, in the response's
    /// `length_unit`.
    pub u: Vec<f64>,
    /// A-priori standard deviations of the components, in the response's
    /// `length_unit`; absent when the reading stated none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sigma: Option<Vec<f64>>,
}

/// The readings of a structure at one epoch.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ReadingsOut {
    /// The epoch, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub epoch: OffsetDateTime,
    /// Unit of `u` and `sigma`: the structure's length unit.
    pub length_unit: LengthUnit,
    /// Readings in point ID order; empty when none are stored at this epoch.
    pub readings: Vec<ReadingOut>,
}

/// The readings of a structure at one epoch, in its length unit.
#[utoipa::path(get, path = "/v1/structures/{id}/readings", tag = "readings",
    params(("id" = String, Path, description = "The client's asset ID"), ReadingsQuery),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The readings", body = ReadingsOut),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Missing or bad epoch", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn readings_at(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(q): ApiQuery<ReadingsQuery>,
) -> Result<axum::Json<ReadingsOut>, ApiError> {
    let s = caller.structure(&state, Scope::Read, &id).await?;
    let epoch = query_epoch(q.epoch.as_deref(), "/epoch")?.ok_or_else(|| {
        ApiError::fields(vec![FieldError::new(
            "/epoch",
            "give ?epoch=<RFC 3339 time>",
        )])
    })?;
    let unit = s.length_unit;
    let conv = |v: &[f64]| v.iter().map(|&m| unit.from_metres(m)).collect::<Vec<_>>();
    let readings = state
        .store
        .readings_at(&id, epoch)
        .await?
        .into_iter()
        .map(|r| ReadingOut {
            u: conv(&r.u),
            sigma: r.sigma.as_deref().map(conv),
            point_id: r.point_id,
        })
        .collect();
    Ok(axum::Json(ReadingsOut {
        epoch,
        length_unit: unit,
        readings,
    }))
}
