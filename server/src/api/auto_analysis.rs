//! `/v1/structures/{id}/auto-analysis`: the analysis queued automatically for every
//! epoch of an arriving batch (the structure's stored defaults of estimator,
//! options, strain unit and baseline).

use axum::extract::{Path, State};
use axum::http::StatusCode;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::AppState;
use super::auth::Caller;
use super::extract::ApiJson;
use super::problem::{ApiError, Problem};
use crate::jobs::request::AutoAnalysis;
use crate::model::Scope;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new().routes(routes!(
        put_auto_analysis,
        get_auto_analysis,
        delete_auto_analysis
    ))
}

/// Set the structure's automatic analysis: from now on every batch that arrives
/// queues an epoch analysis of each of its epochs (the latest 100 of a longer batch)
/// with this estimator, these options and this baseline, in the batch's own
/// transaction. Each job's analysis is evaluated against the structure's alert rules.
#[utoipa::path(put, path = "/v1/structures/{id}/auto-analysis", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID")),
    request_body = AutoAnalysis,
    security(("api_key" = [])),
    responses(
        (status = 200, description = "Stored", body = AutoAnalysis),
        (status = 400, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields (each with a pointer)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn put_auto_analysis(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiJson(body): ApiJson<AutoAnalysis>,
) -> Result<axum::Json<AutoAnalysis>, ApiError> {
    let s = caller.structure(&state, Scope::Write, &id).await?;
    let points = state.store.list_points(&id).await?;
    let errs = body.validate(&points, s.dimension);
    if !errs.is_empty() {
        return Err(ApiError::fields(errs));
    }
    let v = serde_json::to_value(&body).map_err(|e| ApiError::Internal(e.to_string()))?;
    state.store.put_auto_analysis(&id, Some(&v)).await?;
    Ok(axum::Json(body))
}

/// The structure's automatic analysis; 404 when it has none.
#[utoipa::path(get, path = "/v1/structures/{id}/auto-analysis", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The automatic analysis", body = AutoAnalysis),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure, or it has no automatic analysis", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_auto_analysis(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<axum::Json<AutoAnalysis>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let v =
        state.store.get_auto_analysis(&id).await?.ok_or_else(|| {
            ApiError::NotFound(format!("structure {id} has no automatic analysis"))
        })?;
    serde_json::from_value(v)
        .map(axum::Json)
        .map_err(|e| ApiError::Internal(format!("stored automatic analysis: {e}")))
}

/// Stop analysing arriving batches automatically (jobs already queued still run).
#[utoipa::path(delete, path = "/v1/structures/{id}/auto-analysis", tag = "analyses",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 204, description = "Removed (or there was none)"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn delete_auto_analysis(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<StatusCode, ApiError> {
    caller.structure(&state, Scope::Write, &id).await?;
    state.store.put_auto_analysis(&id, None).await?;
    Ok(StatusCode::NO_CONTENT)
}
