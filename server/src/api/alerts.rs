//! `/v1/structures/{id}/alert-rules`, `…/alert-states`, `…/alert-events` and
//! `/v1/reference-strains`: a structure's alert rules (typed and validated in
//! [`crate::alerts::rule`]), the level each region is at under each rule, the log of
//! level changes, and reference strains of common materials for information.
//!
//! Thresholds are always the user's configuration: Kinema ships no limit values.

use std::collections::{HashMap, HashSet};

use axum::extract::{Path, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
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
use crate::alerts::StateData;
use crate::alerts::reference::{REFERENCE_CAUTION, ReferenceStrain, reference_strains};
use crate::alerts::rule::RuleDefinition;
use crate::model::{AlertEvent, AlertEventQuery, AlertRuleRecord, Scope, Structure, now_utc};
use crate::store::Written;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(create_rule, list_rules))
        .routes(routes!(get_rule, put_rule, delete_rule))
        .routes(routes!(list_states))
        .routes(routes!(list_events))
        .routes(routes!(list_reference_strains))
}

/// A stored alert rule: its ID and structure, the definition's members, and times.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct AlertRule {
    /// The rule's ID.
    pub id: Uuid,
    /// The structure's asset ID.
    pub structure_id: String,
    /// The definition, with its defaults stated (`sense`, `enabled`, `hysteresis`).
    #[serde(flatten)]
    pub definition: RuleDefinition,
    /// When the rule was created, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
    /// When the rule was last replaced, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub updated_at: OffsetDateTime,
}

impl AlertRule {
    fn of(r: AlertRuleRecord) -> Result<Self, ApiError> {
        let definition = RuleDefinition::of_record(&r).ok_or_else(|| {
            ApiError::Internal(format!("stored alert rule {} does not parse", r.id))
        })?;
        Ok(Self {
            id: r.id,
            structure_id: r.structure_id,
            definition,
            created_at: r.created_at,
            updated_at: r.updated_at,
        })
    }
}

/// The alert rules of a structure.
#[derive(Debug, Serialize, ToSchema)]
pub struct AlertRuleList {
    /// The rules, oldest first.
    pub items: Vec<AlertRule>,
}

/// The rule ID from the path, or a 422 naming it.
fn rule_id(raw: &str) -> Result<Uuid, ApiError> {
    super::extract::path_uuid("/rule_id", raw)
}

/// Validate `body` for structure `s` (point IDs of the scope must be its points) and
/// give the definition as it is stored.
async fn checked(
    state: &AppState,
    s: &Structure,
    body: RuleDefinition,
) -> Result<RuleDefinition, ApiError> {
    let wants_points = body.scope.as_ref().is_some_and(|sc| !sc.points.is_empty());
    let points: HashSet<String> = if wants_points {
        state
            .store
            .list_points(&s.id)
            .await?
            .into_iter()
            .map(|p| p.id)
            .collect()
    } else {
        HashSet::new()
    };
    let errs = body.validate(s.dimension, &|p| points.contains(p));
    if !errs.is_empty() {
        return Err(ApiError::fields(errs));
    }
    Ok(body.normalised())
}

/// Store the rule and answer with it as stored.
async fn store_rule(
    state: &AppState,
    s: &Structure,
    id: Uuid,
    def: RuleDefinition,
) -> Result<(Written, AlertRule), ApiError> {
    let now = now_utc();
    let record = AlertRuleRecord {
        id,
        structure_id: s.id.clone(),
        definition: def.to_json(),
        created_at: now,
        updated_at: now,
    };
    let written = state.store.put_alert_rule(&record).await?;
    let stored = state
        .store
        .get_alert_rule(&s.id, id)
        .await?
        .ok_or_else(|| ApiError::Internal(format!("alert rule {id} vanished after its put")))?;
    Ok((written, AlertRule::of(stored)?))
}

fn created(rule: AlertRule) -> Response {
    let location = format!(
        "/v1/structures/{}/alert-rules/{}",
        rule.structure_id, rule.id
    );
    let mut resp = (StatusCode::CREATED, axum::Json(rule)).into_response();
    if let Ok(v) = HeaderValue::from_str(&location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    resp
}

/// Create an alert rule of a structure.
///
/// A rule watches one quantity of every region in its scope (`principal_tensile`,
/// `principal_compressive`, `max_shear`, `volumetric`, `axial` along a named axis, or
/// the `strain_rate` of one of them), turned into a magnitude by its `sense` and
/// compared with its levels' thresholds in its `unit`, with hysteresis and, if asked,
/// a significance test. Every finished analysis of the structure is evaluated
/// against its rules; level changes are recorded as alert events.
///
/// Thresholds are the user's configuration: Kinema ships no limit values. Results are
/// kinematic estimates from measured displacements, not a structural assessment; set
/// thresholds from the design, the assessment and local codes with the responsible
/// engineer, and defer to licensed practice.
#[utoipa::path(post, path = "/v1/structures/{id}/alert-rules", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID")),
    request_body = RuleDefinition,
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Created", body = AlertRule,
            headers(("Location" = String, description = "URL of the rule"))),
        (status = 400, description = "Not JSON (JSON has no NaN or Infinity)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields, each with a pointer: unknown quantity, missing axis, thresholds not positive or not increasing, hysteresis too large, unknown point", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn create_rule(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiJson(body): ApiJson<RuleDefinition>,
) -> Result<Response, ApiError> {
    let s = caller.structure(&state, Scope::Write, &id).await?;
    let def = checked(&state, &s, body).await?;
    let (_, rule) = store_rule(&state, &s, Uuid::new_v4(), def).await?;
    Ok(created(rule))
}

/// The alert rules of a structure, oldest first.
///
/// Thresholds are the user's configuration: Kinema ships no limit values; results are
/// kinematic estimates, not a structural assessment.
#[utoipa::path(get, path = "/v1/structures/{id}/alert-rules", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The rules", body = AlertRuleList),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_rules(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<axum::Json<AlertRuleList>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let items = state
        .store
        .list_alert_rules(&id)
        .await?
        .into_iter()
        .map(AlertRule::of)
        .collect::<Result<_, _>>()?;
    Ok(axum::Json(AlertRuleList { items }))
}

/// One alert rule.
///
/// Thresholds are the user's configuration: Kinema ships no limit values; results are
/// kinematic estimates, not a structural assessment.
#[utoipa::path(get, path = "/v1/structures/{id}/alert-rules/{rule_id}", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID"),
           ("rule_id" = String, Path, description = "The rule's UUID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The rule", body = AlertRule),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure or rule (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The rule ID is not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_rule(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, rule)): Path<(String, String)>,
) -> Result<axum::Json<AlertRule>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let rid = rule_id(&rule)?;
    let r = state
        .store
        .get_alert_rule(&id, rid)
        .await?
        .ok_or_else(|| ApiError::NotFound(format!("structure {id} has no alert rule {rid}")))?;
    Ok(axum::Json(AlertRule::of(r)?))
}

/// Create the alert rule with this ID, or replace it.
///
/// Replacing keeps the rule's creation time and the current states of its regions (a
/// region's level is re-evaluated against the new definition at the next analysis).
/// An ID that belongs to a rule of another structure is a 409.
///
/// Thresholds are the user's configuration: Kinema ships no limit values. Results are
/// kinematic estimates from measured displacements, not a structural assessment; set
/// thresholds from the design, the assessment and local codes with the responsible
/// engineer, and defer to licensed practice.
#[utoipa::path(put, path = "/v1/structures/{id}/alert-rules/{rule_id}", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID"),
           ("rule_id" = String, Path, description = "The rule's UUID")),
    request_body = RuleDefinition,
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Created", body = AlertRule,
            headers(("Location" = String, description = "URL of the rule"))),
        (status = 200, description = "Replaced", body = AlertRule),
        (status = 400, description = "Not JSON (JSON has no NaN or Infinity)", body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "The ID belongs to a rule of another structure", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The rule ID is not a UUID, or invalid fields (each with a pointer)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn put_rule(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, rule)): Path<(String, String)>,
    ApiJson(body): ApiJson<RuleDefinition>,
) -> Result<Response, ApiError> {
    let s = caller.structure(&state, Scope::Write, &id).await?;
    let rid = rule_id(&rule)?;
    let def = checked(&state, &s, body).await?;
    let (written, rule) = store_rule(&state, &s, rid, def).await?;
    Ok(match written {
        Written::Created => created(rule),
        Written::Updated => axum::Json(rule).into_response(),
    })
}

/// Delete an alert rule with the states of its regions; its events stay in the log.
#[utoipa::path(delete, path = "/v1/structures/{id}/alert-rules/{rule_id}", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID"),
           ("rule_id" = String, Path, description = "The rule's UUID")),
    security(("api_key" = [])),
    responses(
        (status = 204, description = "Deleted"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure or rule", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "The rule ID is not a UUID", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn delete_rule(
    State(state): State<AppState>,
    caller: Caller,
    Path((id, rule)): Path<(String, String)>,
) -> Result<StatusCode, ApiError> {
    caller.structure(&state, Scope::Write, &id).await?;
    let rid = rule_id(&rule)?;
    if state.store.delete_alert_rule(&id, rid).await? {
        Ok(StatusCode::NO_CONTENT)
    } else {
        Err(ApiError::NotFound(format!(
            "structure {id} has no alert rule {rid}"
        )))
    }
}

/// The alert state of one region under one rule.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct AlertStateItem {
    /// The rule.
    pub rule_id: Uuid,
    /// The rule's name.
    pub rule_name: String,
    /// The region's label in the result (element ID, group name, point ID, grid node).
    pub region: String,
    /// The level index: 0 = below every level, 1 = the rule's first level, …
    pub level: u32,
    /// The level's name; `null` at level 0.
    pub level_name: Option<String>,
    /// The last evaluated value of the watched quantity, signed (extension positive),
    /// in `unit`; `null` when there was none (a rate at its first evaluation).
    pub value: Option<f64>,
    /// Its standard deviation, in `unit`; `null` when the result had none.
    pub sd: Option<f64>,
    /// Unit of `value` and `sd`: `strain`, `microstrain`, or either with `_per_day`
    /// for a strain rate.
    pub unit: String,
    /// Whether a crossing is held back as not statistically significant.
    pub suppressed: bool,
    /// The epoch evaluated (an epoch analysis's epoch, a series' last epoch), RFC 3339
    /// UTC.
    #[serde(with = "time::serde::rfc3339::option")]
    pub epoch: Option<OffsetDateTime>,
    /// The analysis evaluated.
    pub analysis_id: Option<Uuid>,
    /// When the state was last written, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub updated_at: OffsetDateTime,
}

/// The alert states of a structure.
#[derive(Debug, Serialize, ToSchema)]
pub struct AlertStateList {
    /// States by rule, then region.
    pub items: Vec<AlertStateItem>,
}

/// The current alert state of every region under every rule of a structure.
///
/// Values are kinematic estimates from measured displacements, not a structural
/// assessment; the levels are the user's configuration (Kinema ships no limit values).
#[utoipa::path(get, path = "/v1/structures/{id}/alert-states", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The states", body = AlertStateList),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_states(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<axum::Json<AlertStateList>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let rules: HashMap<Uuid, RuleDefinition> = state
        .store
        .list_alert_rules(&id)
        .await?
        .iter()
        .filter_map(|r| Some((r.id, RuleDefinition::of_record(r)?)))
        .collect();
    let items = state
        .store
        .list_alert_states(&id)
        .await?
        .into_iter()
        .filter_map(|s| {
            let def = rules.get(&s.rule_id)?;
            let data = StateData::of(&s);
            let level_name = usize::try_from(s.level)
                .ok()
                .and_then(|k| k.checked_sub(1))
                .and_then(|k| def.levels.get(k))
                .map(|l| l.name.clone());
            Some(AlertStateItem {
                rule_id: s.rule_id,
                rule_name: def.name.clone(),
                region: s.region,
                level: s.level,
                level_name,
                value: data.value,
                sd: data.sd,
                unit: data.unit.unwrap_or_else(|| def.value_unit()),
                suppressed: data.suppressed,
                epoch: data.epoch,
                analysis_id: data.analysis_id,
                updated_at: s.updated_at,
            })
        })
        .collect();
    Ok(axum::Json(AlertStateList { items }))
}

/// Filters and paging of the alert event log.
#[derive(Debug, Clone, Default, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct AlertEventFilter {
    /// Only events of this rule (UUID).
    #[serde(default)]
    pub rule_id: Option<Uuid>,
    /// Only events of this region (its label).
    #[serde(default)]
    pub region: Option<String>,
    /// `next_cursor` of the previous page; absent for the first page.
    pub cursor: Option<String>,
    /// Items per page, 1–1000 (default 100).
    pub limit: Option<usize>,
}

/// A page of alert events.
#[derive(Debug, Serialize, ToSchema)]
pub struct AlertEventPage {
    /// Events oldest first (by `seq`). Each event's `evidence` states the value, its
    /// standard deviation and their `unit`.
    pub items: Vec<AlertEvent>,
    /// Pass as `cursor` to get the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// The alert event log of a structure, oldest first: levels raised and cleared, and
/// crossings held back as not significant, each with its evidence (rule, quantity,
/// sense, unit, value, standard deviation, magnitude, thresholds crossed, level names,
/// hysteresis, significance test, epoch, analysis and method).
///
/// Evidence values are kinematic estimates from measured displacements, not a
/// structural assessment; the levels are the user's configuration (Kinema ships no
/// limit values). Defer to local codes and licensed practice.
#[utoipa::path(get, path = "/v1/structures/{id}/alert-events", tag = "alerts",
    params(("id" = String, Path, description = "The client's asset ID"), AlertEventFilter),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "A page of events", body = AlertEventPage),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad rule ID, cursor or limit", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_events(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiQuery(f): ApiQuery<AlertEventFilter>,
) -> Result<axum::Json<AlertEventPage>, ApiError> {
    caller.structure(&state, Scope::Read, &id).await?;
    let page = PageQuery {
        cursor: f.cursor.clone(),
        limit: f.limit,
    };
    let limit = page.limit()?;
    let after_seq: Option<i64> = page.after()?;
    let mut items = state
        .store
        .list_alert_events(
            &id,
            &AlertEventQuery {
                rule_id: f.rule_id,
                region: f.region,
                after_seq,
                limit: limit + 1,
            },
        )
        .await?;
    let next_cursor = Page::from_overfetch(&mut items, limit, |e| e.seq);
    Ok(axum::Json(AlertEventPage { items, next_cursor }))
}

/// The reference strains.
#[derive(Debug, Serialize, ToSchema)]
pub struct ReferenceStrainList {
    /// Information only; not a limit value.
    pub caution: &'static str,
    /// The reference strains, steel first.
    pub items: Vec<ReferenceStrain>,
}

/// Reference strains of common materials, for information: the yield strain of
/// structural steels and the strain at the mean tensile strength of concretes, each
/// with its inputs (strength and modulus, with units) and their source.
///
/// Information only; not a limit value; set thresholds from the design, the
/// assessment and local codes with the responsible engineer. Kinema never uses them
/// as thresholds.
#[utoipa::path(get, path = "/v1/reference-strains", tag = "alerts",
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The reference strains", body = ReferenceStrainList),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_reference_strains(_caller: Caller) -> axum::Json<ReferenceStrainList> {
    axum::Json(ReferenceStrainList {
        caution: REFERENCE_CAUTION,
        items: reference_strains(),
    })
}
