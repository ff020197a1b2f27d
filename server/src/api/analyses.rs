//! `/v1/structures/{id}/analyses`: the stored analyses of a structure, their history
//! and the exports of a result (JSON, CSV, GeoJSON).

use axum::extract::{Path, State};
use axum::http::{HeaderValue, header};
use axum::response::{IntoResponse, Response};
use kinema_core::geodesy::{EnuFrame, Geodetic};
use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;
use uuid::Uuid;

use super::AppState;
use super::auth::Caller;
use super::extract::{ApiJson, ApiQuery};
use super::page::{Page, PageQuery};
use super::problem::{ApiError, Problem};
use crate::analysis::epoch::{Displacement, EpochRequest, run_epoch};
use crate::analysis::params::{FieldOptions, MethodSpec};
use crate::analysis::series::{MAX_SERIES_EPOCHS, SeriesAnalysisRequest, SeriesEpoch, run_series};
use crate::analysis::{AnalysisError, export};
use crate::ingest::validate::parse_epoch;
use crate::model::{Analysis, AnalysisKind, AnalysisQuery, AnalysisStatus, Frame, Reading, Scope};
use crate::units::StrainUnit;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(post_analysis, list_analyses))
        .routes(routes!(get_analysis))
        .routes(routes!(get_result))
}

/// Body of `POST /v1/structures/{id}/analyses`: what to analyse, chosen by `kind`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum AnalysisInput {
    /// The strain field at one epoch, from the readings at it (displacements from the
    /// reference coordinates) or from their difference to the readings at a baseline
    /// epoch.
    Epoch {
        /// The epoch analysed: an epoch with readings, RFC 3339 (any offset; compared
        /// in UTC to the microsecond).
        epoch: String,
        /// An earlier epoch with readings whose displacements are subtracted, RFC
        /// 3339; absent = displacements from the reference coordinates.
        #[serde(default)]
        baseline_epoch: Option<String>,
        /// The estimator (`delaunay`, `elements`, `groups`, `neighbourhood`,
        /// `network`); lengths in it are in the structure's length unit.
        method: MethodSpec,
        /// Options of the estimator; absent members take their defaults.
        #[serde(default)]
        options: FieldOptions,
        /// Unit of the strains in the result: `strain` or `microstrain` (default).
        #[serde(default)]
        strain_unit: StrainUnit,
    },
    /// The strain of fixed regions (elements or groups) followed through the epochs
    /// in `[from, to]`: cumulative strain from the baseline epoch, increments between
    /// consecutive epochs and rates (least-squares slope against time). No
    /// temperature compensation: epoch temperatures are not stored.
    Series {
        /// First time of the range, RFC 3339, inclusive; absent = from the first epoch.
        #[serde(default)]
        from: Option<String>,
        /// Last time of the range, RFC 3339, inclusive; absent = to the last epoch.
        #[serde(default)]
        to: Option<String>,
        /// The baseline epoch, an epoch with readings, RFC 3339; its positions are the
        /// reference geometry and cumulative strains are measured from it. Absent =
        /// the first epoch of the range; one outside the range is added to it.
        #[serde(default)]
        baseline_epoch: Option<String>,
        /// The regions: `elements` or `groups` (other estimators do not follow fixed
        /// regions).
        method: MethodSpec,
        /// Options of the estimator; absent members take their defaults. `alpha` is
        /// also the level of the test of each increment.
        #[serde(default)]
        options: FieldOptions,
        /// Unit of the strains (and strain rates) in the result: `strain` or
        /// `microstrain` (default).
        #[serde(default)]
        strain_unit: StrainUnit,
    },
}

fn epoch_field(text: &str, pointer: &str) -> Result<OffsetDateTime, ApiError> {
    parse_epoch(text).map_err(|m| ApiError::field(pointer, m))
}

fn displacements(readings: Vec<Reading>) -> Vec<Displacement> {
    readings
        .into_iter()
        .map(|r| Displacement {
            point_id: r.point_id,
            u: r.u,
            sigma: r.sigma,
        })
        .collect()
}

/// The readings at `epoch`, or 422 at `pointer` when it has none.
async fn readings_of(
    state: &AppState,
    id: &str,
    epoch: OffsetDateTime,
    pointer: &str,
) -> Result<Vec<Displacement>, ApiError> {
    let r = state.store.readings_at(id, epoch).await?;
    if r.is_empty() {
        return Err(ApiError::field(
            pointer,
            format!(
                "structure {id} has no readings at {}; see GET /v1/structures/{id}/epochs",
                epoch
                    .format(&time::format_description::well_known::Rfc3339)
                    .unwrap_or_default()
            ),
        ));
    }
    Ok(displacements(r))
}

async fn compute<F>(f: F) -> Result<Analysis, ApiError>
where
    F: FnOnce() -> Result<Analysis, AnalysisError> + Send + 'static,
{
    tokio::task::spawn_blocking(f)
        .await
        .map_err(|e| ApiError::Internal(format!("analysis task: {e}")))?
        .map_err(ApiError::from)
}

/// Run and store an analysis of the structure's stored readings.
///
/// - `kind: epoch`: the strain field at `epoch` from its readings (displacements
///   from the reference coordinates), or from the change since `baseline_epoch`
///   (`u(epoch) − u(baseline)`, standard deviations combined in quadrature). Points
///   without the readings needed are left out and listed in `inputs.left_out`.
/// - `kind: series`: the strain of fixed regions (`elements` or `groups`) through the
///   epochs in `[from, to]` (at least 2), relative to `baseline_epoch` (default the
///   first): sections `cumulative`, `increments`, `rates` (per day and per Julian
///   year), `excluded` and `rejected`. The position of a point at an epoch is its
///   reference coordinates plus the reading. No temperature compensation.
///
/// Request errors (unknown epoch, baseline not before the epoch, bad method or
/// options, a method a series cannot follow) are 422 with a JSON pointer and nothing
/// is stored. When the parameters are valid but the data cannot be computed on
/// (e.g. all points collinear, every element screened out), the analysis is stored
/// with `status: failed` and its `error`, and also answered 201: it is part of the
/// structure's history.
///
/// Results are kinematic estimates from measured displacements, not a structural
/// assessment; defer to local codes and licensed practice.
#[utoipa::path(post, path = "/v1/structures/{id}/analyses", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID")),
    request_body = AnalysisInput,
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Stored, succeeded or failed (see `status` and `error`)", body = Analysis,
            headers(("Location" = String, description = "URL of the analysis"))),
        (status = 400, description = "Not JSON (JSON has no NaN or Infinity)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Body over the size limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields (each with a pointer): unknown epoch, baseline not before the epoch, fewer than 2 epochs in a series, bad method or options", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn post_analysis(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiJson(body): ApiJson<AnalysisInput>,
) -> Result<Response, ApiError> {
    let s = caller.structure(&state, Scope::Write, &id).await?;
    let started = std::time::Instant::now();
    let analysis = match body {
        AnalysisInput::Epoch {
            epoch,
            baseline_epoch,
            method,
            options,
            strain_unit,
        } => {
            let epoch = epoch_field(&epoch, "/epoch")?;
            let baseline_epoch = baseline_epoch
                .map(|b| epoch_field(&b, "/baseline_epoch"))
                .transpose()?;
            if let Some(b) = baseline_epoch
                && b >= epoch
            {
                return Err(ApiError::field(
                    "/baseline_epoch",
                    "the baseline epoch must be earlier than the epoch",
                ));
            }
            let errs = crate::analysis::params::validate(&method, &options);
            if !errs.is_empty() {
                return Err(ApiError::fields(errs));
            }
            let at = readings_of(&state, &id, epoch, "/epoch").await?;
            let base = match baseline_epoch {
                Some(b) => Some(readings_of(&state, &id, b, "/baseline_epoch").await?),
                None => None,
            };
            let points = state.store.list_points(&id).await?;
            let req = EpochRequest {
                epoch,
                baseline_epoch,
                method,
                options,
                strain_unit,
            };
            compute(move || run_epoch(&s, &points, &at, base.as_deref(), &req)).await?
        }
        AnalysisInput::Series {
            from,
            to,
            baseline_epoch,
            method,
            options,
            strain_unit,
        } => {
            let from = from.map(|t| epoch_field(&t, "/from")).transpose()?;
            let to = to.map(|t| epoch_field(&t, "/to")).transpose()?;
            let baseline = baseline_epoch
                .map(|b| epoch_field(&b, "/baseline_epoch"))
                .transpose()?;
            if let (Some(a), Some(b)) = (from, to)
                && a > b
            {
                return Err(ApiError::field(
                    "/to",
                    "`to` must not be earlier than `from`",
                ));
            }
            let points = state.store.list_points(&id).await?;
            let errs = crate::analysis::series::validate(&method, &options, &points);
            if !errs.is_empty() {
                return Err(ApiError::fields(errs));
            }
            let mut times: Vec<OffsetDateTime> = state
                .store
                .list_epochs(&id, from, to)
                .await?
                .into_iter()
                .map(|e| e.epoch)
                .collect();
            let baseline = match baseline {
                Some(b) => {
                    if !times.contains(&b) {
                        // Checked to exist below; outside the range it is added.
                        times.push(b);
                        times.sort_unstable();
                    }
                    b
                }
                None => *times.first().ok_or_else(|| {
                    ApiError::field(
                        "/from",
                        "the structure has no epoch with readings in the range",
                    )
                })?,
            };
            if times.len() < 2 || times.len() > MAX_SERIES_EPOCHS {
                return Err(ApiError::field(
                    "/from",
                    format!(
                        "a series needs 2 to {MAX_SERIES_EPOCHS} epochs with readings; the range (with the baseline) has {}",
                        times.len()
                    ),
                ));
            }
            let mut epochs = Vec::with_capacity(times.len());
            for t in times {
                let pointer = if t == baseline {
                    "/baseline_epoch"
                } else {
                    "/from"
                };
                epochs.push(SeriesEpoch {
                    epoch: t,
                    readings: readings_of(&state, &id, t, pointer).await?,
                });
            }
            let req = SeriesAnalysisRequest {
                from,
                to,
                baseline_epoch: baseline,
                method,
                options,
                strain_unit,
            };
            compute(move || run_series(&s, &points, &epochs, &req)).await?
        }
    };
    state.store.insert_analysis(&analysis).await?;
    state.metrics.analysis(
        analysis.kind.as_str(),
        analysis.status.as_str(),
        started.elapsed().as_secs_f64(),
    );
    let mut resp = (axum::http::StatusCode::CREATED, axum::Json(&analysis)).into_response();
    if let Ok(v) = HeaderValue::from_str(&format!("/v1/structures/{id}/analyses/{}", analysis.id)) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}

/// Filters and paging of the analysis list.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct AnalysisFilter {
    /// Only analyses run at or after this time (on `created_at`), RFC 3339.
    #[serde(default, with = "time::serde::rfc3339::option")]
    #[param(value_type = Option<String>)]
    pub from: Option<OffsetDateTime>,
    /// Only analyses run before this time (on `created_at`), RFC 3339.
    #[serde(default, with = "time::serde::rfc3339::option")]
    #[param(value_type = Option<String>)]
    pub to: Option<OffsetDateTime>,
    /// Only analyses with this status: `succeeded` or `failed`.
    #[serde(default)]
    pub status: Option<AnalysisStatus>,
    /// `next_cursor` of the previous page; absent for the first page.
    pub cursor: Option<String>,
    /// Items per page, 1–1000 (default 100).
    pub limit: Option<usize>,
}

/// A page of analyses.
#[derive(Debug, Serialize, ToSchema)]
pub struct AnalysisPage {
    /// Analyses newest first (by `created_at`, then ID), without their results.
    pub items: Vec<Analysis>,
    /// Pass as `cursor` to get the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// The analyses of a structure, newest first.
///
/// `from` and `to` filter on the time the analysis was run (`created_at`). Items
/// leave out the result document; get it from the analysis or its `result` export.
#[utoipa::path(get, path = "/v1/structures/{id}/analyses", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID"), AnalysisFilter),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "A page of analyses", body = AnalysisPage),
        (status = 400, description = "A filter that does not parse (time not RFC 3339, unknown status)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad cursor, limit or time range", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_analyses(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(f): ApiQuery<AnalysisFilter>,
) -> Result<axum::Json<AnalysisPage>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let page = PageQuery {
        cursor: f.cursor.clone(),
        limit: f.limit,
    };
    let limit = page.limit()?;
    let after: Option<(i128, Uuid)> = page.after()?;
    let after = after
        .map(|(ns, id)| {
            OffsetDateTime::from_unix_timestamp_nanos(ns)
                .map(|t| (t, id))
                .map_err(|_| {
                    ApiError::field("/cursor", "the cursor is not one this service issued")
                })
        })
        .transpose()?;
    if let (Some(a), Some(b)) = (f.from, f.to)
        && a >= b
    {
        return Err(ApiError::field("/to", "`to` must be later than `from`"));
    }
    let mut items = state
        .store
        .list_analyses(
            &id,
            &AnalysisQuery {
                from: f.from,
                to: f.to,
                status: f.status,
                after,
                limit: limit + 1,
            },
        )
        .await?;
    let next_cursor = Page::from_overfetch(&mut items, limit, |a| {
        (a.created_at.unix_timestamp_nanos(), a.id)
    });
    Ok(axum::Json(AnalysisPage { items, next_cursor }))
}

fn analysis_id(s: &str) -> Result<Uuid, ApiError> {
    Uuid::parse_str(s).map_err(|_| ApiError::field("/analysis_id", "not a UUID"))
}

async fn find(
    state: &AppState,
    caller: &Caller,
    id: &str,
    analysis: &str,
) -> Result<(crate::model::Structure, Analysis), ApiError> {
    let s = caller.structure(state, Scope::Read, id).await?;
    let aid = analysis_id(analysis)?;
    let a = state
        .store
        .get_analysis(id, aid)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("structure {id} has no analysis {aid}")))?;
    Ok((s, a))
}

/// One analysis with its result document.
#[utoipa::path(get, path = "/v1/structures/{id}/analyses/{analysis_id}", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID"),
           ("analysis_id" = String, Path, description = "The analysis's UUID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The analysis", body = Analysis),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure or analysis (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The analysis ID is not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_analysis(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, analysis)): Path<(String, String)>,
) -> Result<axum::Json<Analysis>, ApiError> {
    Ok(axum::Json(find(&state, &caller, &id, &analysis).await?.1))
}

/// Export format of a result.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum ExportFormat {
    /// The stored result document (`application/json`).
    #[default]
    Json,
    /// RFC 4180 CSV, one table per section, headers suffixed with their unit
    /// (`text/csv`).
    Csv,
    /// RFC 7946 GeoJSON `FeatureCollection` on WGS84 (`application/geo+json`); needs a
    /// structure with an East-North-Up frame.
    Geojson,
}

/// Query of the result export.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ExportQuery {
    /// `json` (default), `csv` or `geojson`.
    #[serde(default)]
    pub format: ExportFormat,
}

fn with_type(body: Vec<u8>, content_type: &'static str) -> Response {
    let mut resp = body.into_response();
    resp.headers_mut()
        .insert(header::CONTENT_TYPE, HeaderValue::from_static(content_type));
    resp
}

/// The result of a succeeded analysis as JSON, CSV or GeoJSON.
///
/// GeoJSON: one `Polygon` per triangle (its points' reference positions, the
/// structure's current points, counter-clockwise, closed) and one `Point` at the
/// centroid of every other region, each with its row of strains as `properties`;
/// `strain_unit`, `length_unit`, the conventions and the caution are members of the
/// collection. A structure with a local frame cannot be placed on WGS84, and a
/// series has no places (its rows are region-epochs and rates): both 409.
#[utoipa::path(get, path = "/v1/structures/{id}/analyses/{analysis_id}/result", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID"),
           ("analysis_id" = String, Path, description = "The analysis's UUID"),
           ExportQuery),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The result in the asked format", content(
            (Object = "application/json"),
            (String = "text/csv"),
            (Object = "application/geo+json"),
        )),
        (status = 400, description = "Unknown format", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure or analysis", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The analysis failed (no result), or GeoJSON of a series or of a structure with a local frame", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The analysis ID is not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_result(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, analysis)): Path<(String, String)>,
    ApiQuery(q): ApiQuery<ExportQuery>,
) -> Result<Response, ApiError> {
    let (s, a) = find(&state, &caller, &id, &analysis).await?;
    let Some(doc) = a.result else {
        return Err(ApiError::Conflict(format!(
            "analysis {} failed and has no result: {}",
            a.id,
            a.error.unwrap_or_default()
        )));
    };
    match q.format {
        ExportFormat::Json => Ok(axum::Json(doc).into_response()),
        ExportFormat::Csv => Ok(with_type(
            export::csv(&doc)?,
            "text/csv; charset=utf-8; header=present",
        )),
        ExportFormat::Geojson => {
            if a.kind == AnalysisKind::Series {
                return Err(ApiError::Conflict(format!(
                    "analysis {} is a series, whose rows are region-epochs and rates rather \
                     than places; GeoJSON is for epoch analyses (use json or csv)",
                    a.id
                )));
            }
            let Frame::Enu { origin } = s.frame else {
                return Err(ApiError::Conflict(format!(
                    "structure {id} has a local frame, which cannot be placed on WGS84; \
                     GeoJSON needs a structure with an East-North-Up frame (use json or csv)"
                )));
            };
            let frame = EnuFrame::new(&Geodetic::from_degrees(
                origin.lat_deg,
                origin.lon_deg,
                origin.h_m,
            ))
            .map_err(|e| ApiError::Internal(format!("stored ENU origin: {e}")))?;
            let points = state.store.list_points(&id).await?;
            let fc = export::geojson(&doc, &points, &frame)?;
            let body =
                serde_json::to_vec(&fc).map_err(|e| ApiError::Internal(format!("GeoJSON: {e}")))?;
            Ok(with_type(body, "application/geo+json"))
        }
    }
}
