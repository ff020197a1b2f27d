//! The HTTP API: routes under `/v1/`, the OpenAPI 3.1 document generated from the
//! handlers (served at `/openapi.json`, with Swagger UI at `/docs`), and the layers
//! that apply the limits.
//!
//! Handlers stay thin: extract and validate → call core or the store → map to a
//! response. Every error is an [`problem::ApiError`], mapped to problem details in one
//! place.

pub mod alerts;
pub mod analyses;
pub mod auth;
pub mod auto_analysis;
pub mod batches;
pub mod compute;
pub mod extract;
pub mod health;
pub mod jobs;
pub mod keys;
pub mod metrics;
pub mod page;
pub mod problem;
pub mod structures;
pub mod webhooks;

use std::sync::Arc;
use std::time::Duration;

use axum::Router;
use axum::error_handling::HandleErrorLayer;
use axum::extract::DefaultBodyLimit;
use axum::http::StatusCode;
use axum::middleware;
use tower::ServiceBuilder;
use tower::limit::GlobalConcurrencyLimitLayer;
use tower_http::catch_panic::CatchPanicLayer;
use tower_http::timeout::TimeoutLayer;
use tower_http::trace::{DefaultMakeSpan, DefaultOnResponse, TraceLayer};
use tracing::Level;
use utoipa::openapi::security::{HttpAuthScheme, HttpBuilder, SecurityScheme};
use utoipa::{Modify, OpenApi};
use utoipa_axum::router::OpenApiRouter;
use utoipa_swagger_ui::SwaggerUi;

use crate::settings::Settings;
use crate::store::DynStore;

/// Limits of the service; each is a `kinema serve` flag and a `KINEMA_*` variable.
#[derive(Debug, Clone)]
pub struct Limits {
    /// Largest JSON request body, bytes (sensor batches have their own limit).
    pub max_body_bytes: usize,
    /// Largest sensor-batch body, bytes (streamed, never held whole).
    pub max_batch_bytes: u64,
    /// Most monitoring points in one request (points upload or compute request).
    pub max_points: usize,
    /// Most readings in one sensor batch.
    pub max_batch_readings: usize,
    /// Time a request may take before it is answered with 408.
    pub request_timeout: Duration,
    /// Requests in progress at once; more are answered with 503 at once.
    pub max_concurrency: usize,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            max_body_bytes: 16 * 1024 * 1024,
            max_batch_bytes: 512 * 1024 * 1024,
            max_points: 100_000,
            max_batch_readings: 2_000_000,
            request_timeout: Duration::from_secs(120),
            max_concurrency: 256,
        }
    }
}

/// What every handler can reach.
#[derive(Clone)]
pub struct AppState {
    /// The database.
    pub store: DynStore,
    /// The limits in force.
    pub limits: Arc<Limits>,
    /// Request and domain counters for `/metrics`.
    pub metrics: Arc<metrics::Metrics>,
    /// Settings of jobs and webhooks.
    pub settings: Arc<Settings>,
    /// Wakes this process's job workers when a job is queued.
    pub wake: Arc<tokio::sync::Notify>,
}

impl AppState {
    /// State over `store` with `limits`, default settings and fresh metrics.
    pub fn new(store: DynStore, limits: Limits) -> Self {
        Self::with_settings(store, limits, Settings::default())
    }

    /// State over `store` with `limits`, `settings` and fresh metrics.
    pub fn with_settings(store: DynStore, limits: Limits, settings: Settings) -> Self {
        Self {
            store,
            limits: Arc::new(limits),
            metrics: Arc::new(metrics::Metrics::default()),
            settings: Arc::new(settings),
            wake: Arc::new(tokio::sync::Notify::new()),
        }
    }
}

/// The API description in the OpenAPI document, with the cautions.
const DESCRIPTION: &str = include_str!("description.md");

#[derive(OpenApi)]
#[openapi(
    info(
        title = "Kinema API",
        description = DESCRIPTION,
        license(name = "Apache-2.0", identifier = "Apache-2.0"),
    ),
    modifiers(&BearerAuth),
    components(schemas(problem::Problem, problem::FieldError)),
    tags(
        (name = "structures", description = "Monitored structures and their monitoring points"),
        (name = "readings", description = "Sensor batches (streamed, all or nothing, idempotent with Idempotency-Key), their epochs and readings"),
        (name = "keys", description = "API keys (an unrestricted admin key only)"),
        (name = "compute", description = "Stateless strain computations; nothing is stored"),
        (name = "analyses", description = "Analyses of a structure's readings (run as jobs, queued by a request or automatically by an arriving batch), their history and exports"),
        (name = "alerts", description = "Alert rules (the user's thresholds; Kinema ships none), the alert state of each region, the alert event log, and reference strains for information"),
        (name = "webhooks", description = "Webhook subscriptions (admin keys), signed event deliveries and their log"),
        (name = "service", description = "Health, readiness and metrics"),
    )
)]
struct ApiDoc;

struct BearerAuth;

impl Modify for BearerAuth {
    fn modify(&self, openapi: &mut utoipa::openapi::OpenApi) {
        let components = openapi.components.get_or_insert_with(Default::default);
        components.add_security_scheme(
            "api_key",
            SecurityScheme::Http(
                HttpBuilder::new()
                    .scheme(HttpAuthScheme::Bearer)
                    .description(Some(
                        "An API key from `kinema keys create`, sent as `Authorization: Bearer <token>`.",
                    ))
                    .build(),
            ),
        );
    }
}

/// All routes with their OpenAPI operations, before state and layers.
fn api_routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::with_openapi(ApiDoc::openapi())
        .merge(health::routes())
        .merge(structures::routes())
        .merge(batches::routes())
        .merge(keys::routes())
        .merge(compute::routes())
        .merge(analyses::routes())
        .merge(jobs::routes())
        .merge(auto_analysis::routes())
        .merge(alerts::routes())
        .merge(webhooks::routes())
}

/// The OpenAPI document of this build (what `/openapi.json` serves).
pub fn openapi() -> utoipa::openapi::OpenApi {
    let (_, doc) = api_routes().split_for_parts();
    doc
}

/// The OpenAPI document as pretty JSON with a final newline (the committed copy in
/// `openapi/kinema.json` is this text).
pub fn openapi_json() -> String {
    let mut s = openapi()
        .to_pretty_json()
        .unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"));
    s.push('\n');
    s
}

/// The complete application: routes, docs, limits and the problem mapping.
pub fn app(state: AppState) -> Router {
    let (router, doc) = api_routes().split_for_parts();
    let limits = state.limits.clone();
    let metrics = state.metrics.clone();
    router
        .merge(SwaggerUi::new("/docs").url("/openapi.json", doc))
        .with_state(state)
        .layer(DefaultBodyLimit::max(limits.max_body_bytes))
        .layer(TimeoutLayer::with_status_code(
            StatusCode::REQUEST_TIMEOUT,
            limits.request_timeout,
        ))
        .layer(
            ServiceBuilder::new()
                .layer(HandleErrorLayer::new(|_: tower::BoxError| async {
                    StatusCode::SERVICE_UNAVAILABLE
                }))
                .load_shed()
                .layer(GlobalConcurrencyLimitLayer::new(limits.max_concurrency)),
        )
        .layer(CatchPanicLayer::new())
        .layer(middleware::from_fn_with_state(metrics, metrics::record))
        .layer(
            TraceLayer::new_for_http()
                .make_span_with(DefaultMakeSpan::new().level(Level::INFO))
                .on_response(DefaultOnResponse::new().level(Level::INFO)),
        )
        .layer(middleware::from_fn(problem::problem_fallback))
}
