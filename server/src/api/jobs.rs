//! `/v1/structures/{id}/jobs`: the analysis jobs of a structure (queued by
//! `POST …/analyses` or by an arriving batch) and where each one is.

use axum::extract::{Path, State};
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::AppState;
use super::auth::Caller;
use super::extract::ApiQuery;
use super::page::{Page, PageQuery, time_id_key};
use super::problem::{ApiError, Problem};
use crate::model::{Job, JobQuery, JobStatus, Scope};

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(list_jobs))
        .routes(routes!(get_job))
}

/// Filters and paging of the job list.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct JobFilter {
    /// Only jobs with this status: `queued`, `running`, `succeeded` or `failed`.
    #[serde(default)]
    pub status: Option<JobStatus>,
    /// `next_cursor` of the previous page; absent for the first page.
    pub cursor: Option<String>,
    /// Items per page, 1–1000 (default 100).
    pub limit: Option<usize>,
}

/// A page of jobs.
#[derive(Debug, Serialize, ToSchema)]
pub struct JobPage {
    /// Jobs newest first (by `created_at`, then ID).
    pub items: Vec<Job>,
    /// Pass as `cursor` to get the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// The jobs of a structure, newest first.
#[utoipa::path(get, path = "/v1/structures/{id}/jobs", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID"), JobFilter),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "A page of jobs", body = JobPage),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad status, cursor or limit", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_jobs(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(f): ApiQuery<JobFilter>,
) -> Result<axum::Json<JobPage>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let page = PageQuery {
        cursor: f.cursor.clone(),
        limit: f.limit,
    };
    let limit = page.limit()?;
    let after = page.after_time_id()?;
    let mut items = state
        .store
        .list_jobs(
            &id,
            &JobQuery {
                status: f.status,
                after,
                limit: limit + 1,
            },
        )
        .await?;
    let next_cursor = Page::from_overfetch(&mut items, limit, |j| time_id_key(j.created_at, j.id));
    Ok(axum::Json(JobPage { items, next_cursor }))
}

/// One job: where it is, its attempts' errors, and (once it has ended) the analysis it
/// stored, `analysis_id`, at `/v1/structures/{id}/analyses/{analysis_id}`.
#[utoipa::path(get, path = "/v1/structures/{id}/jobs/{job_id}", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID"),
           ("job_id" = String, Path, description = "The job's UUID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The job", body = Job),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure or job (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The job ID is not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_job(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, job)): Path<(String, String)>,
) -> Result<axum::Json<Job>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let jid = super::extract::path_uuid("/job_id", &job)?;
    state
        .store
        .get_job(jid)
        .await?
        .filter(|j| j.structure_id == id)
        .map(axum::Json)
        .ok_or_else(|| ApiError::NotFound(format!("structure {id} has no job {jid}")))
}
