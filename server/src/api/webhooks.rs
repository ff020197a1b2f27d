//! `/v1/webhooks`: webhook subscriptions and their delivery log, for admin keys
//! (webhooks are integration configuration).
//!
//! A key limited to some structures sees only the subscriptions of those structures and
//! can create subscriptions only for them; the others look to it as if they did not
//! exist (404), like structures.

use axum::extract::{Path, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;
use uuid::Uuid;

use super::AppState;
use super::auth::Caller;
use super::extract::{ApiJson, ApiQuery};
use super::page::{Page, PageQuery};
use super::problem::{ApiError, FieldError, Problem};
use crate::model::{
    Delivery, DeliveryAttempt, DeliveryQuery, DeliveryStatus, EventType, Scope, Subscription,
    id_problem, now_utc,
};
use crate::store::StoreError;
use crate::webhooks::policy::check_url;
use crate::webhooks::sign::new_secret;

/// Longest description, characters.
pub const MAX_DESCRIPTION: usize = 500;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(create_subscription, list_subscriptions))
        .routes(routes!(get_subscription, delete_subscription))
        .routes(routes!(list_deliveries))
        .routes(routes!(get_delivery))
        .routes(routes!(replay_delivery))
}

/// Body of `POST /v1/webhooks`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SubscriptionInput {
    /// Where events are POSTed: an absolute `http` or `https` URL of at most 2048
    /// characters, without user name, password or fragment. A literal IP address (and
    /// `localhost`) must be allowed by the server's `KINEMA_WEBHOOK_ALLOW`; a host name
    /// is checked against it each time it is resolved.
    pub url: String,
    /// The event types to send, at least one: `analysis.finished`, `analysis.failed`,
    /// `alert.raised`, `alert.cleared`.
    #[schema(value_type = Vec<EventType>)]
    pub events: Vec<String>,
    /// Only events of this structure; absent for the events of every structure (which
    /// needs a key not limited to some structures).
    #[serde(default)]
    pub structure_id: Option<String>,
    /// What the subscription is for (free text, at most 500 characters).
    #[serde(default)]
    pub description: String,
}

/// A new subscription and its signing secret.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct CreatedSubscription {
    /// The stored subscription (without the secret).
    pub subscription: Subscription,
    /// The signing secret: the HMAC-SHA256 key of the `Kinema-Signature` header (its
    /// UTF-8 bytes as shown). It is shown only in this response.
    pub secret: String,
}

/// A page of deliveries.
#[derive(Debug, Serialize, ToSchema)]
pub struct DeliveryPage {
    /// Deliveries oldest first, by `seq`.
    pub items: Vec<Delivery>,
    /// Pass as `cursor` to get the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// A delivery with its attempts.
#[derive(Debug, Serialize, ToSchema)]
pub struct DeliveryDetail {
    /// The delivery.
    pub delivery: Delivery,
    /// Its attempts, oldest first.
    pub attempts: Vec<DeliveryAttempt>,
}

/// Filter of the subscription list.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct SubscriptionFilter {
    /// Only the subscriptions of this structure (not the ones for every structure).
    pub structure_id: Option<String>,
}

/// Filter and paging of the delivery list.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct DeliveryFilter {
    /// Only deliveries with this status: `pending`, `delivered` or `failed`.
    #[serde(default)]
    pub status: Option<DeliveryStatus>,
    /// `next_cursor` of the previous page; absent for the first page.
    pub cursor: Option<String>,
    /// Items per page, 1–1000 (default 100).
    pub limit: Option<usize>,
}

/// Whether the caller's key may see `s`: an unrestricted key sees every subscription, a
/// limited one those of its structures.
fn visible(caller: &Caller, s: &Subscription) -> bool {
    match (&caller.key.structures, &s.structure_id) {
        (None, _) => true,
        (Some(_), Some(id)) => caller.key.sees(id),
        (Some(_), None) => false,
    }
}

fn no_subscription(id: Uuid) -> ApiError {
    ApiError::NotFound(format!("no webhook subscription has ID {id}"))
}

/// The subscription `raw` if it exists and the caller may see it (admin scope).
async fn find(state: &AppState, caller: &Caller, raw: &str) -> Result<Subscription, ApiError> {
    caller.require(Scope::Admin)?;
    let id = super::extract::path_uuid("/webhook_id", raw)?;
    state
        .store
        .get_subscription(id)
        .await?
        .filter(|s| visible(caller, s))
        .ok_or_else(|| no_subscription(id))
}

/// The event types of a request, or the bad entries.
fn parse_events(raw: &[String], errs: &mut Vec<FieldError>) -> Vec<EventType> {
    let types = EventType::ALL.map(EventType::as_str).join(", ");
    if raw.is_empty() {
        errs.push(FieldError::new(
            "/events",
            format!("give at least one event type: {types}"),
        ));
    }
    let mut out = Vec::new();
    for (i, name) in raw.iter().enumerate() {
        match EventType::parse(name) {
            Some(t) if out.contains(&t) => errs.push(FieldError::new(
                format!("/events/{i}"),
                format!("{name} is listed twice"),
            )),
            Some(t) => out.push(t),
            None => errs.push(FieldError::new(
                format!("/events/{i}"),
                format!("unknown event type {name:?}; the types are {types}"),
            )),
        }
    }
    out
}

/// Subscribe a URL to events; the signing secret is in this response only.
///
/// Events are POSTed as JSON with the headers `Kinema-Event-Id`, `Kinema-Event-Type`,
/// `Kinema-Delivery-Id`, `Kinema-Delivery-Attempt`, `Kinema-Timestamp` and
/// `Kinema-Signature: sha256=<hex HMAC-SHA256(secret, "{timestamp}.{body}")>`; a 2xx
/// answer is a delivery, anything else is retried with back-off.
#[utoipa::path(post, path = "/v1/webhooks", tag = "webhooks",
    request_body = SubscriptionInput,
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Created", body = CreatedSubscription,
            headers(("Location" = String, description = "URL of the subscription"))),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key, or a limited key without `structure_id`", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields: URL, a denied address, event types, an unknown structure", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn create_subscription(
    State(state): State<AppState>,
    caller: Caller,
    ApiJson(body): ApiJson<SubscriptionInput>,
) -> Result<Response, ApiError> {
    caller.require(Scope::Admin)?;
    if body.structure_id.is_none() && caller.key.structures.is_some() {
        return Err(ApiError::Forbidden(
            "a key limited to some structures subscribes only to their events; give structure_id"
                .into(),
        ));
    }
    let mut errs = Vec::new();
    let url = match check_url(&body.url, &state.settings.webhooks.allow) {
        Ok(u) => Some(u),
        Err(e) => {
            errs.push(FieldError::new("/url", e.to_string()));
            None
        }
    };
    let events = parse_events(&body.events, &mut errs);
    if body.description.chars().count() > MAX_DESCRIPTION {
        errs.push(FieldError::new(
            "/description",
            format!("a description has at most {MAX_DESCRIPTION} characters"),
        ));
    }
    if let Some(id) = &body.structure_id {
        if let Some(p) = id_problem(id) {
            errs.push(FieldError::new("/structure_id", p));
        } else if !caller.key.sees(id) || state.store.get_structure(id).await?.is_none() {
            errs.push(FieldError::new(
                "/structure_id",
                format!("structure {id} does not exist"),
            ));
        }
    }
    let Some(url) = url.filter(|_| errs.is_empty()) else {
        return Err(ApiError::fields(errs));
    };
    let secret = new_secret().map_err(|e| ApiError::Internal(format!("random source: {e}")))?;
    let sub = Subscription {
        id: Uuid::new_v4(),
        structure_id: body.structure_id,
        url: url.to_string(),
        events,
        description: body.description,
        secret: secret.clone(),
        created_at: now_utc(),
    };
    state
        .store
        .insert_subscription(&sub)
        .await
        .map_err(|e| match e {
            // The structure was deleted meanwhile.
            StoreError::NotFound(m) => ApiError::field("/structure_id", m),
            other => other.into(),
        })?;
    let location = format!("/v1/webhooks/{}", sub.id);
    let mut resp = (
        StatusCode::CREATED,
        axum::Json(CreatedSubscription {
            subscription: sub,
            secret,
        }),
    )
        .into_response();
    if let Ok(v) = HeaderValue::from_str(&location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}

/// The subscriptions the key may see, oldest first (never their secrets).
#[utoipa::path(get, path = "/v1/webhooks", tag = "webhooks",
    params(SubscriptionFilter),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The subscriptions", body = Vec<Subscription>),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "A `structure_id` that is not an ID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_subscriptions(
    State(state): State<AppState>,
    caller: Caller,
    ApiQuery(f): ApiQuery<SubscriptionFilter>,
) -> Result<axum::Json<Vec<Subscription>>, ApiError> {
    caller.require(Scope::Admin)?;
    if let Some(p) = f.structure_id.as_deref().and_then(id_problem) {
        return Err(ApiError::field("/structure_id", p));
    }
    let list = state
        .store
        .list_subscriptions(f.structure_id.as_deref())
        .await?
        .into_iter()
        .filter(|s| visible(&caller, s))
        .collect();
    Ok(axum::Json(list))
}

/// One subscription (never its secret).
#[utoipa::path(get, path = "/v1/webhooks/{webhook_id}", tag = "webhooks",
    params(("webhook_id" = Uuid, Path, description = "The subscription's ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The subscription", body = Subscription),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such subscription (or outside the key's structures)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_subscription(
    State(state): State<AppState>,
    caller: Caller,
    Path(raw): Path<String>,
) -> Result<axum::Json<Subscription>, ApiError> {
    find(&state, &caller, &raw).await.map(axum::Json)
}

/// Delete a subscription with its deliveries and their log; nothing more is sent to it
/// (except, at most, an attempt already in progress).
#[utoipa::path(delete, path = "/v1/webhooks/{webhook_id}", tag = "webhooks",
    params(("webhook_id" = Uuid, Path, description = "The subscription's ID")),
    security(("api_key" = [])),
    responses(
        (status = 204, description = "Deleted"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such subscription (or outside the key's structures)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn delete_subscription(
    State(state): State<AppState>,
    caller: Caller,
    Path(raw): Path<String>,
) -> Result<StatusCode, ApiError> {
    let sub = find(&state, &caller, &raw).await?;
    if state.store.delete_subscription(sub.id).await? {
        Ok(StatusCode::NO_CONTENT)
    } else {
        Err(no_subscription(sub.id))
    }
}

/// The deliveries of a subscription, oldest first (by `seq`).
#[utoipa::path(get, path = "/v1/webhooks/{webhook_id}/deliveries", tag = "webhooks",
    params(("webhook_id" = Uuid, Path, description = "The subscription's ID"), DeliveryFilter),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "A page of deliveries", body = DeliveryPage),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such subscription (or outside the key's structures)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a UUID, an unknown status, a bad cursor or limit", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_deliveries(
    State(state): State<AppState>,
    caller: Caller,
    Path(raw): Path<String>,
    ApiQuery(f): ApiQuery<DeliveryFilter>,
) -> Result<axum::Json<DeliveryPage>, ApiError> {
    let sub = find(&state, &caller, &raw).await?;
    let page = PageQuery {
        cursor: f.cursor,
        limit: f.limit,
    };
    let limit = page.limit()?;
    let after_seq: Option<i64> = page.after()?;
    let mut items = state
        .store
        .list_deliveries(
            sub.id,
            &DeliveryQuery {
                status: f.status,
                after_seq,
                limit: limit + 1,
            },
        )
        .await?;
    let next_cursor = Page::from_overfetch(&mut items, limit, |d| d.seq);
    Ok(axum::Json(DeliveryPage { items, next_cursor }))
}

/// One delivery of a subscription, with its attempts.
#[utoipa::path(get, path = "/v1/webhooks/{webhook_id}/deliveries/{delivery_id}", tag = "webhooks",
    params(("webhook_id" = Uuid, Path, description = "The subscription's ID"),
           ("delivery_id" = Uuid, Path, description = "The delivery's ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The delivery and its attempts", body = DeliveryDetail),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such subscription or delivery", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_delivery(
    State(state): State<AppState>,
    caller: Caller,
    Path((raw, raw_delivery)): Path<(String, String)>,
) -> Result<axum::Json<DeliveryDetail>, ApiError> {
    let sub = find(&state, &caller, &raw).await?;
    let id = super::extract::path_uuid("/delivery_id", &raw_delivery)?;
    let (delivery, attempts) = state
        .store
        .get_delivery(sub.id, id)
        .await?
        .ok_or_else(|| no_delivery(sub.id, id))?;
    Ok(axum::Json(DeliveryDetail { delivery, attempts }))
}

fn no_delivery(sub: Uuid, id: Uuid) -> ApiError {
    ApiError::NotFound(format!("webhook subscription {sub} has no delivery {id}"))
}

/// Send a delivery's event again: a new delivery of the same event (same event ID and
/// body), at the end of the subscription's order, due now.
#[utoipa::path(post, path = "/v1/webhooks/{webhook_id}/deliveries/{delivery_id}/replay", tag = "webhooks",
    params(("webhook_id" = Uuid, Path, description = "The subscription's ID"),
           ("delivery_id" = Uuid, Path, description = "The delivery whose event is sent again")),
    security(("api_key" = [])),
    responses(
        (status = 202, description = "Queued: the new delivery", body = Delivery,
            headers(("Location" = String, description = "URL of the new delivery"))),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "Not an admin key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such subscription or delivery", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn replay_delivery(
    State(state): State<AppState>,
    caller: Caller,
    Path((raw, raw_delivery)): Path<(String, String)>,
) -> Result<Response, ApiError> {
    let sub = find(&state, &caller, &raw).await?;
    let id = super::extract::path_uuid("/delivery_id", &raw_delivery)?;
    let delivery = state
        .store
        .replay_delivery(sub.id, id, now_utc())
        .await?
        .ok_or_else(|| no_delivery(sub.id, id))?;
    let location = format!("/v1/webhooks/{}/deliveries/{}", sub.id, delivery.id);
    let mut resp = (StatusCode::ACCEPTED, axum::Json(delivery)).into_response();
    if let Ok(v) = HeaderValue::from_str(&location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    Ok(resp)
}
