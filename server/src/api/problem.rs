//! Errors of the HTTP API and their one mapping to RFC 9457 problem details
//! (`application/problem+json`).
//!
//! Every error response of the service is a [`Problem`]: handlers return
//! [`ApiError`], and [`problem_fallback`] turns the framework's own bare error
//! responses (unknown route, wrong method, body over the limit, timeout) into
//! problems too.

use axum::extract::Request;
use axum::http::{HeaderValue, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use serde::Serialize;
use thiserror::Error;
use utoipa::ToSchema;

use crate::store::StoreError;

/// Media type of problem details (RFC 9457 §3).
pub const PROBLEM_JSON: &str = "application/problem+json";

/// Base of the `type` URIs. They identify the kind of problem; `.invalid` (RFC 6761)
/// makes plain that they are names, not pages to fetch.
const TYPE_BASE: &str = "https://kinema.invalid/problems/";

/// One bad field of a request.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct FieldError {
    /// JSON pointer (RFC 6901) to the field in the request body, e.g.
    /// `/readings/12/u/0`; for CSV bodies `/rows/<n>/<column>` with `n` the 1-based
    /// line number.
    pub pointer: String,
    /// What is wrong with it.
    pub detail: String,
}

impl FieldError {
    /// A field error.
    pub fn new(pointer: impl Into<String>, detail: impl Into<String>) -> Self {
        Self {
            pointer: pointer.into(),
            detail: detail.into(),
        }
    }
}

/// An RFC 9457 problem detail document.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct Problem {
    /// URI naming the kind of problem, e.g. `https://kinema.invalid/problems/invalid-field`.
    #[serde(rename = "type")]
    pub kind: String,
    /// Short summary of the kind of problem.
    pub title: String,
    /// The HTTP status code.
    pub status: u16,
    /// What went wrong with this request, for people.
    pub detail: String,
    /// The bad fields, each with a JSON pointer; absent when the problem is not about
    /// particular fields.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub errors: Vec<FieldError>,
}

/// Why a request failed. [`IntoResponse`] maps each to its status and problem type.
#[derive(Debug, Error)]
pub enum ApiError {
    /// The body is not well-formed JSON (or CSV) at all.
    #[error("{detail}")]
    Malformed {
        /// What the parser said, with the position.
        detail: String,
    },
    /// The body parsed but fields are wrong: missing, unknown, of the wrong type, out of
    /// range, not finite, duplicated, or referring to unknown points.
    #[error("{detail}")]
    Invalid {
        /// Summary.
        detail: String,
        /// The bad fields.
        errors: Vec<FieldError>,
    },
    /// The request's `Content-Type` is not one this endpoint reads.
    #[error("content type {got:?} is not accepted here; send {expected}")]
    UnsupportedMediaType {
        /// What was sent (empty when none).
        got: String,
        /// What the endpoint reads.
        expected: &'static str,
    },
    /// The body, or the number of points or readings in it, is over a configured limit.
    #[error("{0}")]
    TooLarge(String),
    /// No such resource, or one the caller's key may not see.
    #[error("{0}")]
    NotFound(String),
    /// The request contradicts the stored state.
    #[error("{0}")]
    Conflict(String),
    /// An `Idempotency-Key` was reused with a different request body.
    #[error("{0}")]
    IdempotencyMismatch(String),
    /// No valid API key.
    #[error("{0}")]
    Unauthorized(String),
    /// The key lacks the scope this request needs.
    #[error("{0}")]
    Forbidden(String),
    /// The request is valid but the data cannot be computed on (e.g. collinear points).
    #[error("{0}")]
    Unprocessable(String),
    /// The database is unreachable or failed.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// A bug; the detail is logged, the client sees a generic message.
    #[error("{0}")]
    Internal(String),
}

impl ApiError {
    /// An [`ApiError::Invalid`] with one bad field.
    pub fn field(pointer: impl Into<String>, detail: impl Into<String>) -> Self {
        let e = FieldError::new(pointer, detail);
        Self::Invalid {
            detail: format!("{}: {}", e.pointer, e.detail),
            errors: vec![e],
        }
    }

    /// An [`ApiError::Invalid`] from a list of bad fields (at least one).
    pub fn fields(errors: Vec<FieldError>) -> Self {
        let detail = match errors.as_slice() {
            [] => "the request is not valid".to_owned(),
            [one] => format!("{}: {}", one.pointer, one.detail),
            [first, rest @ ..] => format!(
                "{}: {} (and {} more bad field{})",
                first.pointer,
                first.detail,
                rest.len(),
                if rest.len() == 1 { "" } else { "s" }
            ),
        };
        Self::Invalid { detail, errors }
    }

    /// Status, type slug and title.
    fn kind(&self) -> (StatusCode, &'static str, &'static str) {
        match self {
            Self::Malformed { .. } => (
                StatusCode::BAD_REQUEST,
                "malformed-body",
                "Malformed request body",
            ),
            Self::Invalid { .. } => (
                StatusCode::UNPROCESSABLE_ENTITY,
                "invalid-field",
                "Invalid request fields",
            ),
            Self::UnsupportedMediaType { .. } => (
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported-media-type",
                "Unsupported media type",
            ),
            Self::TooLarge(_) => (
                StatusCode::PAYLOAD_TOO_LARGE,
                "too-large",
                "Request too large",
            ),
            Self::NotFound(_) => (StatusCode::NOT_FOUND, "not-found", "Not found"),
            Self::Conflict(_) => (
                StatusCode::CONFLICT,
                "conflict",
                "Conflict with stored state",
            ),
            Self::IdempotencyMismatch(_) => (
                StatusCode::UNPROCESSABLE_ENTITY,
                "idempotency-key-reused",
                "Idempotency key reused with a different request",
            ),
            Self::Unauthorized(_) => (
                StatusCode::UNAUTHORIZED,
                "unauthorized",
                "Missing or invalid API key",
            ),
            Self::Forbidden(_) => (StatusCode::FORBIDDEN, "forbidden", "Insufficient scope"),
            Self::Unprocessable(_) => (
                StatusCode::UNPROCESSABLE_ENTITY,
                "not-computable",
                "The data cannot be computed on",
            ),
            Self::Store(StoreError::Conflict(_)) => (
                StatusCode::CONFLICT,
                "conflict",
                "Conflict with stored state",
            ),
            Self::Store(StoreError::NotFound(_)) => {
                (StatusCode::NOT_FOUND, "not-found", "Not found")
            }
            Self::Store(StoreError::Database(
                sqlx::Error::PoolTimedOut | sqlx::Error::Io(_) | sqlx::Error::PoolClosed,
            )) => (
                StatusCode::SERVICE_UNAVAILABLE,
                "database-unavailable",
                "Database unavailable",
            ),
            Self::Store(StoreError::Database(sqlx::Error::Database(e))) if is_busy(e.as_ref()) => (
                StatusCode::SERVICE_UNAVAILABLE,
                "database-busy",
                "Database busy",
            ),
            Self::Store(_) | Self::Internal(_) => (
                StatusCode::INTERNAL_SERVER_ERROR,
                "internal",
                "Internal error",
            ),
        }
    }

    /// The problem document for this error.
    pub fn problem(&self) -> Problem {
        let (status, slug, title) = self.kind();
        let detail = match self {
            Self::Store(
                StoreError::Conflict(m) | StoreError::NotFound(m) | StoreError::Invalid(m),
            ) => m.clone(),
            Self::Store(_) | Self::Internal(_) if status.is_server_error() => {
                if slug == "database-busy" {
                    "the database is busy with another write; retry later".to_owned()
                } else if status == StatusCode::SERVICE_UNAVAILABLE {
                    "the database is not reachable; retry later".to_owned()
                } else {
                    "an internal error occurred; it has been logged".to_owned()
                }
            }
            other => other.to_string(),
        };
        let errors = match self {
            Self::Invalid { errors, .. } => errors.clone(),
            _ => Vec::new(),
        };
        problem(status, slug, title, detail, errors)
    }
}

/// SQLite's "busy" and "locked" result codes (5, 6 and their extended forms 261, 262,
/// 517): another writer held the database past the busy timeout.
fn is_busy(e: &dyn sqlx::error::DatabaseError) -> bool {
    matches!(e.code().as_deref(), Some("5" | "6" | "261" | "262" | "517"))
}

/// A problem document.
pub fn problem(
    status: StatusCode,
    slug: &str,
    title: &str,
    detail: String,
    errors: Vec<FieldError>,
) -> Problem {
    Problem {
        kind: format!("{TYPE_BASE}{slug}"),
        title: title.to_owned(),
        status: status.as_u16(),
        detail,
        errors,
    }
}

impl Problem {
    /// The response carrying this problem.
    pub fn into_response_with(self, extra: Option<(header::HeaderName, HeaderValue)>) -> Response {
        let status = StatusCode::from_u16(self.status).unwrap_or(StatusCode::INTERNAL_SERVER_ERROR);
        let body = serde_json::to_vec(&self).unwrap_or_default();
        let mut resp = (status, body).into_response();
        resp.headers_mut()
            .insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
        if let Some((name, value)) = extra {
            resp.headers_mut().insert(name, value);
        }
        resp
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        let p = self.problem();
        if p.status >= 500 {
            tracing::error!(error = %self, "request failed");
        }
        let extra = if matches!(self, Self::Unauthorized(_)) {
            Some((
                header::WWW_AUTHENTICATE,
                HeaderValue::from_static("Bearer realm=\"kinema\""),
            ))
        } else if p.status == 503 {
            Some((header::RETRY_AFTER, HeaderValue::from_static("1")))
        } else {
            None
        };
        p.into_response_with(extra)
    }
}

/// Middleware: an error response that is not already a problem (axum's own 404, 405,
/// 413 from the body limit, 503 from the timeout or load shedding, a caught panic)
/// becomes one, with the same status.
pub async fn problem_fallback(req: Request, next: Next) -> Response {
    let resp = next.run(req).await;
    let status = resp.status();
    if !(status.is_client_error() || status.is_server_error()) {
        return resp;
    }
    let is_problem = resp
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.starts_with(PROBLEM_JSON));
    if is_problem {
        return resp;
    }
    let (slug, title, detail) = match status {
        StatusCode::NOT_FOUND => (
            "not-found",
            "Not found",
            "no such resource or route".to_owned(),
        ),
        StatusCode::METHOD_NOT_ALLOWED => (
            "method-not-allowed",
            "Method not allowed",
            "this route does not accept that method".to_owned(),
        ),
        StatusCode::PAYLOAD_TOO_LARGE => (
            "too-large",
            "Request too large",
            "the request body is over the configured size limit (KINEMA_MAX_BODY_BYTES)".to_owned(),
        ),
        StatusCode::REQUEST_TIMEOUT => (
            "timeout",
            "Request timed out",
            "the request took longer than the configured limit (KINEMA_REQUEST_TIMEOUT_SECS)"
                .to_owned(),
        ),
        StatusCode::SERVICE_UNAVAILABLE => (
            "overloaded",
            "Service overloaded",
            "too many requests in progress (KINEMA_MAX_CONCURRENCY); retry later".to_owned(),
        ),
        s if s.is_server_error() => (
            "internal",
            "Internal error",
            "an internal error occurred; it has been logged".to_owned(),
        ),
        s => (
            "http-error",
            s.canonical_reason().unwrap_or("HTTP error"),
            format!("the request failed with status {}", s.as_u16()),
        ),
    };
    let mut out = problem(status, slug, title, detail, Vec::new()).into_response_with(None);
    // Keep headers such as Allow (405) or Retry-After.
    for (name, value) in resp.headers() {
        if name != header::CONTENT_TYPE && name != header::CONTENT_LENGTH {
            out.headers_mut().insert(name.clone(), value.clone());
        }
    }
    out
}
