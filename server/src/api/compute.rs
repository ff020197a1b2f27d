//! `/v1/compute`: stateless strain computations. Nothing is stored; every response
//! states its `strain_unit` and the caution.

use axum::Json;
use axum::extract::State;
use axum::http::header;
use axum::response::{IntoResponse, Response};
use kinema_core::rosette::Gauge;
use serde::Deserialize;
use serde_json::Value;
use utoipa::ToSchema;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use super::AppState;
use super::auth::Caller;
use super::extract::ApiJson;
use super::problem::{ApiError, FieldError, Problem};
use crate::analysis::AnalysisError;
use crate::analysis::field::{self, FieldPoint};
use crate::analysis::gradient::{self, GradientReport};
use crate::analysis::params::{self, FieldOptions, MethodSpec};
use crate::cli::analyze::{DEFAULT_STRAIN_RESOLUTION, Method, default_args};
use crate::input::RosetteRows;
use crate::model::{Scope, id_problem};
use crate::output::JsonSink;
use crate::units::{LengthUnit, StrainUnit};

/// Routes of this module.
pub fn routes() -> OpenApiRouter<AppState> {
    OpenApiRouter::new()
        .routes(routes!(compute_gradient))
        .routes(routes!(compute_strain_field))
        .routes(routes!(compute_rosette))
}

/// Body of `POST /v1/compute/gradient`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct GradientInput {
    /// Displacement gradient `G[i][j] = ∂u_i/∂x_j`, dimensionless, 2×2 or 3×3,
    /// row-major (`gradient[i]` is row i).
    pub gradient: Vec<Vec<f64>>,
    /// Unit of the strains in the response: `strain` or `microstrain` (default).
    #[serde(default)]
    pub strain_unit: StrainUnit,
    /// The frame is East-North-Up (x = east, y = north): principal directions also get
    /// their azimuth clockwise from north (default false).
    #[serde(default)]
    pub enu: bool,
    /// Strain resolution of the small-strain adequacy flag, dimensionless strain,
    /// positive (default 1e-6).
    #[serde(default)]
    pub strain_resolution: Option<f64>,
}

const P400: &str = "Not JSON (JSON has no NaN or Infinity)";

/// The strain state of one displacement gradient.
///
/// Small strain and rotation, principal strains (descending) with directions in
/// degrees counter-clockwise from +x (and azimuths from north with `enu`), maximum
/// shear as tensor and engineering shear, volumetric strain (the trace), the Mohr
/// circle(s), the Green–Lagrange strain and whether small-strain theory is adequate.
/// A degenerate or isotropic state has no direction and is flagged.
#[utoipa::path(post, path = "/v1/compute/gradient", tag = "compute",
    request_body = GradientInput,
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The strain state", body = GradientReport),
        (status = 400, description = P400, body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Not a 2x2 or 3x3 matrix, or a gradient the kinematics refuse (e.g. det F <= 0)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn compute_gradient(
    caller: Caller,
    ApiJson(body): ApiJson<GradientInput>,
) -> Result<Json<GradientReport>, ApiError> {
    caller.require(Scope::Read)?;
    let r = gradient::report(
        &body.gradient,
        body.strain_unit,
        body.enu,
        body.strain_resolution.unwrap_or(DEFAULT_STRAIN_RESOLUTION),
    )?;
    Ok(Json(r))
}

/// A point of a strain-field request.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct FieldPointInput {
    /// Point ID, 1–64 characters of `A-Za-z0-9._-`, unique in the request.
    pub id: String,
    /// Reference coordinates `[x, y]` or `[x, y, z]`, in the request's `length_unit`.
    pub x: Vec<f64>,
    /// Displacement from the reference coordinates (current − reference), same
    /// number of components, in `length_unit`.
    pub u: Vec<f64>,
    /// A-priori standard deviations of the displacement components, in
    /// `length_unit`, positive.
    #[serde(default)]
    pub sigma: Option<Vec<f64>>,
}

/// Body of `POST /v1/compute/strain-field`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct StrainFieldInput {
    /// Unit of `x`, `u`, `sigma` and of the method's lengths: `m` or `mm`; lengths in
    /// the result are in it too.
    pub length_unit: LengthUnit,
    /// Unit of the strains in the result: `strain` or `microstrain` (default).
    #[serde(default)]
    pub strain_unit: StrainUnit,
    /// The points, all 2D or all 3D.
    pub points: Vec<FieldPointInput>,
    /// The estimator.
    pub method: MethodSpec,
    /// Options of the estimator.
    #[serde(default)]
    pub options: FieldOptions,
}

fn finite_errors(v: &[f64], at: &str, positive: bool, errs: &mut Vec<FieldError>) {
    for (j, x) in v.iter().enumerate() {
        if !x.is_finite() || (positive && *x <= 0.0) {
            errs.push(FieldError::new(
                format!("{at}/{j}"),
                if positive {
                    "a standard deviation must be a positive finite number"
                } else {
                    "not a finite number"
                },
            ));
        }
    }
}

/// Check request points (at `/points`) and convert them to metres; the dimension.
pub fn check_points(
    points: &[FieldPointInput],
    unit: LengthUnit,
    max_points: usize,
) -> Result<(usize, Vec<FieldPoint>), ApiError> {
    if points.len() > max_points {
        return Err(ApiError::TooLarge(format!(
            "{} points is over the limit of {max_points} per request (KINEMA_MAX_POINTS)",
            points.len()
        )));
    }
    let Some(first) = points.first() else {
        return Err(ApiError::field("/points", "at least one point is needed"));
    };
    let dim = first.x.len();
    if !matches!(dim, 2 | 3) {
        return Err(ApiError::field(
            "/points/0/x",
            format!("give 2 or 3 coordinates, not {dim}"),
        ));
    }
    let mut errs = Vec::new();
    let mut seen = std::collections::HashMap::with_capacity(points.len());
    let mut out = Vec::with_capacity(points.len());
    for (i, p) in points.iter().enumerate() {
        let at = format!("/points/{i}");
        if let Some(problem) = id_problem(&p.id) {
            errs.push(FieldError::new(format!("{at}/id"), problem));
        } else if let Some(first) = seen.insert(p.id.as_str(), i) {
            errs.push(FieldError::new(
                format!("{at}/id"),
                format!("point ID {} is already used by /points/{first}", p.id),
            ));
        }
        for (name, v) in [
            ("x", Some(&p.x)),
            ("u", Some(&p.u)),
            ("sigma", p.sigma.as_ref()),
        ] {
            if let Some(v) = v {
                if v.len() != dim {
                    errs.push(FieldError::new(
                        format!("{at}/{name}"),
                        format!("the points are {dim}D: give {dim} values, not {}", v.len()),
                    ));
                }
                finite_errors(v, &format!("{at}/{name}"), name == "sigma", &mut errs);
            }
        }
        let m = |v: &[f64]| v.iter().map(|&x| unit.to_metres(x)).collect::<Vec<_>>();
        out.push(FieldPoint {
            id: p.id.clone(),
            x: m(&p.x),
            u: m(&p.u),
            sigma: p.sigma.as_deref().map(m),
        });
        if errs.len() >= 100 {
            break;
        }
    }
    if errs.is_empty() {
        Ok((dim, out))
    } else {
        Err(ApiError::fields(errs))
    }
}

/// Run a strain-field request for checked points; 422 when no region has a result.
pub fn strain_field(
    dim: usize,
    pts: Vec<FieldPoint>,
    method: &MethodSpec,
    options: &FieldOptions,
    length_unit: LengthUnit,
    strain_unit: StrainUnit,
) -> Result<Vec<u8>, AnalysisError> {
    let errs = params::validate(method, options);
    if !errs.is_empty() {
        return Err(AnalysisError::Invalid(errs));
    }
    let points = field::points(dim, pts)?;
    let req = params::request(
        points,
        method,
        options,
        length_unit,
        strain_unit,
        "request body",
    )?;
    // The document goes out as the pipeline wrote it: parsing a multi-megabyte result
    // back into a JSON value only to write it again would cost more than the estimate.
    let (doc, footer) = field::run_bytes(&req)?;
    if footer.accepted == 0 {
        return Err(AnalysisError::NotComputable(field::footer_reasons(&footer)));
    }
    Ok(doc)
}

/// The strain field of a set of points and displacements.
///
/// Runs the chosen estimator (Delaunay triangles, given elements, groups, k-nearest or
/// radius neighbourhoods, or one network fit) and answers with the result document:
/// `length_unit`, `strain_unit`, the shear and angle conventions, the caution, the
/// parameters used, `columns` (name, key with unit suffix, unit and meaning of every
/// column), one member per section (`elements`, `groups`, `neighbourhoods` or
/// `network`, with one object per region keyed by the column keys, and `rejected`
/// with the reason of every screened-out region) and a `summary`.
#[utoipa::path(post, path = "/v1/compute/strain-field", tag = "compute",
    request_body = StrainFieldInput,
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The result document", body = Object),
        (status = 400, description = P400, body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Over the point or body limit", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields (with pointers: duplicate IDs, wrong sizes, non-finite values, bad options), or data the estimator cannot compute on (collinear points, every region rejected)", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn compute_strain_field(
    State(state): State<AppState>,
    caller: Caller,
    ApiJson(body): ApiJson<StrainFieldInput>,
) -> Result<Response, ApiError> {
    caller.require(Scope::Read)?;
    let (dim, pts) = check_points(&body.points, body.length_unit, state.limits.max_points)?;
    let doc = tokio::task::spawn_blocking(move || {
        strain_field(
            dim,
            pts,
            &body.method,
            &body.options,
            body.length_unit,
            body.strain_unit,
        )
    })
    .await
    .map_err(|e| ApiError::Internal(format!("strain-field task: {e}")))??;
    Ok(([(header::CONTENT_TYPE, "application/json")], doc).into_response())
}

/// One strain gauge of a rosette.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct GaugeInput {
    /// Gauge ID, unique within the rosette (1–64 characters of `A-Za-z0-9._-`).
    pub id: String,
    /// Gauge direction, degrees counter-clockwise from the rosette's x axis.
    pub angle_deg: f64,
    /// Indicated strain, in the request's `reading_unit`.
    pub reading: f64,
    /// Zero reading (baseline) of the gauge, in `reading_unit`; subtracted first.
    #[serde(default)]
    pub zero: Option<f64>,
}

/// One rosette.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RosetteInput {
    /// Rosette ID, 1–64 characters of `A-Za-z0-9._-`, unique in the request.
    pub id: String,
    /// Its gauges: at least 3 in different directions (more are fitted by least
    /// squares).
    pub gauges: Vec<GaugeInput>,
}

/// Body of `POST /v1/compute/rosette`.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RosettesInput {
    /// Unit of `reading` and `zero`: `strain` or `microstrain` (default).
    #[serde(default)]
    pub reading_unit: StrainUnit,
    /// Unit of the strains in the result: `strain` or `microstrain` (default).
    #[serde(default)]
    pub strain_unit: StrainUnit,
    /// Strain resolution of the small-strain adequacy check, dimensionless strain,
    /// positive (default 1e-6).
    #[serde(default)]
    pub strain_resolution: Option<f64>,
    /// The rosettes.
    pub rosettes: Vec<RosetteInput>,
}

fn rosette_rows(body: &RosettesInput, max: usize) -> Result<Vec<RosetteRows>, ApiError> {
    let n: usize = body.rosettes.iter().map(|r| r.gauges.len()).sum();
    if n > max {
        return Err(ApiError::TooLarge(format!(
            "{n} gauges is over the limit of {max} per request (KINEMA_MAX_POINTS)"
        )));
    }
    if body.rosettes.is_empty() {
        return Err(ApiError::field(
            "/rosettes",
            "at least one rosette is needed",
        ));
    }
    let to_strain = |v: f64| match body.reading_unit {
        StrainUnit::Strain => v,
        StrainUnit::Microstrain => v / 1.0e6,
    };
    let mut errs = Vec::new();
    let mut seen = std::collections::HashMap::new();
    let mut out = Vec::new();
    for (i, r) in body.rosettes.iter().enumerate() {
        let at = format!("/rosettes/{i}");
        if let Some(p) = id_problem(&r.id) {
            errs.push(FieldError::new(format!("{at}/id"), p));
        } else if let Some(first) = seen.insert(r.id.as_str(), i) {
            errs.push(FieldError::new(
                format!("{at}/id"),
                format!("rosette ID {} is already used by /rosettes/{first}", r.id),
            ));
        }
        if r.gauges.len() < 3 {
            errs.push(FieldError::new(
                format!("{at}/gauges"),
                format!("a rosette needs at least 3 gauges, not {}", r.gauges.len()),
            ));
        }
        let mut gauge_ids = std::collections::HashMap::new();
        let mut gauges = Vec::new();
        for (j, g) in r.gauges.iter().enumerate() {
            let gat = format!("{at}/gauges/{j}");
            if let Some(p) = id_problem(&g.id) {
                errs.push(FieldError::new(format!("{gat}/id"), p));
            } else if let Some(first) = gauge_ids.insert(g.id.as_str(), j) {
                errs.push(FieldError::new(
                    format!("{gat}/id"),
                    format!("gauge ID {} is already used by {at}/gauges/{first}", g.id),
                ));
            }
            for (name, v) in [
                ("angle_deg", Some(g.angle_deg)),
                ("reading", Some(g.reading)),
                ("zero", g.zero),
            ] {
                if v.is_some_and(|v| !v.is_finite()) {
                    errs.push(FieldError::new(
                        format!("{gat}/{name}"),
                        "not a finite number",
                    ));
                }
            }
            gauges.push(Gauge {
                id: g.id.clone(),
                angle: g.angle_deg.to_radians(),
                reading: to_strain(g.reading),
                zero: g.zero.map(to_strain),
            });
        }
        out.push(RosetteRows {
            id: r.id.clone(),
            gauges,
        });
    }
    if let Some(r) = body.strain_resolution
        && !(r.is_finite() && r > 0.0)
    {
        errs.push(FieldError::new(
            "/strain_resolution",
            "the strain resolution must be a positive finite number (dimensionless strain)",
        ));
    }
    if errs.is_empty() {
        Ok(out)
    } else {
        Err(ApiError::fields(errs))
    }
}

fn rosette_document(body: &RosettesInput, rows: Vec<RosetteRows>) -> Result<Value, AnalysisError> {
    let mut a = default_args("request body")?;
    a.method = Some(Method::Rosette);
    a.reading_unit = Some(body.reading_unit);
    a.strain_unit = body.strain_unit;
    if let Some(r) = body.strain_resolution {
        a.strain_resolution = r;
    }
    let req = crate::pipeline::rosette::prepare_from(&a, rows)?;
    let mut sink = JsonSink::new(Vec::new());
    crate::pipeline::rosette::run(&req, &mut sink, "result document")?;
    let doc: Value = serde_json::from_slice(&sink.into_inner())
        .map_err(|e| AnalysisError::Internal(format!("result document: {e}")))?;
    if field::accepted(&doc) == 0 {
        return Err(AnalysisError::NotComputable(field::rejection_reasons(&doc)));
    }
    Ok(doc)
}

/// The plane strain state of strain-gauge rosettes.
///
/// Each rosette is solved exactly (three gauges) or by least squares (more), and its
/// strain state gets principal strains and directions, maximum shear (tensor and
/// engineering) and the Mohr circle, in the result document's `rosettes` section; a
/// rosette whose gauge directions do not determine the strain state is listed in
/// `rejected` with the reason (422 when no rosette can be solved).
#[utoipa::path(post, path = "/v1/compute/rosette", tag = "compute",
    request_body = RosettesInput,
    security(("api_key" = [])),
    responses(
        (status = 200, description = "The result document", body = Object),
        (status = 400, description = P400, body = Problem, content_type = "application/problem+json"),
        (status = 401, description = "No valid API key", body = Problem, content_type = "application/problem+json"),
        (status = 413, description = "Too many gauges", body = Problem, content_type = "application/problem+json"),
        (status = 415, description = "Not JSON", body = Problem, content_type = "application/problem+json"),
        (status = 422, description = "Invalid fields (with pointers), or no rosette whose gauges determine a strain state", body = Problem, content_type = "application/problem+json"),
    ))]
pub async fn compute_rosette(
    State(state): State<AppState>,
    caller: Caller,
    ApiJson(body): ApiJson<RosettesInput>,
) -> Result<Json<Value>, ApiError> {
    caller.require(Scope::Read)?;
    let rows = rosette_rows(&body, state.limits.max_points)?;
    Ok(Json(rosette_document(&body, rows)?))
}
