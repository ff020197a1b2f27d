//! `/healthz` (the process is alive), `/readyz` (the database answers) and `/metrics`
//! (Prometheus text format). None needs an API key.

use axum::extract::State;
use axum::http::{StatusCode, header};
use axum::response::IntoResponse;
use serde::Serialize;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::AppState;
use super::problem::{ApiError, Problem};

/// Health or readiness.
#[derive(Debug, Serialize, ToSchema)]
pub struct Health {
    /// `ok`.
    pub status: &'static str,
    /// The database behind the service: `sqlite` or `postgres` (readiness only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub database: Option<&'static str>,
    /// Version of this server.
    pub version: &'static str,
}

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(healthz))
        .routes(routes!(readyz))
        .routes(routes!(metrics))
}

/// The process is alive.
#[utoipa::path(get, path = "/healthz", tag = "service",
    responses((status = 200, description = "Alive", body = Health)))]
pub async fn healthz() -> axum::Json<Health> {
    axum::Json(Health {
        status: "ok",
        database: None,
        version: env!("CARGO_PKG_VERSION"),
    })
}

/// The database answers; 503 when it does not.
#[utoipa::path(get, path = "/readyz", tag = "service",
    responses(
        (status = 200, description = "Ready", body = Health),
        (status = 503, description = "The database does not answer", body = Problem,
            content_type = "application/problem+json"),
    ))]
pub async fn readyz(State(state): State<AppState>) -> Result<axum::Json<Health>, ApiError> {
    state.store.ping().await.map_err(|e| {
        tracing::warn!(error = %e, "readiness check failed");
        ApiError::Store(crate::store::StoreError::Database(
            sqlx::Error::PoolTimedOut,
        ))
    })?;
    Ok(axum::Json(Health {
        status: "ok",
        database: Some(state.store.backend().name()),
        version: env!("CARGO_PKG_VERSION"),
    }))
}

/// Counters and latency histograms in the Prometheus text exposition format 0.0.4.
#[utoipa::path(get, path = "/metrics", tag = "service",
    responses((status = 200, description = "Prometheus text format", body = String,
        content_type = "text/plain; version=0.0.4")))]
pub async fn metrics(State(state): State<AppState>) -> impl IntoResponse {
    (
        StatusCode::OK,
        [(
            header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        state.metrics.render(),
    )
}
