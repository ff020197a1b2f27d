//! How an API request names an estimator and its options, checked with a JSON
//! pointer for every bad field, and turned into the offline pipeline's
//! [`Request`](crate::cli::analyze::Request) through the same defaults and checks as
//! `kinema analyze` ([`crate::cli::analyze::prepare_from`]).

use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

use super::AnalysisError;
use crate::api::problem::FieldError;
use crate::cli::analyze::{self, AnalyzeArgs, Method, Request};
use crate::input::{ElementRow, GroupRows, Points};
use crate::model::id_problem;
use crate::units::{LengthUnit, StrainUnit};

/// Most elements or groups named in one request.
pub const MAX_REGIONS: usize = 100_000;

/// A triangle (2D) or tetrahedron (3D) given by its vertices.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ElementInput {
    /// Element ID, 1–64 characters of `A-Za-z0-9._-`.
    pub id: String,
    /// Point IDs of the vertices: 3 for a triangle (counter-clockwise), 4 for a
    /// tetrahedron (positive volume).
    pub vertices: Vec<String>,
}

/// A named group of points fitted with one homogeneous gradient.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct GroupInput {
    /// Group name, 1–64 characters of `A-Za-z0-9._-`.
    pub name: String,
    /// Point IDs of the members (at least 3 in 2D, 4 in 3D, not collinear/coplanar).
    pub point_ids: Vec<String>,
}

/// The estimator of the displacement gradient.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(tag = "kind", rename_all = "snake_case", deny_unknown_fields)]
pub enum MethodSpec {
    /// Delaunay triangulation of 2D points into constant-strain triangles, with the
    /// quality screen of `options` (`min_angle_deg`, `max_aspect_ratio`).
    Delaunay,
    /// Constant-strain triangles (2D) or tetrahedra (3D) given by their vertices.
    Elements {
        /// The elements.
        elements: Vec<ElementInput>,
    },
    /// Least-squares fit `u = t + G·x` per named group of points.
    Groups {
        /// The groups.
        groups: Vec<GroupInput>,
    },
    /// Least-squares fit over the `k` nearest points around every point, or over all
    /// points within `radius`.
    Neighbourhood {
        /// Neighbourhood size (default 12); not with `radius`.
        #[serde(default)]
        k: Option<usize>,
        /// Neighbourhood radius, in the request's length unit, positive; not with `k`.
        #[serde(default)]
        radius: Option<f64>,
    },
    /// One homogeneous least-squares fit over the whole network.
    Network,
}

impl MethodSpec {
    /// The method's name (`delaunay`, `elements`, `groups`, `neighbourhood`, `network`).
    pub fn name(&self) -> &'static str {
        match self {
            Self::Delaunay => "delaunay",
            Self::Elements { .. } => "elements",
            Self::Groups { .. } => "groups",
            Self::Neighbourhood { .. } => "neighbourhood",
            Self::Network => "network",
        }
    }
}

/// Options of an estimator run; absent members take the defaults of `kinema analyze`.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct FieldOptions {
    /// Weight every point by 1/σ² from its stated standard deviations (least-squares
    /// methods: groups, neighbourhood, network); every point must state them.
    #[serde(default)]
    pub use_precision: bool,
    /// Significance level of the test of whether each region's strain is beyond the
    /// survey noise, 0 < alpha < 1 (default 0.05).
    #[serde(default)]
    pub alpha: Option<f64>,
    /// Strain resolution of the small-strain adequacy check, dimensionless strain,
    /// positive (default 1e-6 = 1 microstrain).
    #[serde(default)]
    pub strain_resolution: Option<f64>,
    /// Quality screen of triangles: smallest accepted angle, degrees, 0 ≤ value < 60
    /// (default 10).
    #[serde(default)]
    pub min_angle_deg: Option<f64>,
    /// Quality screen of triangles: largest accepted radius ratio R/(2r), ≥ 1
    /// (default 5).
    #[serde(default)]
    pub max_aspect_ratio: Option<f64>,
}

fn ids_errors(ids: &[String], at: &str, errs: &mut Vec<FieldError>) {
    for (j, id) in ids.iter().enumerate() {
        if let Some(p) = id_problem(id) {
            errs.push(FieldError::new(format!("{at}/{j}"), p));
        }
    }
}

/// For each well-formed ID of `ids` (at pointer `{at}/{j}`) that `is_point` does not
/// know: "… is not a point of the structure". Malformed IDs are left to the ID check.
pub(crate) fn unknown_points(
    ids: &[String],
    at: &str,
    is_point: &dyn Fn(&str) -> bool,
    errs: &mut Vec<FieldError>,
) {
    for (j, id) in ids.iter().enumerate() {
        if id_problem(id).is_none() && !is_point(id) {
            errs.push(FieldError::new(
                format!("{at}/{j}"),
                format!("{id} is not a point of the structure"),
            ));
        }
    }
}

/// [`validate`], and the method against the structure: every element vertex and group
/// member is one of its `points`, an element has `dimension + 1` vertices, and Delaunay
/// (a 2D triangulation) is not asked of a 3D structure. Every bad field is listed.
pub fn validate_for(
    method: &MethodSpec,
    options: &FieldOptions,
    points: &[crate::model::StoredPoint],
    dimension: u8,
) -> Vec<FieldError> {
    let mut errs = validate(method, options);
    let known: std::collections::HashSet<&str> = points.iter().map(|p| p.id.as_str()).collect();
    let is_point = |id: &str| known.contains(id);
    let unknown = |ids: &[String], at: String, errs: &mut Vec<FieldError>| {
        unknown_points(ids, &at, &is_point, errs);
    };
    match method {
        MethodSpec::Elements { elements } => {
            for (i, e) in elements.iter().enumerate() {
                let at = format!("/method/elements/{i}/vertices");
                if e.vertices.len() != usize::from(dimension) + 1 {
                    errs.push(FieldError::new(
                        at.clone(),
                        format!(
                            "an element of a {dimension}D structure has {} vertices, not {}",
                            usize::from(dimension) + 1,
                            e.vertices.len()
                        ),
                    ));
                }
                unknown(&e.vertices, at, &mut errs);
            }
        }
        MethodSpec::Groups { groups } => {
            for (i, g) in groups.iter().enumerate() {
                unknown(
                    &g.point_ids,
                    format!("/method/groups/{i}/point_ids"),
                    &mut errs,
                );
            }
        }
        MethodSpec::Delaunay if dimension != 2 => errs.push(FieldError::new(
            "/method/kind",
            "delaunay triangulates 2D structures; use elements (tetrahedra), groups, \
             neighbourhood or network in 3D",
        )),
        _ => {}
    }
    errs
}

/// Check `method` (at pointer `/method`) and `options` (at `/options`); every bad
/// field is listed.
pub fn validate(method: &MethodSpec, options: &FieldOptions) -> Vec<FieldError> {
    let mut errs = Vec::new();
    match method {
        MethodSpec::Elements { elements } => {
            if elements.is_empty() || elements.len() > MAX_REGIONS {
                errs.push(FieldError::new(
                    "/method/elements",
                    format!("give 1 to {MAX_REGIONS} elements"),
                ));
            }
            let mut seen = std::collections::HashMap::new();
            for (i, e) in elements.iter().enumerate() {
                let at = format!("/method/elements/{i}");
                if let Some(p) = id_problem(&e.id) {
                    errs.push(FieldError::new(format!("{at}/id"), p));
                } else if let Some(first) = seen.insert(e.id.as_str(), i) {
                    errs.push(FieldError::new(
                        format!("{at}/id"),
                        format!(
                            "element ID {} is already used by /method/elements/{first}",
                            e.id
                        ),
                    ));
                }
                if !matches!(e.vertices.len(), 3 | 4) {
                    errs.push(FieldError::new(
                        format!("{at}/vertices"),
                        format!(
                            "an element has 3 vertices (triangle) or 4 (tetrahedron), not {}",
                            e.vertices.len()
                        ),
                    ));
                }
                ids_errors(&e.vertices, &format!("{at}/vertices"), &mut errs);
            }
        }
        MethodSpec::Groups { groups } => {
            if groups.is_empty() || groups.len() > MAX_REGIONS {
                errs.push(FieldError::new(
                    "/method/groups",
                    format!("give 1 to {MAX_REGIONS} groups"),
                ));
            }
            let mut seen = std::collections::HashMap::new();
            for (i, g) in groups.iter().enumerate() {
                let at = format!("/method/groups/{i}");
                if let Some(p) = id_problem(&g.name) {
                    errs.push(FieldError::new(format!("{at}/name"), p));
                } else if let Some(first) = seen.insert(g.name.as_str(), i) {
                    errs.push(FieldError::new(
                        format!("{at}/name"),
                        format!(
                            "group name {} is already used by /method/groups/{first}",
                            g.name
                        ),
                    ));
                }
                if g.point_ids.len() < 3 {
                    errs.push(FieldError::new(
                        format!("{at}/point_ids"),
                        "a group needs at least 3 points (4 in 3D)",
                    ));
                }
                ids_errors(&g.point_ids, &format!("{at}/point_ids"), &mut errs);
            }
        }
        MethodSpec::Neighbourhood { k, radius } => {
            if k.is_some() && radius.is_some() {
                errs.push(FieldError::new(
                    "/method/radius",
                    "give k or radius, not both",
                ));
            }
            if *k == Some(0) {
                errs.push(FieldError::new("/method/k", "k must be at least 1"));
            }
            if let Some(r) = radius
                && !(r.is_finite() && *r > 0.0)
            {
                errs.push(FieldError::new(
                    "/method/radius",
                    "the radius must be a positive finite length",
                ));
            }
        }
        MethodSpec::Delaunay | MethodSpec::Network => {}
    }
    if options.use_precision
        && !matches!(
            method,
            MethodSpec::Groups { .. } | MethodSpec::Neighbourhood { .. } | MethodSpec::Network
        )
    {
        errs.push(FieldError::new(
            "/options/use_precision",
            format!(
                "precision weighting applies to the least-squares methods (groups, \
                 neighbourhood, network), not {}",
                method.name()
            ),
        ));
    }
    if let Some(a) = options.alpha
        && !(a > 0.0 && a < 1.0)
    {
        errs.push(FieldError::new(
            "/options/alpha",
            "alpha must lie strictly between 0 and 1",
        ));
    }
    if let Some(r) = options.strain_resolution
        && !(r.is_finite() && r > 0.0)
    {
        errs.push(FieldError::new(
            "/options/strain_resolution",
            "the strain resolution must be a positive finite number (dimensionless strain)",
        ));
    }
    if let Some(m) = options.min_angle_deg
        && !(m.is_finite() && (0.0..60.0).contains(&m))
    {
        errs.push(FieldError::new(
            "/options/min_angle_deg",
            "the minimum angle must be at least 0 and below 60 degrees",
        ));
    }
    if let Some(m) = options.max_aspect_ratio
        && !(m.is_finite() && m >= 1.0)
    {
        errs.push(FieldError::new(
            "/options/max_aspect_ratio",
            "the maximum aspect ratio must be at least 1",
        ));
    }
    errs
}

/// The pipeline request for `points` (metres) with `method` and `options`: lengths
/// of the method (radius) in `length_unit`, results in `length_unit` and
/// `strain_unit`; `input` names the input in the result header. Call [`validate`]
/// first.
pub fn request(
    points: Points,
    method: &MethodSpec,
    options: &FieldOptions,
    length_unit: LengthUnit,
    strain_unit: StrainUnit,
    input: &str,
) -> Result<Request, AnalysisError> {
    if options.use_precision && !points.all_have_sigma() {
        return Err(AnalysisError::Invalid(vec![FieldError::new(
            "/options/use_precision",
            "precision weighting needs standard deviations (sigma) for every point",
        )]));
    }
    let mut a: AnalyzeArgs = analyze::default_args(input)?;
    a.length_unit = length_unit;
    a.strain_unit = strain_unit;
    a.quiet = true;
    a.use_precision = options.use_precision;
    if let Some(v) = options.alpha {
        a.alpha = v;
    }
    if let Some(v) = options.strain_resolution {
        a.strain_resolution = v;
    }
    if let Some(v) = options.min_angle_deg {
        a.min_angle_deg = v;
    }
    if let Some(v) = options.max_aspect_ratio {
        a.max_aspect_ratio = v;
    }
    let label = || Some(std::path::PathBuf::from("(request)"));
    let (mut elements, mut groups) = (None, None);
    a.method = Some(match method {
        MethodSpec::Delaunay => Method::Delaunay,
        MethodSpec::Network => Method::Network,
        MethodSpec::Neighbourhood { k, radius } => {
            if let Some(k) = k {
                a.k = *k;
            }
            a.radius = *radius;
            Method::Neighbourhood
        }
        MethodSpec::Elements { elements: e } => {
            a.elements = label();
            elements = Some(
                e.iter()
                    .map(|e| ElementRow {
                        id: e.id.clone(),
                        vertices: e.vertices.clone(),
                    })
                    .collect(),
            );
            Method::Elements
        }
        MethodSpec::Groups { groups: g } => {
            a.groups = label();
            groups = Some(
                g.iter()
                    .map(|g| GroupRows {
                        name: g.name.clone(),
                        point_ids: g.point_ids.clone(),
                    })
                    .collect(),
            );
            Method::Groups
        }
    });
    if matches!(method, MethodSpec::Delaunay) && points.dimension() != 2 {
        return Err(AnalysisError::Invalid(vec![FieldError::new(
            "/method/kind",
            "delaunay triangulates 2D points; these points are 3D (use elements, groups, \
             neighbourhood or network)",
        )]));
    }
    Ok(analyze::prepare_from(&a, points, None, elements, groups)?)
}
