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
use super::page::{Page, PageQuery, time_id_key};
use super::problem::{ApiError, Problem};
use crate::analysis::export;
use crate::jobs::request::{AnalysisInput, check};
use crate::model::{
    Analysis, AnalysisKind, AnalysisQuery, AnalysisStatus, Frame, Job, JobOrigin, NewJob, Scope,
    now_utc,
};

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(post_analysis, list_analyses))
        .routes(routes!(get_analysis))
        .routes(routes!(get_result))
}

/// Queue an analysis of the structure's stored readings as a job; 202 with the job.
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
/// Requests that cannot run (an epoch without readings, a baseline not before the
/// epoch, a bad method or options, a method a series cannot follow) are 422 with a
/// JSON pointer and nothing is queued. The job then runs in a worker: follow
/// `Location` (`GET /v1/structures/{id}/jobs/{job_id}`) until its `status` is
/// `succeeded` or `failed`; its `analysis_id` names the stored analysis. When the data
/// cannot be computed on (all points collinear, every element screened out, options
/// that do not fit the data), the analysis is stored with `status: failed` and its
/// `error`, and the job fails: it is part of the structure's history.
///
/// Results are kinematic estimates from measured displacements, not a structural
/// assessment; defer to local codes and licensed practice.
#[utoipa::path(post, path = "/v1/structures/{id}/analyses", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID")),
    request_body = AnalysisInput,
    security(("api_key" = [])),
    responses(
        (status = 202, description = "Queued: the job", body = Job,
            headers(("Location" = String, description = "URL of the job"))),
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
    check(&state.store, &s, &body).await?;
    let request = serde_json::to_value(&body).map_err(|e| ApiError::Internal(e.to_string()))?;
    let job = state
        .store
        .enqueue_job(&NewJob {
            id: Uuid::new_v4(),
            structure_id: id.clone(),
            origin: JobOrigin::Request,
            batch_id: None,
            request,
            max_attempts: state.settings.jobs.max_attempts,
            created_at: now_utc(),
        })
        .await?;
    state.wake.notify_waiters();
    let mut resp = (axum::http::StatusCode::ACCEPTED, axum::Json(&job)).into_response();
    if let Ok(v) = HeaderValue::from_str(&format!("/v1/structures/{id}/jobs/{}", job.id)) {
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
    let after = page.after_time_id()?;
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
    let next_cursor = Page::from_overfetch(&mut items, limit, |a| time_id_key(a.created_at, a.id));
    Ok(axum::Json(AnalysisPage { items, next_cursor }))
}

fn analysis_id(s: &str) -> Result<Uuid, ApiError> {
    super::extract::path_uuid("/analysis_id", s)
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
