//! `/v1/structures`: structures keyed by the client's asset ID, and their monitoring
//! points.

use axum::extract::{Path, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use kinema_core::geodesy::{EnuFrame, Geodetic};
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::AppState;
use super::auth::{Caller, not_found};
use super::extract::{ApiJson, ApiQuery};
use super::page::{Page, PageQuery};
use super::problem::{ApiError, FieldError, Problem};
use crate::model::{
    Frame, Material, Scope, StoredPoint, Structure, WgsOrigin, id_problem, now_utc,
};
use crate::store::Written;
use crate::units::LengthUnit;

/// Largest serialised `metadata`, bytes.
pub const MAX_METADATA_BYTES: usize = 16 * 1024;

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(list_structures))
        .routes(routes!(get_structure, put_structure, delete_structure))
        .routes(routes!(get_points, put_points))
}

/// Body of `PUT /v1/structures/{id}`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct StructureInput {
    /// Name for people, 1–200 characters.
    pub name: String,
    /// 2 (plane network: x, y) or 3 (spatial network: x, y, z). It cannot change once
    /// the structure has points.
    pub dimension: u8,
    /// Frame of the coordinates and displacements.
    pub frame: Frame,
    /// Unit of the structure's coordinates, displacements and standard deviations in
    /// the API: `m` or `mm`.
    pub length_unit: LengthUnit,
    /// Elastic constants, when stresses are wanted.
    #[serde(default)]
    pub material: Option<Material>,
    /// Free-form JSON object for the asset-management system's own keys (at most
    /// 16 KiB serialised); stored and returned unchanged.
    #[serde(default = "empty_object")]
    #[schema(value_type = Object)]
    pub metadata: serde_json::Value,
}

fn empty_object() -> serde_json::Value {
    serde_json::Value::Object(serde_json::Map::new())
}

fn finite(v: f64) -> bool {
    v.is_finite()
}

/// Check a structure body; every bad field is reported.
fn validate_structure(s: &StructureInput) -> Result<(), ApiError> {
    let mut errs = Vec::new();
    let name_len = s.name.chars().count();
    if s.name.trim().is_empty() || name_len > 200 {
        errs.push(FieldError::new(
            "/name",
            "the name must have 1 to 200 characters",
        ));
    }
    if !matches!(s.dimension, 2 | 3) {
        errs.push(FieldError::new(
            "/dimension",
            format!("the dimension is 2 or 3, not {}", s.dimension),
        ));
    }
    if let Frame::Enu { origin } = &s.frame {
        errs.extend(origin_errors(origin, "/frame/origin"));
    }
    if let Some(m) = &s.material {
        if !(finite(m.youngs_modulus_gpa) && m.youngs_modulus_gpa > 0.0) {
            errs.push(FieldError::new(
                "/material/youngs_modulus_gpa",
                "Young's modulus must be a positive number of GPa",
            ));
        }
        if !(finite(m.poisson_ratio) && m.poisson_ratio > -1.0 && m.poisson_ratio < 0.5) {
            errs.push(FieldError::new(
                "/material/poisson_ratio",
                "Poisson's ratio must lie strictly between -1 and 0.5",
            ));
        }
    }
    if !s.metadata.is_object() {
        errs.push(FieldError::new(
            "/metadata",
            "metadata must be a JSON object",
        ));
    } else if serde_json::to_vec(&s.metadata).map_or(0, |v| v.len()) > MAX_METADATA_BYTES {
        errs.push(FieldError::new(
            "/metadata",
            format!("metadata must serialise to at most {MAX_METADATA_BYTES} bytes"),
        ));
    }
    if errs.is_empty() {
        Ok(())
    } else {
        Err(ApiError::fields(errs))
    }
}

/// Problems of a WGS84 position at `at`.
pub fn origin_errors(o: &WgsOrigin, at: &str) -> Vec<FieldError> {
    let mut errs = Vec::new();
    if !(finite(o.lat_deg) && o.lat_deg.abs() <= 90.0) {
        errs.push(FieldError::new(
            format!("{at}/lat_deg"),
            "latitude must be a number of degrees from -90 to 90",
        ));
    }
    if !(finite(o.lon_deg) && o.lon_deg.abs() <= 180.0) {
        errs.push(FieldError::new(
            format!("{at}/lon_deg"),
            "longitude must be a number of degrees from -180 to 180",
        ));
    }
    if !(finite(o.h_m) && o.h_m.abs() < 1.0e5) {
        errs.push(FieldError::new(
            format!("{at}/h_m"),
            "height must be a number of metres within ±100 km",
        ));
    }
    errs
}

/// The path ID, checked against the ID rules.
fn path_id(id: &str) -> Result<(), ApiError> {
    match id_problem(id) {
        Some(p) => Err(ApiError::field("/id", p)),
        None => Ok(()),
    }
}

/// Create or replace a structure.
///
/// The ID is the client's own asset ID. Replacing keeps the creation time and the
/// points; the dimension and the frame cannot change once the structure has points (409).
#[utoipa::path(put, path = "/v1/structures/{id}", tag = "structures",
    params(("id" = String, Path, description = "The client's asset ID (1–64 characters of A-Za-z0-9._-)")),
    request_body = StructureInput,
    security(("api_key" = [])),
    responses(
        (status = 201, description = "Created", body = Structure,
            headers(("Location" = String, description = "URL of the structure"))),
        (status = 200, description = "Replaced", body = Structure),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "Outside the key's structure list", body = Problem, content_type = "application/problem+json"),
        (status = 409, description = "Dimension or frame change of a structure with points", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn put_structure(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiJson(body): ApiJson<StructureInput>,
) -> Result<Response, ApiError> {
    caller.require(Scope::Write)?;
    path_id(&id)?;
    caller.may_see(&id)?;
    validate_structure(&body)?;
    let now = now_utc();
    let s = Structure {
        id: id.clone(),
        name: body.name,
        dimension: body.dimension,
        frame: body.frame,
        length_unit: body.length_unit,
        material: body.material,
        metadata: body.metadata,
        created_at: now,
        updated_at: now,
    };
    let (written, stored) = state.store.put_structure(&s).await?;
    let mut resp = axum::Json(stored).into_response();
    if written == Written::Created {
        *resp.status_mut() = StatusCode::CREATED;
        if let Ok(v) = HeaderValue::from_str(&format!("/v1/structures/{id}")) {
            resp.headers_mut().insert(header::LOCATION, v);
        }
    }
    Ok(resp)
}

/// One structure.
#[utoipa::path(get, path = "/v1/structures/{id}", tag = "structures",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The structure", body = Structure),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure (or outside the key's list)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_structure(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<axum::Json<Structure>, ApiError> {
    Ok(axum::Json(
        caller.structure(&state, Scope::Read, &id).await?,
    ))
}

/// Delete a structure with its points, batches, readings and analyses.
#[utoipa::path(delete, path = "/v1/structures/{id}", tag = "structures",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 204, description = "Deleted"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn delete_structure(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<StatusCode, ApiError> {
    caller.require(Scope::Write)?;
    caller.may_see(&id)?;
    if state.store.delete_structure(&id).await? {
        Ok(StatusCode::NO_CONTENT)
    } else {
        Err(not_found(&id))
    }
}

/// A page of structures.
#[derive(Debug, Serialize, ToSchema)]
pub struct StructurePage {
    /// Structures in ID order.
    pub items: Vec<Structure>,
    /// Pass as `cursor` to get the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// The structures the key may see, in ID order.
#[utoipa::path(get, path = "/v1/structures", tag = "structures",
    params(PageQuery),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "A page of structures", body = StructurePage),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Bad cursor or limit", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn list_structures(
    State(state): State<AppState>,
    caller: Caller,
    ApiQuery(q): ApiQuery<PageQuery>,
) -> Result<axum::Json<StructurePage>, ApiError> {
    caller.require(Scope::Read)?;
    let limit = q.limit()?;
    let after: Option<String> = q.after()?;
    let mut items = state
        .store
        .list_structures(
            after.as_deref(),
            limit + 1,
            caller.key.structures.as_deref(),
        )
        .await?;
    let page = Page::from_overfetch(&mut items, limit, |s| s.id.clone());
    Ok(axum::Json(StructurePage {
        items,
        next_cursor: page,
    }))
}

/// A monitoring point in a request.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PointInput {
    /// Point ID within the structure: 1–64 characters of `A-Za-z0-9._-`.
    pub id: String,
    /// Reference coordinates in the request's length unit: `[x, y]` or `[x, y, z]` as
    /// the structure's dimension. In an East-North-Up frame `x` is east, `y` north and
    /// `z` up. Give either `x` or `wgs84`.
    #[serde(default)]
    pub x: Option<Vec<f64>>,
    /// Reference position on WGS84, for structures with an East-North-Up frame; it is
    /// converted to the frame's local east, north (and up) coordinates.
    #[serde(default)]
    pub wgs84: Option<WgsOrigin>,
    /// A-priori standard deviations of the displacement components, in the request's
    /// length unit, one per dimension, positive.
    #[serde(default)]
    pub sigma: Option<Vec<f64>>,
}

/// Body of `PUT /v1/structures/{id}/points`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PointsInput {
    /// Unit of `x` and `sigma` in this request; the structure's unit when absent.
    #[serde(default)]
    pub length_unit: Option<LengthUnit>,
    /// The points to create or replace (others stay as they are).
    pub points: Vec<PointInput>,
}

/// A stored monitoring point.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct PointOut {
    /// Point ID.
    pub id: String,
    /// Reference coordinates, in the response's `length_unit`.
    pub x: Vec<f64>,
    /// A-priori standard deviations of the displacement components, in the response's
    /// `length_unit`; absent when the point states none.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sigma: Option<Vec<f64>>,
}

/// The points of a structure.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct PointsOut {
    /// Unit of `x` and `sigma`: the structure's length unit.
    pub length_unit: LengthUnit,
    /// Points in ID order.
    pub points: Vec<PointOut>,
}

/// Result of a points upload.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct PointsWrittenOut {
    /// Points that were new.
    pub created: u64,
    /// Points that existed and were replaced.
    pub updated: u64,
}

/// Validate a points body against the structure; convert to metres.
pub fn validate_points(
    s: &Structure,
    body: &PointsInput,
    max_points: usize,
) -> Result<Vec<StoredPoint>, ApiError> {
    if body.points.is_empty() {
        return Err(ApiError::field("/points", "at least one point is needed"));
    }
    if body.points.len() > max_points {
        return Err(ApiError::TooLarge(format!(
            "{} points is over the limit of {max_points} per request (KINEMA_MAX_POINTS)",
            body.points.len()
        )));
    }
    let unit = body.length_unit.unwrap_or(s.length_unit);
    let dim = usize::from(s.dimension);
    let enu = match &s.frame {
        Frame::Enu { origin } => Some(
            EnuFrame::new(&Geodetic::from_degrees(
                origin.lat_deg,
                origin.lon_deg,
                origin.h_m,
            ))
            .map_err(|e| ApiError::Internal(format!("stored ENU origin: {e}")))?,
        ),
        Frame::Local => None,
    };
    let mut errs = Vec::new();
    let mut seen = std::collections::HashMap::with_capacity(body.points.len());
    let mut out = Vec::with_capacity(body.points.len());
    for (i, p) in body.points.iter().enumerate() {
        let at = format!("/points/{i}");
        let before = errs.len();
        if let Some(problem) = id_problem(&p.id) {
            errs.push(FieldError::new(format!("{at}/id"), problem));
        } else if let Some(first) = seen.insert(p.id.as_str(), i) {
            errs.push(FieldError::new(
                format!("{at}/id"),
                format!("point ID {} is already used by /points/{first}", p.id),
            ));
        }
        let x = match (&p.x, &p.wgs84, &enu) {
            (Some(x), None, _) => {
                if x.len() != dim {
                    errs.push(FieldError::new(
                        format!("{at}/x"),
                        format!(
                            "the structure is {dim}D: give {dim} coordinates, not {}",
                            x.len()
                        ),
                    ));
                }
                for (j, v) in x.iter().enumerate() {
                    if !v.is_finite() {
                        errs.push(FieldError::new(
                            format!("{at}/x/{j}"),
                            "not a finite number",
                        ));
                    }
                }
                x.iter().map(|&v| unit.to_metres(v)).collect()
            }
            (None, Some(g), Some(frame)) => {
                let e = origin_errors(g, &format!("{at}/wgs84"));
                if e.is_empty() {
                    match frame
                        .geodetic_to_enu(&Geodetic::from_degrees(g.lat_deg, g.lon_deg, g.h_m))
                    {
                        Ok(enu) => enu[..dim].to_vec(),
                        Err(e) => {
                            errs.push(FieldError::new(format!("{at}/wgs84"), e.to_string()));
                            Vec::new()
                        }
                    }
                } else {
                    errs.extend(e);
                    Vec::new()
                }
            }
            (None, Some(_), None) => {
                errs.push(FieldError::new(
                    format!("{at}/wgs84"),
                    "wgs84 positions need a structure with an East-North-Up frame; give x",
                ));
                Vec::new()
            }
            (Some(_), Some(_), _) => {
                errs.push(FieldError::new(
                    at.clone(),
                    "give either x or wgs84, not both",
                ));
                Vec::new()
            }
            (None, None, _) => {
                errs.push(FieldError::new(
                    format!("{at}/x"),
                    "reference coordinates are missing",
                ));
                Vec::new()
            }
        };
        let sigma = p.sigma.as_ref().map(|sg| {
            if sg.len() != dim {
                errs.push(FieldError::new(
                    format!("{at}/sigma"),
                    format!("give {dim} standard deviations, not {}", sg.len()),
                ));
            }
            for (j, v) in sg.iter().enumerate() {
                if !(v.is_finite() && *v > 0.0) {
                    errs.push(FieldError::new(
                        format!("{at}/sigma/{j}"),
                        "a standard deviation must be a positive finite number",
                    ));
                }
            }
            sg.iter().map(|&v| unit.to_metres(v)).collect::<Vec<_>>()
        });
        if errs.len() == before {
            out.push(StoredPoint {
                id: p.id.clone(),
                x,
                sigma,
            });
        }
        if errs.len() >= 100 {
            break;
        }
    }
    if errs.is_empty() {
        Ok(out)
    } else {
        Err(ApiError::fields(errs))
    }
}

/// Create or replace monitoring points of a structure, all or nothing.
#[utoipa::path(put, path = "/v1/structures/{id}/points", tag = "structures",
    params(("id" = String, Path, description = "The client's asset ID")),
    request_body = PointsInput,
    security(("api_key" = [])),
    responses(
        (status = 200, description = "Stored", body = PointsWrittenOut),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 403, description = "The key lacks the write scope", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Over the point or body limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid points (each with a pointer)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn put_points(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
    ApiJson(body): ApiJson<PointsInput>,
) -> Result<axum::Json<PointsWrittenOut>, ApiError> {
    let s = caller.structure(&state, Scope::Write, &id).await?;
    let points = validate_points(&s, &body, state.limits.max_points)?;
    let w = state.store.put_points(&id, &points).await?;
    Ok(axum::Json(PointsWrittenOut {
        created: w.created,
        updated: w.updated,
    }))
}

/// The monitoring points of a structure, in its length unit.
#[utoipa::path(get, path = "/v1/structures/{id}/points", tag = "structures",
    params(("id" = String, Path, description = "The client's asset ID")),
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The points", body = PointsOut),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 404, description = "No such structure", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn get_points(
    State(state): State<AppState>,
    caller: Caller,
    Path(id): Path<String>,
) -> Result<axum::Json<PointsOut>, ApiError> {
    let s = caller.structure(&state, Scope::Read, &id).await?;
    let unit = s.length_unit;
    let conv = |v: &[f64]| v.iter().map(|&m| unit.from_metres(m)).collect::<Vec<_>>();
    let points = state
        .store
        .list_points(&id)
        .await?
        .into_iter()
        .map(|p| PointOut {
            x: conv(&p.x),
            sigma: p.sigma.as_deref().map(conv),
            id: p.id,
        })
        .collect();
    Ok(axum::Json(PointsOut {
        length_unit: unit,
        points,
    }))
}
