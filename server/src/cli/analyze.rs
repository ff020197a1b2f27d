//! `kinema analyze`: flags, their validation, and the run from input files to the
//! chosen output.
//!
//! The run is [`run`]: [`prepare`] (flags → validated [`Request`] with the points and
//! any element or group file read), then the output is opened, then
//! [`crate::pipeline::run`] computes and streams the result rows into the sink.

use std::fs::File;
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};

use clap::{Args, ValueEnum};

use super::CliError;
use crate::input::geodetic::{EnuInfo, GeodeticOptions};
use crate::input::{self, ElementRow, GroupRows, Points, ReadOptions};
use crate::output::{self, Cell, Header, OutputFormat};
use crate::pipeline::stress::{StressFlags, StressSpec, StressState};
use crate::units::{LengthUnit, StrainUnit};
use kinema_core::geodesy::Geodetic;

/// Default `--k`.
pub const DEFAULT_K: usize = 12;
/// Default `--min-angle-deg`, degrees.
pub const DEFAULT_MIN_ANGLE_DEG: f64 = 10.0;
/// Default `--max-aspect-ratio`: the radius ratio R/(2r) (1 for an equilateral triangle; 5 is
/// reached by an isosceles 19°/19°/142° triangle), the same as kinema-core's screen default.
pub const DEFAULT_MAX_ASPECT_RATIO: f64 = 5.0;
/// Default `--alpha`: the significance level of the strain test.
pub const DEFAULT_ALPHA: f64 = 0.05;
/// Default `--strain-resolution`, dimensionless.
pub const DEFAULT_STRAIN_RESOLUTION: f64 = 1e-6;

const AFTER_HELP: &str = "\
Input (POINTS_FILE, CSV with a header or JSON; chosen by content):
  id,x,y[,z],ux,uy[,uz]                  reference coordinates and displacements
  id,x_ref,y_ref[,z_ref],x_cur,y_cur[,z_cur]
                                         reference and current coordinates; the
                                         displacement current - reference is taken in
                                         the declared unit (exact for realistic data),
                                         then converted to metres once
  optional sigma_x,sigma_y[,sigma_z]     standard deviation per axis, declared unit
  `point_id` may stand for `id`; a z column makes the file 3D; unknown columns are
  errors. JSON: {\"length_unit\": \"m\"|\"mm\" (optional, must agree with
  --length-unit), \"points\": [{\"id\": \"T1\" or 1, \"x\": .., \"y\": .., \"ux\": ..,
  \"uy\": .., [\"z\", \"uz\", \"sigma_x\", ...]}]}.
  Point IDs: 1-64 characters of A-Z a-z 0-9 . _ -
  id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur[,sigma_e,sigma_n,sigma_u]
                                         GNSS points, WGS84 (chosen by the lat_ref
                                         column): decimal degrees, ellipsoidal heights in
                                         the declared unit; sigma_* of the displacement
                                         along local East, North, Up. Converted to ENU
                                         (x = east, y = north, z = up) about --enu-origin
                                         or the mean of the reference positions; 3D unless
                                         --horizontal. 2D ENU output adds azimuth1_deg
                                         (clockwise from north) beside theta1_deg.

--elements FILE: CSV element_id,v0,v1,v2[,v3] or JSON {\"elements\": [{\"id\", \"vertices\"}]}
--groups FILE:   CSV group,point_id (one row per member) or JSON
                 {\"groups\": [{\"name\", \"point_ids\"}]}

--method rosette: POINTS_FILE holds strain-gauge readings instead of points:
  CSV rosette,gauge,angle_deg,reading[,zero]  one row per gauge, grouped by rosette ID;
  angle_deg counter-clockwise from the rosette's x axis; reading and zero (the
  baseline, optional) are indicated strains in --reading-unit. JSON: {\"rosettes\":
  [{\"id\", \"gauges\": [{\"id\", \"angle_deg\", \"reading\", [\"zero\"]}]}]}.
  Corrections (each optional, listed per row): --gauge-factor with
  --instrument-gauge-factor, --transverse-sensitivity with --transverse-nu0,
  --thermal-coefficients with --temperature [and --reference-temperature].

--material ID (or --youngs-modulus-gpa E --poisson-ratio NU) appends stress columns
  in MPa to every row (2D needs --stress-state plane-stress|plane-strain; 3D uses
  the full Hooke's law). Presets: steel-en1993, aluminium-en1999, concrete-c12-15 …
  concrete-c90-105 (EN 1992-1-1 classes). Stress assumes a homogeneous, isotropic,
  linear elastic material and is not a structural assessment.

--series (with --method elements or groups and --baseline LABEL): POINTS_FILE holds
  survey epochs: CSV epoch,time,id,x,y[,z][,sigma_x,sigma_y[,sigma_z]][,temperature_c],
  one row per point per epoch, time in RFC 3339 (2026-03-01T10:00:00Z; an offset is
  converted to UTC), one time and one temperature (°C) per epoch, epochs in time
  order; or JSON {\"length_unit\", \"epochs\": [{\"label\", \"time\", \"temperature_c\",
  \"points\": [{\"id\", \"x\", \"y\", ...}]}]}. Sections cumulative, increments, rates
  (per day and per Julian year), excluded and rejected. --thermal-alpha PER_K or
  --material ID removes alpha*(T - T_baseline) from the normal strains.

Output: per-region rows and a `rejected` section (label, members, reason). Every
column carries its unit (CSV/JSON names end in it, e.g. exx_microstrain, theta1_deg);
exy is tensor shear strain, gxy = 2*exy engineering shear strain; angles in degrees
counter-clockwise from +x. JSON goes to stdout unless --output is given.

Exit codes: 0 success; 2 bad input (malformed file, bad flags, data the estimators
reject); 1 other failures (a file that cannot be read or written).

Results are kinematic estimates from measured displacements, not a structural
assessment; defer to local codes and licensed practice.";

/// Estimator chosen with `--method`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Method {
    /// Delaunay triangulation of 2D points into constant-strain triangles, with a quality screen.
    Delaunay,
    /// Triangles (2D) or tetrahedra (3D) given in --elements.
    Elements,
    /// Weighted least-squares fit u = t + G·x per named group in --groups.
    Groups,
    /// Least-squares fit over the k nearest points (or all within --radius) around each point.
    Neighbourhood,
    /// Finite differences on points that lie on a regular grid.
    Grid,
    /// One homogeneous least-squares fit over the whole network.
    Network,
    /// Strain-gauge rosettes: POINTS_FILE holds gauge readings (see below).
    Rosette,
}

impl Method {
    /// Name as on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Self::Delaunay => "delaunay",
            Self::Elements => "elements",
            Self::Groups => "groups",
            Self::Neighbourhood => "neighbourhood",
            Self::Grid => "grid",
            Self::Network => "network",
            Self::Rosette => "rosette",
        }
    }

    /// True for the least-squares estimators, which can use stated precision.
    pub fn is_least_squares(self) -> bool {
        matches!(self, Self::Groups | Self::Neighbourhood | Self::Network)
    }
}

/// Distance weighting for the least-squares fits, chosen with `--weighting`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Weighting {
    /// Every point weighs the same (apart from `--use-precision`).
    None,
    /// Gaussian decay with distance d from the centre, length scale L = --weight-scale.
    Gaussian,
    /// Quadratic decay with distance d, reaching zero at d = L = --weight-scale.
    Quadratic,
}

/// Flags of `kinema analyze`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = AFTER_HELP)]
pub struct AnalyzeArgs {
    /// Points file: CSV or JSON (see below).
    #[arg(value_name = "POINTS_FILE")]
    pub points_file: PathBuf,

    /// Estimator [default: delaunay for 2D points; neighbourhood for 3D; elements or
    /// groups when --elements or --groups is given].
    #[arg(long, value_enum)]
    pub method: Option<Method>,

    /// Output format.
    #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
    pub format: OutputFormat,

    /// Unit of the input coordinates, displacements and standard deviations, and of
    /// --radius and --weight-scale; also the unit of lengths in the output.
    #[arg(long, value_enum, default_value_t = LengthUnit::Metre)]
    pub length_unit: LengthUnit,

    /// Unit of strains in the output.
    #[arg(long, value_enum, default_value_t = StrainUnit::Microstrain)]
    pub strain_unit: StrainUnit,

    /// Write the result to FILE [default: stdout]. The file is created only after
    /// the input has been read and checked.
    #[arg(long, short = 'o', value_name = "FILE")]
    pub output: Option<PathBuf>,

    /// Elements for --method elements: CSV element_id,v0,v1,v2[,v3] or JSON.
    #[arg(long, value_name = "FILE")]
    pub elements: Option<PathBuf>,

    /// Groups for --method groups: CSV group,point_id or JSON.
    #[arg(long, value_name = "FILE")]
    pub groups: Option<PathBuf>,

    /// Neighbourhood size for --method neighbourhood: the k nearest points.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_K)]
    pub k: usize,

    /// Use all points within R (declared length unit) instead of the k nearest
    /// (--method neighbourhood) [default: unset, k nearest].
    #[arg(long, value_name = "R")]
    pub radius: Option<f64>,

    /// Centre the neighbourhoods (--method neighbourhood) on the nodes of a regular grid
    /// with this spacing (declared length unit), laid over the points' bounding box from
    /// its lower corner, instead of on every point [default: unset, at every point].
    #[arg(long, value_name = "L")]
    pub grid_spacing: Option<f64>,

    /// Distance weighting of the least-squares fits (groups, neighbourhood).
    #[arg(long, value_enum, default_value_t = Weighting::None)]
    pub weighting: Weighting,

    /// Length scale L of --weighting gaussian|quadratic, declared length unit
    /// [default: --radius when given, otherwise required].
    #[arg(long, value_name = "L")]
    pub weight_scale: Option<f64>,

    /// Weight each point by 1/sigma^2 from its sigma_* columns (least-squares methods:
    /// groups, neighbourhood, network); every point must have them.
    #[arg(long)]
    pub use_precision: bool,

    /// Quality screen of triangles: reject triangles whose smallest angle is below
    /// this, in degrees (0 ≤ value < 60).
    #[arg(long, value_name = "DEG", default_value_t = DEFAULT_MIN_ANGLE_DEG)]
    pub min_angle_deg: f64,

    /// Quality screen of triangles: reject triangles whose aspect ratio exceeds this
    /// (≥ 1; radius ratio R/(2r) = circumradius / (2 · inradius), 1 for an equilateral
    /// triangle).
    #[arg(long, value_name = "RATIO", default_value_t = DEFAULT_MAX_ASPECT_RATIO)]
    pub max_aspect_ratio: f64,

    /// Strain resolution the small-strain adequacy check works to (dimensionless,
    /// e.g. 1e-6 = 1 microstrain).
    #[arg(long, value_name = "STRAIN", default_value_t = DEFAULT_STRAIN_RESOLUTION)]
    pub strain_resolution: f64,

    /// Significance level of the test of whether each region's strain is real
    /// (strain_significant), 0 < alpha < 1.
    #[arg(long, value_name = "ALPHA", default_value_t = DEFAULT_ALPHA)]
    pub alpha: f64,

    /// Trust the a-priori variance factor 1 of the stated precision (chi-square test and
    /// a-priori standard deviations) even where a fit estimates one (default: F test with
    /// the estimated factor wherever the fit has redundancy). Needs --use-precision.
    #[arg(long)]
    pub trust_apriori: bool,

    /// No progress bar (it is shown on stderr for large files when stderr is a terminal).
    #[arg(long, short = 'q')]
    pub quiet: bool,

    /// Unit of `reading` and `zero` in a --method rosette file, and of the
    /// --thermal-coefficients [default: microstrain].
    #[arg(long, value_enum, value_name = "UNIT")]
    pub reading_unit: Option<StrainUnit>,

    /// Gauge factor of the gauges (--method rosette); with --instrument-gauge-factor,
    /// readings are scaled by K0/K [default: unset, no correction].
    #[arg(long, value_name = "K")]
    pub gauge_factor: Option<f64>,

    /// Gauge-factor setting of the instrument, K0 (with --gauge-factor).
    #[arg(long, value_name = "K0")]
    pub instrument_gauge_factor: Option<f64>,

    /// Transverse sensitivity coefficient Kt of the gauges (--method rosette, |Kt| < 1);
    /// needs --transverse-nu0 [default: unset, no correction].
    #[arg(long, value_name = "KT", allow_negative_numbers = true)]
    pub transverse_sensitivity: Option<f64>,

    /// Poisson ratio of the material on which Kt was calibrated (with
    /// --transverse-sensitivity; no default).
    #[arg(long, value_name = "NU0", allow_negative_numbers = true)]
    pub transverse_nu0: Option<f64>,

    /// Thermal output of the gauges (--method rosette): apparent strain
    /// c0 + c1*T + c2*T^2 + … with T in °C, coefficients in --reading-unit per °C^i;
    /// needs --temperature [default: unset, no correction].
    #[arg(
        long,
        value_name = "C0,C1,...",
        value_delimiter = ',',
        allow_negative_numbers = true
    )]
    pub thermal_coefficients: Option<Vec<f64>>,

    /// Temperature at the readings, °C (with --thermal-coefficients).
    #[arg(long, value_name = "T", allow_negative_numbers = true)]
    pub temperature: Option<f64>,

    /// Temperature at the zero readings, °C; the thermal output at it is taken off
    /// as well [default: unset, the polynomial is taken as zero there].
    #[arg(long, value_name = "T0", allow_negative_numbers = true)]
    pub reference_temperature: Option<f64>,

    /// Append stress columns (MPa) computed with this material preset, e.g.
    /// steel-en1993, aluminium-en1999, concrete-c30-37 [default: unset, no stress].
    #[arg(long, value_name = "ID")]
    pub material: Option<String>,

    /// 2D idealisation for the stress columns (required with --material in 2D).
    #[arg(long, value_enum)]
    pub stress_state: Option<StressState>,

    /// Young's modulus in GPa for the stress columns, instead of --material (with
    /// --poisson-ratio).
    #[arg(long, value_name = "E")]
    pub youngs_modulus_gpa: Option<f64>,

    /// Poisson's ratio for the stress columns, instead of --material (with
    /// --youngs-modulus-gpa).
    #[arg(long, value_name = "NU", allow_negative_numbers = true)]
    pub poisson_ratio: Option<f64>,

    /// Origin of the East-North-Up frame for a geodetic (GNSS) points file: latitude and
    /// longitude in degrees, ellipsoidal height in the declared length unit
    /// [default: the mean of the reference positions].
    #[arg(
        long,
        value_name = "LAT,LON,H",
        value_delimiter = ',',
        allow_negative_numbers = true
    )]
    pub enu_origin: Option<Vec<f64>>,

    /// Geodetic (GNSS) points file: keep East and North only, a 2D horizontal network
    /// [default: 3D, East, North and Up].
    #[arg(long)]
    pub horizontal: bool,

    /// Time series: POINTS_FILE is an epochs file (see below); follow the strain of
    /// --elements or --groups through its epochs relative to --baseline.
    #[arg(long)]
    pub series: bool,

    /// Label of the baseline epoch of --series (required with --series).
    #[arg(long, value_name = "LABEL")]
    pub baseline: Option<String>,

    /// Temperature compensation of --series: remove the free thermal strain
    /// alpha*(T - T_baseline) with this coefficient of linear expansion, 1/K
    /// [default: unset; --material gives its own alpha instead].
    #[arg(long, value_name = "PER_K", allow_negative_numbers = true)]
    pub thermal_alpha: Option<f64>,
}

impl AnalyzeArgs {
    /// The stress flags as given.
    pub fn stress_flags(&self) -> StressFlags<'_> {
        StressFlags {
            material: self.material.as_deref(),
            youngs_modulus_gpa: self.youngs_modulus_gpa,
            poisson_ratio: self.poisson_ratio,
            state: self.stress_state,
        }
    }
}

/// Estimator parameters, validated and in core units (metres, degrees as given,
/// dimensionless).
#[derive(Debug, Clone, PartialEq)]
pub struct EstimatorParams {
    /// Neighbourhood size (k nearest), used when `radius_m` is `None`.
    pub k: usize,
    /// Neighbourhood radius, metres.
    pub radius_m: Option<f64>,
    /// Spacing of the grid of neighbourhood centres, metres; `None` = at every point.
    pub grid_spacing_m: Option<f64>,
    /// Distance weighting.
    pub weighting: Weighting,
    /// Weighting length scale, metres; `Some` whenever `weighting` is not `None`.
    pub weight_scale_m: Option<f64>,
    /// Weight points by 1/σ².
    pub use_precision: bool,
    /// Minimum triangle angle, degrees.
    pub min_angle_deg: f64,
    /// Maximum triangle aspect ratio.
    pub max_aspect_ratio: f64,
    /// Strain resolution, dimensionless.
    pub strain_resolution: f64,
    /// Significance level of the strain test.
    pub alpha: f64,
    /// Trust the a-priori variance factor.
    pub trust_apriori: bool,
}

/// Everything the pipeline needs: validated input, resolved method and parameters,
/// and the output header already filled in.
#[derive(Debug, Clone)]
pub struct Request {
    /// The points, metres.
    pub points: Points,
    /// The estimator, resolved from the flags and the dimension.
    pub method: Method,
    /// Elements, for [`Method::Elements`].
    pub elements: Option<Vec<ElementRow>>,
    /// Groups, for [`Method::Groups`].
    pub groups: Option<Vec<GroupRows>>,
    /// Estimator parameters in core units.
    pub params: EstimatorParams,
    /// Unit for lengths in the output.
    pub length_unit: LengthUnit,
    /// Unit for strains in the output.
    pub strain_unit: StrainUnit,
    /// Stress columns to append (`--material`), if asked for.
    pub stress: Option<StressSpec>,
    /// The output header: input, method, units and the parameters that apply.
    pub header: Header,
    /// The ENU frame when the points came from a geodetic (GNSS) file; 2D ENU rows
    /// then carry an `azimuth1` column.
    pub enu: Option<EnuInfo>,
}

fn usage(msg: impl Into<String>) -> CliError {
    CliError::Usage(msg.into())
}

/// A finite positive value, or a usage error naming the flag.
fn positive(flag: &str, v: f64) -> Result<f64, CliError> {
    if v.is_finite() && v > 0.0 {
        Ok(v)
    } else {
        Err(usage(format!("{flag} must be a positive number, got {v}")))
    }
}

/// Check the flags that do not depend on the input.
fn check_flags(a: &AnalyzeArgs) -> Result<(), CliError> {
    if a.elements.is_some() && a.groups.is_some() {
        return Err(usage("give --elements or --groups, not both"));
    }
    if a.k == 0 {
        return Err(usage("--k must be at least 1"));
    }
    if let Some(r) = a.radius {
        positive("--radius", r)?;
    }
    if let Some(l) = a.weight_scale {
        positive("--weight-scale", l)?;
    }
    if let Some(l) = a.grid_spacing {
        positive("--grid-spacing", l)?;
    }
    if !(a.min_angle_deg.is_finite() && (0.0..60.0).contains(&a.min_angle_deg)) {
        return Err(usage(format!(
            "--min-angle-deg must be at least 0 and below 60 (no triangle has all angles above 60°), got {}",
            a.min_angle_deg
        )));
    }
    if !(a.max_aspect_ratio.is_finite() && a.max_aspect_ratio >= 1.0) {
        return Err(usage(format!(
            "--max-aspect-ratio must be at least 1, got {}",
            a.max_aspect_ratio
        )));
    }
    positive("--strain-resolution", a.strain_resolution)?;
    if !(a.alpha > 0.0 && a.alpha < 1.0) {
        return Err(usage(format!(
            "--alpha must be between 0 and 1 (exclusive), got {}",
            a.alpha
        )));
    }
    if a.trust_apriori && !a.use_precision {
        return Err(usage(
            "--trust-apriori needs --use-precision: without stated precision there is no a-priori variance factor",
        ));
    }
    crate::pipeline::rosette::check_method_flags(a)?;
    Ok(())
}

/// Resolve the method from the flags and the dimension, and check the combination.
fn resolve_method(a: &AnalyzeArgs, dim: usize) -> Result<Method, CliError> {
    let method = match a.method {
        Some(m) => m,
        None if a.elements.is_some() => Method::Elements,
        None if a.groups.is_some() => Method::Groups,
        None if dim == 2 => Method::Delaunay,
        None => Method::Neighbourhood,
    };
    let name = method.name();
    if method == Method::Elements && a.elements.is_none() {
        return Err(usage("--method elements needs --elements FILE"));
    }
    if method == Method::Groups && a.groups.is_none() {
        return Err(usage("--method groups needs --groups FILE"));
    }
    if a.elements.is_some() && method != Method::Elements {
        return Err(usage(format!(
            "--elements is used only by --method elements, not {name}"
        )));
    }
    if a.groups.is_some() && method != Method::Groups {
        return Err(usage(format!(
            "--groups is used only by --method groups, not {name}"
        )));
    }
    if method == Method::Delaunay && dim != 2 {
        return Err(usage(
            "--method delaunay triangulates 2D points, but the file is 3D; use elements \
             (with --elements), neighbourhood, groups or network",
        ));
    }
    if a.grid_spacing.is_some() && method != Method::Neighbourhood {
        return Err(usage(format!(
            "--grid-spacing is used only by --method neighbourhood, not {name}"
        )));
    }
    if a.radius.is_some() && method != Method::Neighbourhood {
        return Err(usage(format!(
            "--radius is used only by --method neighbourhood, not {name}"
        )));
    }
    let weighted = a.weighting != Weighting::None || a.weight_scale.is_some();
    if weighted && !matches!(method, Method::Groups | Method::Neighbourhood) {
        return Err(usage(format!(
            "--weighting and --weight-scale apply to --method groups or neighbourhood, not {name}"
        )));
    }
    if a.use_precision && !method.is_least_squares() {
        return Err(usage(format!(
            "--use-precision applies to the least-squares methods (groups, neighbourhood, network), not {name}"
        )));
    }
    Ok(method)
}

/// Read and check everything named by the flags. Nothing is written.
pub fn prepare(a: &AnalyzeArgs) -> Result<Request, CliError> {
    check_flags(a)?;
    if a.method == Some(Method::Rosette) {
        return Err(usage(
            "--method rosette reads gauge readings, not points; its request is built by \
             pipeline::rosette::prepare",
        ));
    }
    let read = ReadOptions {
        length_unit: a.length_unit,
        progress: !a.quiet,
    };
    let geodetic = input::geodetic::read_geodetic(&a.points_file, &read, &geodetic_options(a)?)?;
    let (points, enu) = match geodetic {
        Some(g) => (g.points, Some(g.enu)),
        None if a.enu_origin.is_some() || a.horizontal => {
            return Err(usage(
                "--enu-origin and --horizontal apply to a geodetic points file \
                 (id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur)",
            ));
        }
        None => (input::read_points(&a.points_file, &read)?, None),
    };
    resolve_for_points(a, &points)?;
    let elements = a
        .elements
        .as_deref()
        .map(input::read_elements)
        .transpose()?;
    let groups = a.groups.as_deref().map(input::read_groups).transpose()?;
    prepare_from(a, points, enu, elements, groups)
}

/// The flags of `kinema analyze` at their defaults, with `input` as the points-file
/// label (it names the input in the output header; nothing is read from it). The
/// service builds its requests from these, so that an API request and the CLI share
/// one set of defaults.
pub fn default_args(input: &str) -> Result<AnalyzeArgs, CliError> {
    #[derive(clap::Parser)]
    struct Defaults {
        #[command(flatten)]
        a: AnalyzeArgs,
    }
    use clap::Parser;
    Defaults::try_parse_from(["kinema", "--", input])
        .map(|d| d.a)
        .map_err(|e| usage(format!("default analyze flags: {e}")))
}

/// The part of [`prepare`] after the input has been read: check the flags against
/// the points, resolve the method, convert parameters to metres and fill in the
/// header. `elements` and `groups` stand for the files named by `--elements` and
/// `--groups` (the flags must be set, with any label, when they are given). Nothing is
/// read or written.
pub fn prepare_from(
    a: &AnalyzeArgs,
    points: Points,
    enu: Option<EnuInfo>,
    elements: Option<Vec<ElementRow>>,
    groups: Option<Vec<GroupRows>>,
) -> Result<Request, CliError> {
    check_flags(a)?;
    let dim = points.dimension();
    let (method, weight_scale) = resolve_for_points(a, &points)?;
    let unit = a.length_unit;
    let params = EstimatorParams {
        k: a.k,
        radius_m: a.radius.map(|r| unit.to_metres(r)),
        grid_spacing_m: a.grid_spacing.map(|l| unit.to_metres(l)),
        weighting: a.weighting,
        weight_scale_m: weight_scale.map(|l| unit.to_metres(l)),
        use_precision: a.use_precision,
        min_angle_deg: a.min_angle_deg,
        max_aspect_ratio: a.max_aspect_ratio,
        strain_resolution: a.strain_resolution,
        alpha: a.alpha,
        trust_apriori: a.trust_apriori,
    };
    let mut header = Header::new(
        a.points_file.display().to_string(),
        points.len(),
        dim,
        method.name(),
        unit,
        a.strain_unit,
    );
    header.parameters = header_parameters(method, a, weight_scale);
    let stress = StressSpec::from_flags(&a.stress_flags(), dim, a.strain_unit)?;
    if let Some(s) = &stress {
        header.parameters.extend(s.parameters());
    }
    if let Some(e) = &enu {
        header.parameters.extend(e.parameters(unit));
    }
    Ok(Request {
        points,
        method,
        elements,
        groups,
        params,
        length_unit: unit,
        strain_unit: a.strain_unit,
        stress,
        header,
        enu,
    })
}

/// The method for these points and the weighting length scale (declared unit), with
/// the checks that need the points.
fn resolve_for_points(a: &AnalyzeArgs, points: &Points) -> Result<(Method, Option<f64>), CliError> {
    let method = resolve_method(a, points.dimension())?;
    if a.use_precision && !points.all_have_sigma() {
        return Err(usage(
            "--use-precision needs sigma_x, sigma_y (and sigma_z in 3D) for every point",
        ));
    }
    let weight_scale = match (a.weighting, a.weight_scale, a.radius) {
        (Weighting::None, _, _) => None,
        (_, Some(l), _) => Some(l),
        (_, None, Some(r)) if method == Method::Neighbourhood => Some(r),
        (w, None, _) => {
            return Err(usage(format!(
                "--weighting {} needs --weight-scale L (or --radius with --method neighbourhood)",
                w.to_possible_value()
                    .map(|v| v.get_name().to_owned())
                    .unwrap_or_default()
            )));
        }
    };
    Ok((method, weight_scale))
}

/// `--enu-origin` and `--horizontal`, checked: three finite numbers, latitude in
/// [−90, 90] (the core's `LatitudeOutOfRange`, as a usage error).
fn geodetic_options(a: &AnalyzeArgs) -> Result<GeodeticOptions, CliError> {
    let origin = match a.enu_origin.as_deref() {
        None => None,
        Some(&[lat, lon, h]) => {
            Geodetic::from_degrees(lat, lon, a.length_unit.to_metres(h))
                .validate()
                .map_err(|e| usage(format!("--enu-origin {lat},{lon},{h}: {e}")))?;
            Some([lat, lon, h])
        }
        Some(v) => {
            return Err(usage(format!(
                "--enu-origin takes LAT,LON,H (three numbers), got {} values",
                v.len()
            )));
        }
    };
    Ok(GeodeticOptions {
        origin,
        horizontal: a.horizontal,
    })
}

/// The parameters that apply to `method`, named with their unit, in the declared units.
fn header_parameters(
    method: Method,
    a: &AnalyzeArgs,
    weight_scale: Option<f64>,
) -> Vec<(String, Cell)> {
    let u = a.length_unit.label();
    let mut p: Vec<(String, Cell)> = Vec::new();
    match method {
        Method::Delaunay => {
            p.push(("min_angle_deg".into(), Cell::Num(a.min_angle_deg)));
            p.push(("max_aspect_ratio".into(), Cell::Num(a.max_aspect_ratio)));
        }
        Method::Elements => {
            if let Some(e) = &a.elements {
                p.push(("elements_file".into(), Cell::Text(e.display().to_string())));
            }
        }
        Method::Groups => {
            if let Some(g) = &a.groups {
                p.push(("groups_file".into(), Cell::Text(g.display().to_string())));
            }
        }
        Method::Neighbourhood => {
            match a.radius {
                Some(r) => p.push((format!("radius_{u}"), Cell::Num(r))),
                None => p.push((
                    "k".into(),
                    Cell::Int(i64::try_from(a.k).unwrap_or(i64::MAX)),
                )),
            }
            p.push((
                "centres".into(),
                Cell::Text(match a.grid_spacing {
                    Some(_) => "grid".into(),
                    None => "points".into(),
                }),
            ));
            if let Some(l) = a.grid_spacing {
                p.push((format!("grid_spacing_{u}"), Cell::Num(l)));
            }
        }
        Method::Grid | Method::Network | Method::Rosette => {}
    }
    if matches!(method, Method::Groups | Method::Neighbourhood) {
        let w = a
            .weighting
            .to_possible_value()
            .map(|v| v.get_name().to_owned())
            .unwrap_or_default();
        p.push(("weighting".into(), Cell::Text(w)));
        if let Some(l) = weight_scale {
            p.push((format!("weight_scale_{u}"), Cell::Num(l)));
        }
    }
    if method.is_least_squares() {
        p.push(("use_precision".into(), Cell::Bool(a.use_precision)));
    }
    p.push(("strain_resolution".into(), Cell::Num(a.strain_resolution)));
    p.push(("alpha".into(), Cell::Num(a.alpha)));
    if a.trust_apriori {
        p.push(("variance_factor".into(), Cell::Text("a-priori (1)".into())));
    }
    p
}

/// A result file being written under a temporary name beside its final path. It is
/// renamed into place by [`PendingFile::commit`] when the run succeeds, and removed
/// when dropped uncommitted, so a failed run never leaves a half-written or empty file.
#[derive(Debug)]
pub struct PendingFile {
    partial: PathBuf,
    target: PathBuf,
    committed: bool,
}

impl PendingFile {
    /// Move the finished file to its final path.
    pub fn commit(mut self) -> Result<(), CliError> {
        std::fs::rename(&self.partial, &self.target).map_err(|source| CliError::Output {
            target: self.target.display().to_string(),
            source,
        })?;
        self.committed = true;
        Ok(())
    }
}

impl Drop for PendingFile {
    fn drop(&mut self) {
        if !self.committed {
            // Best effort: the partial file is ours and useless after a failure.
            let _ = std::fs::remove_file(&self.partial);
        }
    }
}

/// Open the output, buffered: stdout, or a temporary file beside `path` (see
/// [`PendingFile`]).
pub fn open_output(path: Option<&Path>) -> Result<(Box<dyn Write>, Option<PendingFile>), CliError> {
    match path {
        None => Ok((
            Box::new(BufWriter::with_capacity(1 << 16, io::stdout())),
            None,
        )),
        Some(p) => {
            let name = p
                .file_name()
                .map_or_else(|| "output".into(), |n| n.to_string_lossy().into_owned());
            let partial = p.with_file_name(format!(".{name}.partial-{}", std::process::id()));
            let f = File::create(&partial).map_err(|source| CliError::Output {
                target: p.display().to_string(),
                source,
            })?;
            Ok((
                Box::new(BufWriter::with_capacity(1 << 16, f)),
                Some(PendingFile {
                    partial,
                    target: p.to_path_buf(),
                    committed: false,
                }),
            ))
        }
    }
}

/// Run `kinema analyze`: read and check, compute and write; an output file appears only
/// when everything succeeded.
pub fn run(a: &AnalyzeArgs) -> Result<(), CliError> {
    let target = a
        .output
        .as_deref()
        .map_or_else(|| "stdout".to_owned(), |p| p.display().to_string());
    if a.series {
        check_flags(a)?;
        let method = resolve_method(a, 2)?;
        let request = crate::pipeline::series::prepare(a, method)?;
        let (out, pending) = open_output(a.output.as_deref())?;
        let mut sink = output::sink(a.format, out);
        crate::pipeline::series::run(&request, sink.as_mut(), &target)?;
        drop(sink);
        return pending.map_or(Ok(()), PendingFile::commit);
    }
    crate::pipeline::series::check_series_flags(a)?;
    if a.method == Some(Method::Rosette) {
        check_flags(a)?;
        resolve_method(a, 2)?;
        let request = crate::pipeline::rosette::prepare(a)?;
        let (out, pending) = open_output(a.output.as_deref())?;
        let mut sink = output::sink(a.format, out);
        crate::pipeline::rosette::run(&request, sink.as_mut(), &target)?;
        drop(sink);
        return pending.map_or(Ok(()), PendingFile::commit);
    }
    let request = prepare(a)?;
    let (out, pending) = open_output(a.output.as_deref())?;
    let mut sink = output::sink(a.format, out);
    crate::pipeline::run(&request, sink.as_mut(), &target)?;
    drop(sink);
    pending.map_or(Ok(()), PendingFile::commit)
}

#[cfg(test)]
mod tests {
    use clap::Parser;

    use super::*;

    #[derive(Parser)]
    struct T {
        #[command(flatten)]
        a: AnalyzeArgs,
    }

    fn args(extra: &[&str]) -> AnalyzeArgs {
        let mut v = vec!["t", "p.csv"];
        v.extend_from_slice(extra);
        T::try_parse_from(v).expect("parses").a
    }

    #[test]
    fn defaults() {
        let a = args(&[]);
        assert_eq!(a.method, None);
        assert_eq!(a.format, OutputFormat::Table);
        assert_eq!(a.length_unit, LengthUnit::Metre);
        assert_eq!(a.strain_unit, StrainUnit::Microstrain);
        assert_eq!(a.k, 12);
        assert_eq!(a.min_angle_deg, 10.0);
        assert_eq!(a.max_aspect_ratio, DEFAULT_MAX_ASPECT_RATIO);
        // The CLI defaults are the core's screen defaults.
        let core = kinema_core::estimate::quality::QualityThresholds::default();
        assert_eq!(DEFAULT_MAX_ASPECT_RATIO, core.max_aspect_ratio);
        assert!((DEFAULT_MIN_ANGLE_DEG.to_radians() - core.min_angle_rad).abs() < 1e-15);
        assert_eq!(a.strain_resolution, 1e-6);
        assert_eq!(a.weighting, Weighting::None);
        assert!(!a.use_precision && !a.quiet);
    }

    #[test]
    fn method_resolution() {
        assert_eq!(resolve_method(&args(&[]), 2).ok(), Some(Method::Delaunay));
        assert_eq!(
            resolve_method(&args(&[]), 3).ok(),
            Some(Method::Neighbourhood)
        );
        assert_eq!(
            resolve_method(&args(&["--elements", "e.csv"]), 3).ok(),
            Some(Method::Elements)
        );
        assert_eq!(
            resolve_method(&args(&["--groups", "g.csv"]), 2).ok(),
            Some(Method::Groups)
        );
    }

    #[test]
    fn bad_combinations_are_usage_errors() {
        let bad = |extra: &[&str], dim: usize| {
            let a = args(extra);
            let e = check_flags(&a)
                .and_then(|()| resolve_method(&a, dim))
                .expect_err("should be refused");
            assert_eq!(e.exit_code(), 2);
            e.to_string()
        };
        assert!(bad(&["--method", "delaunay"], 3).contains("2D points"));
        assert!(bad(&["--method", "elements"], 2).contains("needs --elements"));
        assert!(bad(&["--method", "groups"], 2).contains("needs --groups"));
        assert!(bad(&["--elements", "e", "--method", "network"], 2).contains("only by"));
        assert!(bad(&["--radius", "5", "--method", "network"], 2).contains("--radius"));
        assert!(bad(&["--use-precision"], 2).contains("least-squares"));
        assert!(bad(&["--weighting", "gaussian"], 2).contains("--weighting"));
        assert!(bad(&["--radius=-1"], 2).contains("positive"));
        assert!(bad(&["--min-angle-deg", "60"], 2).contains("below 60"));
        assert!(bad(&["--max-aspect-ratio", "0.5"], 2).contains("at least 1"));
        assert!(bad(&["--strain-resolution", "0"], 2).contains("positive"));
        assert!(bad(&["--k", "0"], 2).contains("at least 1"));
        assert!(bad(&["--elements", "e", "--groups", "g"], 2).contains("not both"));
    }

    #[test]
    fn prepare_converts_lengths_and_fills_the_header() {
        let dir = tempfile::tempdir().expect("dir");
        let p = dir.path().join("w.csv");
        std::fs::write(
            &p,
            "id,x,y,ux,uy\nA,0,0,0,0\nB,1000,0,1,0\nC,0,1000,0,1\nD,1000,1000,1,1\n",
        )
        .expect("write");
        let path = p.to_str().expect("utf-8 path");
        let a = T::try_parse_from([
            "t",
            path,
            "--length-unit",
            "mm",
            "--method",
            "neighbourhood",
            "--radius",
            "1500",
            "--weighting",
            "gaussian",
        ])
        .expect("parses")
        .a;
        let r = prepare(&a).expect("prepares");
        assert_eq!(r.method, Method::Neighbourhood);
        assert_eq!(r.params.radius_m, Some(1.5));
        assert_eq!(r.params.weight_scale_m, Some(1.5), "defaults to the radius");
        assert_eq!(r.header.points, 4);
        assert_eq!(r.header.length_unit, LengthUnit::Millimetre);
        assert!(
            r.header
                .parameters
                .contains(&("radius_mm".into(), Cell::Num(1500.0)))
        );
        let a = T::try_parse_from(["t", path, "--method", "network", "--use-precision"])
            .expect("parses")
            .a;
        let e = prepare(&a).expect_err("no sigma columns");
        assert!(e.to_string().contains("--use-precision needs sigma"), "{e}");
    }
}
