//! `/v1/keys`: API key management over HTTP, for an unrestricted admin key (the same
//! operations as `kinema keys create|list|revoke`).

use axum::extract::{Path, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;
use uuid::Uuid;

use super::AppState;
use super::auth::Caller;
use super::extract::ApiJson;
use super::problem::{ApiError, FieldError, Problem};
use crate::keys::new_key;
use crate::model::{ApiKey, Scope, id_problem};

/// Longest key label, characters.
pub const MAX_LABEL: usize = 200;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(list_keys, create_key))
        .routes(routes!(get_key, revoke_key))
}

/// Key management needs the admin scope and a key not limited to some structures (a
/// limited key could otherwise mint keys for structures it cannot see).
fn require_key_admin(caller: &Caller) -> Result<(), ApiError> {
    caller.require(Scope::Admin)?;
    if caller.key.structures.is_some() {
        return Err(ApiError::Forbidden(
            "managing keys needs an admin key that is not limited to some structures".into(),
        ));
    }
    Ok(())
}

/// Body of `POST /v1/keys`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct KeyInput {
    /// A label for people: who or what uses the key (at most 200 characters).
    #[serde(default)]
    pub label: String,
    /// Access level: `read`, `write` or `admin` (each includes the ones before it).
    pub scope: Scope,
    /// Limit the key to these structure IDs; absent for all structures.
    #[serde(default)]
    pub structures: Option<Vec<String>>,
}

/// A new key and its token.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct CreatedKey {
    /// The stored key (without the token).
    pub key: ApiKey,
    /// The bearer token. It is shown only in this response; Kinema keeps only its SHA-256.
    pub token: String,
}

/// Create an API key; the token is in this response only.
#[utoipa::path(post, path = "/v1/keys", tag = "keys",
    request_body = KeyInput,
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Created", body = CreatedKey,
            headers(("Location" = String, description = "URL of the key"))),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an unrestricted admin key", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn create_key(
    State(state): State<AppState>,
    caller: Caller,
    ApiJson(body): ApiJson<KeyInput>,
) -> Result<Response, ApiError> {
    require_key_admin(&caller)?;
    let mut errs = Vec::new();
    if body.label.chars().count() > MAX_LABEL {
        errs.push(FieldError::new(
            "/label",
            format!("a label has at most {MAX_LABEL} characters"),
        ));
    }
    if let Some(list) = &body.structures {
        if list.is_empty() {
            errs.push(FieldError::new(
                "/structures",
                "give at least one structure ID, or leave the field out for all structures",
            ));
        }
        for (i, id) in list.iter().enumerate() {
            if let Some(p) = id_problem(id) {
                errs.push(FieldError::new(format!("/structures/{i}"), p));
            }
        }
    }
    if !errs.is_empty() {
        return Err(ApiError::fields(errs));
    }
    let (token, key) = new_key(&body.label, body.scope, body.structures)
        .map_err(|e| ApiError::Internal(format!("random source: {e}")))?;
    state.store.insert_key(&key).await?;
    let location = format!("/v1/keys/{}", key.id);
    let mut resp = (StatusCode::CREATED, axum::Json(CreatedKey { key, token })).into_response();
    if let Ok(v) = HeaderValue::from_str(&location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}

/// All keys, oldest first (never the tokens).
#[utoipa::path(get, path = "/v1/keys", tag = "keys",
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The keys", body = Vec<ApiKey>),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an unrestricted admin key", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_keys(
    State(state): State<AppState>,
    caller: Caller,
) -> Result<axum::Json<Vec<ApiKey>>, ApiError> {
    require_key_admin(&caller)?;
    Ok(axum::Json(state.store.list_keys().await?))
}

/// The key's ID from the path, or a 422 naming it.
fn key_id(raw: &str) -> Result<Uuid, ApiError> {
    super::extract::path_uuid("/key_id", raw)
}

/// One key (never its token), revoked or not; the `Location` of a created key.
#[utoipa::path(get, path = "/v1/keys/{key_id}", tag = "keys",
    params(("key_id" = Uuid, Path, description = "The key's ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The key", body = ApiKey),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an unrestricted admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No key has this ID", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_key(
    State(state): State<AppState>,
    caller: Caller,
    Path(raw): Path<String>,
) -> Result<axum::Json<ApiKey>, ApiError> {
    require_key_admin(&caller)?;
    let id = key_id(&raw)?;
    state
        .store
        .list_keys()
        .await?
        .into_iter()
        .find(|k| k.id == id)
        .map(axum::Json)
        .ok_or_else(|| ApiError::NotFound(format!("no key has ID {id}")))
}

/// Revoke a key; it gets 401 from then on.
#[utoipa::path(delete, path = "/v1/keys/{key_id}", tag = "keys",
    params(("key_id" = Uuid, Path, description = "The key's ID")),
    security(("api_key" = [])),
    responses(
        (status = 204, description = "Revoked"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an unrestricted admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No valid key has this ID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn revoke_key(
    State(state): State<AppState>,
    caller: Caller,
    Path(raw): Path<String>,
) -> Result<StatusCode, ApiError> {
    require_key_admin(&caller)?;
    let key_id = key_id(&raw)?;
    if state.store.revoke_key(key_id).await? {
        Ok(StatusCode::NO_CONTENT)
    } else {
        Err(ApiError::NotFound(format!("no valid key has ID {key_id}")))
    }
}
