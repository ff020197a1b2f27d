//! `kinema analyze --series`: the strain of fixed regions of one network followed
//! through survey epochs, relative to a baseline epoch.
//!
//! The epochs file ([`crate::input::read_epochs`]) gives the measured positions at
//! every epoch; the regions are the user's elements (`--method elements`) or groups
//! (`--method groups`). [`kinema_core::timeseries::strain_series`] forms, for every
//! epoch, the displacement from the baseline and the gradient of every region, and from
//! it the cumulative strain, the increments between consecutive epochs and the rate of
//! every strain component (least-squares slope against time, per day and per Julian
//! year of 365.25 days, with its standard deviation from the scatter when at least
//! three epochs are available).
//!
//! Output sections, declared in this order:
//! - `cumulative`: one row per region per epoch at which it is computed; the epoch's
//!   gradient goes through [`kinema_core::kinematics::analyze2`] /
//!   [`analyze3`](kinema_core::kinematics::analyze3), so the strain columns are those
//!   of every other method ([`super::columns`]) — principal values and everything
//!   derived are of the UNCOMPENSATED strain. With temperature compensation the row
//!   ends with the epoch temperature, the free thermal strain `α·(T − T_baseline)` and
//!   the compensated normal strains (shear is unchanged by free thermal expansion).
//! - `increments`: the change between consecutive epochs at which a region is computed.
//! - `rates`: one row per region and strain component (uncompensated, then
//!   compensated when compensation applies).
//! - `excluded`: a region left out at one epoch because some of its points were not
//!   measured there (or at the baseline), with the missing point IDs.
//! - `rejected`: elements screened out by quality (on the baseline geometry, hence at
//!   every epoch), and region-epochs whose strain state the kinematics refuse.
//!
//! Everything is computed before the first byte is written.

use std::collections::HashMap;
use std::io;

use kinema_core::elasticity::material;
use kinema_core::estimate::elements::{ElementSpec, OrientationPolicy};
use kinema_core::estimate::lsq::{DistanceWeight, FitOptions, Group};
use kinema_core::estimate::quality::QualityThresholds;
use kinema_core::kinematics::KinematicsOptions;
use kinema_core::timeseries::{
    Epoch, Rate, RateWeighting, Regions, SeriesOptions, StrainSeries, ThermalCompensation,
    strain_component_names, strain_series,
};

use super::columns::{Extra, Units};
use super::{Dim, StrainRow};
use crate::cli::CliError;
use crate::cli::analyze::{AnalyzeArgs, Method, Weighting};
use crate::input::{
    ElementRow, EpochSeries, GroupRows, ReadOptions, format_rfc3339, read_elements, read_epochs,
    read_groups,
};
use crate::output::{self, Cell, Column, Footer, Header, RowSink, Section};
use crate::units::StrainUnit;

/// Name of the section of cumulative strains.
pub const CUMULATIVE: &str = "cumulative";
/// Name of the section of increments between consecutive epochs.
pub const INCREMENTS: &str = "increments";
/// Name of the section of strain rates.
pub const RATES: &str = "rates";
/// Name of the section of region-epochs left out for missing points.
pub const EXCLUDED: &str = "excluded";

/// Everything a series run needs, validated, in core units.
#[derive(Debug, Clone)]
pub struct SeriesRequest {
    /// The epochs, metres, in time order.
    pub epochs: EpochSeries,
    /// The regions (elements or groups) with their estimator options.
    pub regions: Regions,
    /// `(label, point IDs)` of every region, for the `rejected` section.
    pub members: Vec<(String, Vec<String>)>,
    /// Baseline, temperature compensation and rate weighting.
    pub options: SeriesOptions,
    /// Output units.
    pub units: Units,
    /// Strain resolution of the small-strain adequacy check, dimensionless.
    pub strain_resolution: f64,
    /// Output header.
    pub header: Header,
}

fn usage(msg: impl Into<String>) -> CliError {
    CliError::Usage(msg.into())
}

/// Refuse the series-only flags without `--series` (usage error, exit 2).
pub fn check_series_flags(a: &AnalyzeArgs) -> Result<(), CliError> {
    if a.series {
        return Ok(());
    }
    for (flag, given) in [
        ("--baseline", a.baseline.is_some()),
        ("--thermal-alpha", a.thermal_alpha.is_some()),
    ] {
        if given {
            return Err(usage(format!("{flag} is used only with --series")));
        }
    }
    Ok(())
}

/// The temperature compensation asked for: `--thermal-alpha`, or the α of
/// `--material`, or none.
fn thermal(a: &AnalyzeArgs) -> Result<Option<(ThermalCompensation, Option<String>)>, CliError> {
    match (a.thermal_alpha, &a.material) {
        (Some(_), Some(_)) => Err(usage(
            "give --thermal-alpha or --material for the temperature compensation, not both",
        )),
        (Some(alpha), None) => {
            let th = ThermalCompensation { alpha_per_k: alpha };
            th.validate()?;
            Ok(Some((th, None)))
        }
        (None, Some(id)) => {
            let m = material(id)?;
            Ok(Some((
                ThermalCompensation {
                    alpha_per_k: m.thermal_expansion,
                },
                Some(m.id),
            )))
        }
        (None, None) => Ok(None),
    }
}

/// The regions of a series as read from a file or given in a request.
#[derive(Debug, Clone, PartialEq)]
pub enum RegionRows {
    /// Elements (`--method elements`).
    Elements(Vec<ElementRow>),
    /// Groups (`--method groups`).
    Groups(Vec<GroupRows>),
}

fn check_method_flags(a: &AnalyzeArgs, method: Method) -> Result<(), CliError> {
    if !matches!(method, Method::Elements | Method::Groups) {
        return Err(usage(format!(
            "--series follows fixed regions: use --method elements (with --elements FILE) or \
             --method groups (with --groups FILE), not {}",
            method.name()
        )));
    }
    for (flag, given) in [
        ("--stress-state", a.stress_state.is_some()),
        ("--youngs-modulus-gpa", a.youngs_modulus_gpa.is_some()),
        ("--poisson-ratio", a.poisson_ratio.is_some()),
    ] {
        if given {
            return Err(usage(format!(
                "{flag}: --series writes no stress columns (--material gives only its \
                 coefficient of thermal expansion there)"
            )));
        }
    }
    Ok(())
}

/// Read and check everything for a series run (`method` resolved from the flags).
/// Nothing is written.
pub fn prepare(a: &AnalyzeArgs, method: Method) -> Result<SeriesRequest, CliError> {
    check_method_flags(a, method)?;
    thermal(a)?;
    let epochs = read_epochs(
        &a.points_file,
        &ReadOptions {
            length_unit: a.length_unit,
            progress: !a.quiet,
        },
    )?;
    if a.baseline.is_none() {
        return Err(usage(format!(
            "--series needs --baseline LABEL, one of the epochs: {}",
            epochs.labels().join(", ")
        )));
    }
    let rows = match method {
        Method::Elements => {
            let path = a
                .elements
                .as_deref()
                .ok_or_else(|| usage("--method elements needs --elements FILE"))?;
            RegionRows::Elements(read_elements(path)?)
        }
        _ => {
            let path = a
                .groups
                .as_deref()
                .ok_or_else(|| usage("--method groups needs --groups FILE"))?;
            RegionRows::Groups(read_groups(path)?)
        }
    };
    prepare_from(a, method, epochs, rows)
}

/// The part of [`prepare`] after the input has been read: check the flags, build the
/// regions and the header. `epochs` are positions in metres; `rows` stand for the file
/// named by `--elements` or `--groups` (the flag must be set, with any label, and
/// match `method`). The header names `a.points_file` as the input. Nothing is read or
/// written.
pub fn prepare_from(
    a: &AnalyzeArgs,
    method: Method,
    epochs: EpochSeries,
    rows: RegionRows,
) -> Result<SeriesRequest, CliError> {
    check_method_flags(a, method)?;
    let thermal = thermal(a)?;
    let labels = epochs.labels().join(", ");
    let Some(baseline) = a.baseline.clone() else {
        return Err(usage(format!(
            "--series needs --baseline LABEL, one of the epochs: {labels}"
        )));
    };
    let unit = a.length_unit;
    let (regions, members, file_param) = match (method, rows) {
        (Method::Elements, RegionRows::Elements(rows)) => {
            let path = a
                .elements
                .as_deref()
                .ok_or_else(|| usage("--method elements needs --elements FILE"))?;
            let members = rows
                .iter()
                .map(|e| (e.id.clone(), e.vertices.clone()))
                .collect();
            let elements = rows
                .into_iter()
                .map(|e| ElementSpec::new(e.id, e.vertices))
                .collect();
            let thresholds = QualityThresholds {
                min_angle_rad: a.min_angle_deg.to_radians(),
                max_aspect_ratio: a.max_aspect_ratio,
            };
            (
                Regions::Elements {
                    elements,
                    policy: OrientationPolicy::Require,
                    thresholds,
                },
                members,
                ("elements_file", path.display().to_string()),
            )
        }
        (Method::Groups, RegionRows::Groups(rows)) => {
            let path = a
                .groups
                .as_deref()
                .ok_or_else(|| usage("--method groups needs --groups FILE"))?;
            let members = rows
                .iter()
                .map(|g| (g.name.clone(), g.point_ids.clone()))
                .collect();
            let groups = rows
                .into_iter()
                .map(|g| Group {
                    name: g.name,
                    point_ids: g.point_ids,
                })
                .collect();
            let distance_weight = match (a.weighting, a.weight_scale) {
                (Weighting::None, _) => DistanceWeight::None,
                (Weighting::Gaussian, Some(l)) => DistanceWeight::Gaussian {
                    scale_m: unit.to_metres(l),
                },
                (Weighting::Quadratic, Some(l)) => DistanceWeight::QuadraticDecay {
                    radius_m: unit.to_metres(l),
                },
                (_, None) => {
                    return Err(usage(
                        "--weighting gaussian|quadratic needs --weight-scale L",
                    ));
                }
            };
            let options = FitOptions {
                use_precision: a.use_precision,
                distance_weight,
                ..FitOptions::default()
            };
            options.validate()?;
            (
                Regions::Groups { groups, options },
                members,
                ("groups_file", path.display().to_string()),
            )
        }
        (m, _) => {
            return Err(usage(format!(
                "--method {} does not match the regions given",
                m.name()
            )));
        }
    };

    let mut header = Header::new(
        a.points_file.display().to_string(),
        epochs.distinct_points(),
        epochs.dimension(),
        method.name(),
        unit,
        a.strain_unit,
    );
    let p = &mut header.parameters;
    p.push(("series".into(), Cell::Bool(true)));
    p.push(("baseline".into(), Cell::Text(baseline.clone())));
    p.push((
        "epochs".into(),
        Cell::Int(i64::try_from(epochs.len()).unwrap_or(i64::MAX)),
    ));
    p.push(("epoch_labels".into(), Cell::Text(labels)));
    p.push((file_param.0.into(), Cell::Text(file_param.1)));
    match method {
        Method::Elements => {
            p.push(("min_angle_deg".into(), Cell::Num(a.min_angle_deg)));
            p.push(("max_aspect_ratio".into(), Cell::Num(a.max_aspect_ratio)));
        }
        _ => {
            let w = match a.weighting {
                Weighting::None => "none",
                Weighting::Gaussian => "gaussian",
                Weighting::Quadratic => "quadratic",
            };
            p.push(("weighting".into(), Cell::Text(w.into())));
            if let Some(l) = a.weight_scale {
                p.push((format!("weight_scale_{}", unit.label()), Cell::Num(l)));
            }
            p.push(("use_precision".into(), Cell::Bool(a.use_precision)));
        }
    }
    match &thermal {
        Some((th, mat)) => {
            p.push(("thermal_alpha_per_k".into(), Cell::Num(th.alpha_per_k)));
            p.push((
                "thermal_alpha_from".into(),
                Cell::Text(mat.as_ref().map_or_else(
                    || "--thermal-alpha".to_owned(),
                    |id| format!("material {id}"),
                )),
            ));
        }
        None => p.push(("thermal_alpha_per_k".into(), Cell::Text("none".into()))),
    }
    p.push((
        "rate_weighting".into(),
        Cell::Text(
            "1/sd^2 from the stated precision, baseline left out, intercept free, where every \
             point of a region states sigma (see `weighted`); else equal weights"
                .into(),
        ),
    ));
    p.push(("increment_test_alpha".into(), Cell::Num(a.alpha)));
    p.push((
        "days_per_year".into(),
        Cell::Num(kinema_core::timeseries::DAYS_PER_JULIAN_YEAR),
    ));
    p.push(("strain_resolution".into(), Cell::Num(a.strain_resolution)));

    Ok(SeriesRequest {
        epochs,
        regions,
        members,
        options: SeriesOptions {
            baseline,
            thermal: thermal.map(|(th, _)| th),
            weighting: RateWeighting::Precision,
            alpha: a.alpha,
            trust_apriori: a.trust_apriori,
        },
        units: Units {
            length: unit,
            strain: a.strain_unit,
            precision_weighted: a.use_precision,
        },
        strain_resolution: a.strain_resolution,
        header,
    })
}

/// What a strain component column holds.
fn component_meaning(name: &str) -> &'static str {
    match name {
        "exx" => "normal strain along x, extension positive",
        "eyy" => "normal strain along y, extension positive",
        "ezz" => "normal strain along z, extension positive",
        "exy" => "tensor shear strain exy = gxy/2",
        "eyz" => "tensor shear strain eyz = gyz/2",
        "exz" => "tensor shear strain exz = gxz/2",
        _ => "strain component",
    }
}

/// Engineering shear names and the index of their tensor shear in the strain vector.
fn engineering<const D: usize>() -> &'static [(&'static str, usize)] {
    if D == 2 {
        &[("gxy", 2)]
    } else {
        &[("gxy", 3), ("gyz", 4), ("gxz", 5)]
    }
}

/// Rotation column names (degrees).
fn rotation_names<const D: usize>() -> &'static [(&'static str, &'static str)] {
    if D == 2 {
        &[(
            "rotation",
            "rigid rotation (duy/dx - dux/dy)/2, counter-clockwise positive",
        )]
    } else {
        &[
            ("wx", "rigid rotation about x, right-hand rule (curl(u)/2)"),
            ("wy", "rigid rotation about y, right-hand rule"),
            ("wz", "rigid rotation about z, right-hand rule"),
        ]
    }
}

/// Compensated normal strain column names.
fn compensated_names<const D: usize>() -> &'static [(&'static str, &'static str)] {
    let all: &'static [(&'static str, &'static str)] = &[
        (
            "exx_compensated",
            "exx with the free thermal strain removed: exx - thermal_strain",
        ),
        ("eyy_compensated", "eyy - thermal_strain"),
        ("ezz_compensated", "ezz - thermal_strain"),
    ];
    &all[..D]
}

fn cumulative_columns<const D: usize>(u: Units, thermal: bool) -> Vec<Column>
where
    Dim<D>: StrainRow<D>,
{
    let s = u.strain.label();
    let mut c = vec![
        Column::new("region", "", "element ID or group name"),
        Column::new("epoch", "", "epoch label"),
        Column::new("time", "", "epoch time, RFC 3339, UTC"),
        Column::new(
            "days_from_baseline",
            "",
            "days (86 400 s) since the baseline epoch, negative before it",
        ),
    ];
    // The strain columns of every other method, without label, members and centroid.
    c.extend(<Dim<D>>::columns(u, Extra::None).into_iter().skip(2 + D));
    if thermal {
        c.push(Column::new(
            "temperature",
            "degc",
            "recorded temperature of the epoch",
        ));
        c.push(Column::new(
            "thermal_strain",
            s,
            "free thermal strain alpha*(T - T_baseline) removed from the normal strains",
        ));
        for (n, m) in compensated_names::<D>() {
            c.push(Column::new(n, s, m));
        }
    }
    let sd: &[&str] = if D == 2 {
        &["sd_exx", "sd_eyy", "sd_exy"]
    } else {
        &["sd_exx", "sd_eyy", "sd_ezz", "sd_exy", "sd_eyz", "sd_exz"]
    };
    for n in sd {
        c.push(Column::new(
            n,
            s,
            "a-priori standard deviation of the cumulative strain component, propagated \
             from the stated sigmas (0 at the baseline; empty without stated precision)",
        ));
    }
    c
}

fn increment_columns<const D: usize>(u: Units, thermal: bool) -> Vec<Column> {
    let s = u.strain.label();
    let mut c = vec![
        Column::new("region", "", "element ID or group name"),
        Column::new("from", "", "label of the earlier epoch"),
        Column::new("to", "", "label of the later epoch"),
        Column::new("dt_days", "", "days between the two epochs"),
    ];
    for n in strain_component_names::<D>() {
        c.push(Column::new(n, s, component_meaning(n)));
    }
    for (n, _) in engineering::<D>() {
        c.push(Column::new(
            n,
            s,
            "engineering shear strain, twice the tensor shear",
        ));
    }
    for (n, m) in rotation_names::<D>() {
        c.push(Column::new(n, "deg", m));
    }
    if thermal {
        for (n, m) in compensated_names::<D>() {
            c.push(Column::new(n, s, m));
        }
    }
    c.extend([
        Column::new(
            "strain_test",
            "",
            "test of H0 no strain change on the strain components of the displacement \
             between the two epochs: chi2(m) with the a-priori variance factor trusted, \
             F(m, r) with it estimated (empty without stated precision)",
        ),
        Column::new("strain_test_statistic", "", "the test statistic"),
        Column::new("strain_p_value", "", "P(X > statistic) under H0"),
        Column::new(
            "strain_significant",
            "",
            "true when strain_p_value < alpha (parameter increment_test_alpha)",
        ),
    ]);
    c
}

/// Units of a strain rate per day and per Julian year, in the declared strain unit.
fn rate_units(u: Units) -> (&'static str, &'static str) {
    match u.strain {
        StrainUnit::Strain => ("strain_per_day", "strain_per_year"),
        StrainUnit::Microstrain => ("microstrain_per_day", "microstrain_per_year"),
    }
}

fn rate_columns(u: Units) -> Vec<Column> {
    let (per_day, per_year) = rate_units(u);
    vec![
        Column::new("region", "", "element ID or group name"),
        Column::new(
            "component",
            "",
            "strain component (exy, eyz, exz are tensor shears)",
        ),
        Column::new(
            "compensated",
            "",
            "true for the rate of the temperature-compensated strain",
        ),
        Column::new(
            "rate",
            per_day,
            "rate per day: (weighted) least-squares slope of the cumulative strain against time",
        ),
        Column::new("rate", per_year, "rate per Julian year (365.25 days)"),
        Column::new(
            "sd_rate",
            per_day,
            "standard deviation of the rate per day, from the scatter about the line scaled by the weights; with 2 epochs, from the weights alone when weighted (empty when unweighted)",
        ),
        Column::new(
            "sd_rate",
            per_year,
            "standard deviation of the rate per Julian year",
        ),
        Column::new(
            "n_epochs",
            "",
            "epochs in the regression: the baseline included when unweighted, left out when weighted",
        ),
        Column::new("dof", "", "residual degrees of freedom n_epochs - 2"),
        Column::new(
            "weighted",
            "",
            "true: weights 1/sd^2 from the stated precision, baseline left out, intercept free; false: every epoch has weight 1",
        ),
        Column::new("note", "", "why there is no rate, if there is none"),
    ]
}

fn excluded_columns() -> Vec<Column> {
    vec![
        Column::new("region", "", "element ID or group name"),
        Column::new("epoch", "", "epoch at which the region is left out"),
        Column::new(
            "missing",
            "",
            "the region's point IDs not measured at this epoch or at the baseline",
        ),
    ]
}

/// Write the result of the series for `req` into `sink`; `target` names the output for
/// I/O error messages.
pub fn run(req: &SeriesRequest, sink: &mut dyn RowSink, target: &str) -> Result<(), CliError> {
    let opts = KinematicsOptions {
        strain_resolution: req.strain_resolution,
        ..KinematicsOptions::default()
    };
    opts.validate()?;
    match &req.epochs {
        EpochSeries::Plane(e) => run_d(req, e, &opts, sink, target),
        EpochSeries::Space(e) => run_d(req, e, &opts, sink, target),
    }
}

/// All rows of the result, computed before anything is written.
struct Rows {
    cumulative: Vec<Vec<Cell>>,
    increments: Vec<Vec<Cell>>,
    rates: Vec<Vec<Cell>>,
    excluded: Vec<Vec<Cell>>,
    rejected: Vec<[Cell; 3]>,
    by_reason: Vec<(String, u64)>,
    inadequate: u64,
}

fn count(by_reason: &mut Vec<(String, u64)>, kind: &str) {
    match by_reason.iter_mut().find(|(k, _)| k == kind) {
        Some((_, n)) => *n += 1,
        None => by_reason.push((kind.to_owned(), 1)),
    }
}

fn rows<const D: usize>(
    req: &SeriesRequest,
    epochs: &[Epoch<D>],
    series: &StrainSeries<D>,
    opts: &KinematicsOptions,
) -> Rows
where
    Dim<D>: StrainRow<D>,
{
    let u = req.units;
    let s = |v: f64| Cell::Num(u.strain.from_strain(v));
    let text = |t: &str| Cell::Text(t.to_owned());
    let int = |v: usize| Cell::Int(i64::try_from(v).unwrap_or(i64::MAX));
    let members: HashMap<&str, &Vec<String>> =
        req.members.iter().map(|(l, m)| (l.as_str(), m)).collect();
    let member_list = |label: &str| members.get(label).map_or_else(Vec::new, |m| (*m).clone());
    let temperature: HashMap<&str, Option<f64>> = epochs
        .iter()
        .map(|e| (e.label.as_str(), e.temperature_c))
        .collect();
    let mut out = Rows {
        cumulative: Vec::new(),
        increments: Vec::new(),
        rates: Vec::new(),
        excluded: Vec::new(),
        rejected: Vec::new(),
        by_reason: Vec::new(),
        inadequate: 0,
    };
    for r in &series.rejected {
        out.rejected.push(output::rejected_row(
            r.region.clone(),
            member_list(&r.region),
            r.reason.clone(),
        ));
        count(&mut out.by_reason, "quality screen");
    }
    let names = strain_component_names::<D>();
    for reg in &series.regions {
        for smp in &reg.samples {
            let mut row = vec![
                text(&reg.region),
                text(&smp.epoch),
                Cell::Text(format_rfc3339(smp.time_s)),
                Cell::Num(smp.days_from_baseline),
            ];
            match <Dim<D>>::strain_cells(&smp.gradient, opts, u, &mut row) {
                Ok(adequate) => {
                    if !adequate {
                        out.inadequate += 1;
                    }
                }
                Err(e) => {
                    out.rejected.push(output::rejected_row(
                        reg.region.clone(),
                        member_list(&reg.region),
                        format!("epoch `{}`: strain state not computed: {e}", smp.epoch),
                    ));
                    count(&mut out.by_reason, "strain state not computed");
                    continue;
                }
            }
            if let (Some(th), Some(comp)) = (smp.thermal_strain, &smp.compensated) {
                row.push(
                    temperature
                        .get(smp.epoch.as_str())
                        .copied()
                        .flatten()
                        .map_or(Cell::Empty, Cell::Num),
                );
                row.push(s(th));
                row.extend(comp[..D].iter().map(|v| s(*v)));
            }
            match &smp.strain_std {
                Some(sd) => row.extend(sd.iter().map(|v| s(*v))),
                None => row.extend(names.iter().map(|_| Cell::Empty)),
            }
            out.cumulative.push(row);
        }
        for inc in &reg.increments {
            let mut row = vec![
                text(&reg.region),
                text(&inc.from),
                text(&inc.to),
                Cell::Num(inc.dt_days),
            ];
            row.extend(inc.strain.iter().map(|v| s(*v)));
            row.extend(
                engineering::<D>()
                    .iter()
                    .map(|(_, i)| s(2.0 * inc.strain[*i])),
            );
            row.extend(inc.rotation.iter().map(|w| Cell::Num(w.to_degrees())));
            if let Some(c) = &inc.compensated {
                row.extend(c[..D].iter().map(|v| s(*v)));
            }
            match &inc.test {
                Some(t) => row.extend([
                    Cell::Text(match t.dof2 {
                        Some(r) => format!("F({}, {r})", t.dof1),
                        None => format!("chi2({})", t.dof1),
                    }),
                    Cell::Num(t.statistic),
                    Cell::Num(t.p_value),
                    Cell::Bool(t.significant),
                ]),
                None => row.extend([Cell::Empty, Cell::Empty, Cell::Empty, Cell::Empty]),
            }
            out.increments.push(row);
        }
        let rates = std::iter::once((&reg.rate, false))
            .chain(reg.rate_compensated.as_ref().map(|r| (r, true)));
        for (rate, compensated) in rates {
            match rate {
                Rate::Estimated(rr) => {
                    for c in &rr.components {
                        out.rates.push(vec![
                            text(&reg.region),
                            text(c.component),
                            Cell::Bool(compensated),
                            s(c.per_day),
                            s(c.per_year),
                            c.std_per_day.map_or(Cell::Empty, s),
                            c.std_per_year.map_or(Cell::Empty, s),
                            int(rr.n_epochs),
                            int(rr.dof),
                            Cell::Bool(rr.weighted),
                            Cell::Empty,
                        ]);
                    }
                }
                Rate::TooFewEpochs { available } => {
                    for n in names {
                        out.rates.push(vec![
                            text(&reg.region),
                            text(n),
                            Cell::Bool(compensated),
                            Cell::Empty,
                            Cell::Empty,
                            Cell::Empty,
                            Cell::Empty,
                            int(*available),
                            Cell::Empty,
                            Cell::Bool(false),
                            Cell::Text(format!(
                                "computed at {available} epoch(s); a rate needs at least 2"
                            )),
                        ]);
                    }
                }
            }
        }
    }
    for x in &series.excluded {
        out.excluded.push(vec![
            text(&x.region),
            text(&x.epoch),
            Cell::List(x.missing.clone()),
        ]);
    }
    out
}

fn run_d<const D: usize>(
    req: &SeriesRequest,
    epochs: &[Epoch<D>],
    opts: &KinematicsOptions,
    sink: &mut dyn RowSink,
    target: &str,
) -> Result<(), CliError>
where
    Dim<D>: StrainRow<D>,
{
    let series = strain_series(epochs, &req.regions, &req.options)?;
    let rows = rows(req, epochs, &series, opts);
    let thermal = req.options.thermal.is_some();
    let u = req.units;
    let sections = [
        Section {
            name: CUMULATIVE,
            columns: cumulative_columns::<D>(u, thermal),
        },
        Section {
            name: INCREMENTS,
            columns: increment_columns::<D>(u, thermal),
        },
        Section {
            name: RATES,
            columns: rate_columns(u),
        },
        Section {
            name: EXCLUDED,
            columns: excluded_columns(),
        },
        output::rejected_section(),
    ];
    let out = |source: io::Error| CliError::Output {
        target: target.to_owned(),
        source,
    };
    sink.begin(&req.header, &sections).map_err(out)?;
    for (name, list) in [
        (CUMULATIVE, &rows.cumulative),
        (INCREMENTS, &rows.increments),
        (RATES, &rows.rates),
        (EXCLUDED, &rows.excluded),
    ] {
        sink.section(name).map_err(out)?;
        for r in list {
            sink.row(r).map_err(out)?;
        }
    }
    sink.section(output::REJECTED).map_err(out)?;
    for r in &rows.rejected {
        sink.row(r).map_err(out)?;
    }
    let footer = Footer {
        accepted: series.regions.len() as u64,
        rejected: rows.rejected.len() as u64,
        rejected_by_reason: rows.by_reason.clone(),
        notes: notes(req, &series, &rows),
    };
    sink.finish(&footer).map_err(out)
}

fn notes<const D: usize>(
    req: &SeriesRequest,
    series: &StrainSeries<D>,
    rows: &Rows,
) -> Vec<String> {
    let mut n = Vec::new();
    let regions_total = req.members.len();
    let ex = series.excluded.len();
    if ex == 0 {
        n.push(
            "0 region-epochs excluded: every point of every region was measured at every epoch."
                .into(),
        );
    } else {
        let mut points: Vec<&str> = series
            .excluded
            .iter()
            .flat_map(|x| x.missing.iter().map(String::as_str))
            .collect();
        points.sort_unstable();
        points.dedup();
        n.push(format!(
            "{ex} region-epoch(s) excluded because point(s) {} were not measured at that epoch \
             (or at the baseline); see the `excluded` section. Only the regions holding a \
             missing point are left out, and a region is never computed from a subset of \
             its points.",
            points.join(", ")
        ));
    }
    n.push(format!(
        "baseline `{}`: cumulative strains are relative to it and its positions are the \
         reference geometry; {} of {regions_total} region(s) have a series.",
        series.baseline,
        series.regions.len()
    ));
    n.push(
        "rates: least-squares slope of each cumulative strain component against time, per \
         day and per Julian year of 365.25 days. Where every point of a region states sigma \
         (weighted = true) the weights are 1/sd^2 of the propagated a-priori standard \
         deviations (sd_ columns of `cumulative`), the baseline's zero is left out and the \
         intercept is free: the baseline's measurement error is then one common offset of \
         every later value, absorbed by the intercept. Otherwise (weighted = false) every \
         epoch has weight 1, the baseline's zero included, and the correlation through the \
         shared baseline is ignored. The standard deviation of the rate comes from the \
         scatter about the line (at least 3 points)."
            .into(),
    );
    n.push(format!(
        "increments: strain_test tests H0 no strain change at alpha = {} on the strain \
         components only, from the displacement between the two epochs themselves (its \
         precision combines those two measurements, so the shared baseline plays no part); \
         elements use chi2 with the a-priori variance factor 1, groups F with the fit's \
         estimated factor unless --trust-apriori. A statistical decision on kinematic \
         estimates, not a structural assessment.",
        req.options.alpha
    ));
    if let Some(th) = &req.options.thermal {
        n.push(format!(
            "temperature compensation: free thermal strain alpha*(T - T_baseline) with alpha = \
             {} 1/K removed from the normal strains (shear unchanged); e1, e2, theta1 and the \
             other derived columns of `cumulative` are of the uncompensated strain. This \
             removes only the free expansion of a homogeneous, isotropic material at one \
             temperature.",
            th.alpha_per_k
        ));
    }
    if rows.inadequate > 0 {
        n.push(format!(
            "{} region-epoch(s): small-strain theory is not adequate at strain resolution {} \
             (see small_strain_ok and adequacy_note).",
            rows.inadequate, req.strain_resolution
        ));
    }
    n.push("times are UTC; a day is 86 400 s.".into());
    n
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::units::{LengthUnit, StrainUnit};

    #[test]
    fn section_widths_match_rows() {
        let u = Units {
            length: LengthUnit::Metre,
            strain: StrainUnit::Microstrain,
            precision_weighted: false,
        };
        // 2D: 4 leading columns, the 20 strain columns of columns2 after its 4
        // region columns, and 2 + 2 + D thermal columns.
        // Then one sd_ column per strain component, and 4 test columns per increment.
        assert_eq!(
            cumulative_columns::<2>(u, false).len(),
            4 + output_strain_width::<2>(u) + 3
        );
        assert_eq!(
            cumulative_columns::<3>(u, true).len(),
            4 + output_strain_width::<3>(u) + 2 + 3 + 6
        );
        assert_eq!(increment_columns::<2>(u, false).len(), 4 + 3 + 1 + 1 + 4);
        assert_eq!(increment_columns::<3>(u, true).len(), 4 + 6 + 3 + 3 + 3 + 4);
    }

    fn output_strain_width<const D: usize>(u: Units) -> usize
    where
        Dim<D>: StrainRow<D>,
    {
        <Dim<D>>::columns(u, Extra::None).len() - 2 - D
    }
}
