//! `kinema analyze --method rosette`: strain-gauge rosettes from a gauge-reading file.
//!
//! Each rosette is solved by [`kinema_core::rosette::solve`] (exact with three gauges,
//! least squares with more), with the corrections given by flags. Its plane strain
//! state `ε` then goes through [`kinema_core::kinematics::analyze2`] as the gradient
//! `G = ε` (no rotation), so principal values, directions, maximum shear and the Mohr
//! circle come from the same code as for every other method, and the row has the same
//! strain columns ([`columns::columns2`]) followed by the rosette's own columns and,
//! with `--material`, the stress columns ([`super::stress`]).
//!
//! A rosette whose layout does not determine the strain state (coinciding directions,
//! condition number above [`kinema_core::rosette::MAX_CONDITION`]) is listed in the
//! `rejected` section with the core's reason; the run goes on. Everything is computed
//! before the first byte is written.

use kinema_core::CoreError;
use kinema_core::kinematics::{KinematicsOptions, analyze2};
use kinema_core::rosette::{
    AppliedCorrection, Corrections, GaugeFactor, RosetteResult, SolveKind, ThermalOutput,
    TransverseSensitivity, solve,
};
use nalgebra::Matrix2;

use super::columns::{self, Extra, Units};
use super::stress::StressSpec;
use crate::cli::CliError;
use crate::cli::analyze::{AnalyzeArgs, Method};
use crate::input::{RosetteRows, read_rosettes};
use crate::output::{self, Cell, Column, Footer, Header, RowSink, Section};
use crate::units::StrainUnit;

/// Name of the main output section.
pub const SECTION: &str = "rosettes";

/// Default `--reading-unit`.
pub const DEFAULT_READING_UNIT: StrainUnit = StrainUnit::Microstrain;

/// Everything a rosette run needs, validated, in core units.
#[derive(Debug, Clone)]
pub struct RosetteRequest {
    /// The rosettes as read (readings in dimensionless strain, angles in radians).
    pub rosettes: Vec<RosetteRows>,
    /// Corrections applied to every rosette (zero readings come with the gauges).
    pub corrections: Corrections,
    /// Output units.
    pub units: Units,
    /// Strain resolution of the small-strain adequacy check, dimensionless.
    pub strain_resolution: f64,
    /// Stress columns, with `--material`.
    pub stress: Option<StressSpec>,
    /// Output header.
    pub header: Header,
}

fn usage(msg: impl Into<String>) -> CliError {
    CliError::Usage(msg.into())
}

/// The rosette-only flags that were given, by name.
fn rosette_flags_given(a: &AnalyzeArgs) -> Vec<&'static str> {
    [
        ("--reading-unit", a.reading_unit.is_some()),
        ("--gauge-factor", a.gauge_factor.is_some()),
        (
            "--instrument-gauge-factor",
            a.instrument_gauge_factor.is_some(),
        ),
        (
            "--transverse-sensitivity",
            a.transverse_sensitivity.is_some(),
        ),
        ("--transverse-nu0", a.transverse_nu0.is_some()),
        ("--thermal-coefficients", a.thermal_coefficients.is_some()),
        ("--temperature", a.temperature.is_some()),
        ("--reference-temperature", a.reference_temperature.is_some()),
    ]
    .into_iter()
    .filter_map(|(name, given)| given.then_some(name))
    .collect()
}

/// Refuse rosette-only flags unless `--method rosette` is given (usage error, exit 2).
pub fn check_method_flags(a: &AnalyzeArgs) -> Result<(), CliError> {
    if a.method == Some(Method::Rosette) {
        return Ok(());
    }
    match rosette_flags_given(a).first() {
        Some(flag) => Err(usage(match a.method {
            Some(m) => format!("{flag} is used only by --method rosette, not {}", m.name()),
            None => format!("{flag} is used only by --method rosette"),
        })),
        None => Ok(()),
    }
}

fn finite(flag: &str, v: f64) -> Result<f64, CliError> {
    if v.is_finite() {
        Ok(v)
    } else {
        Err(usage(format!("{flag} must be a finite number, got {v}")))
    }
}

/// The corrections given by flags, checked; thermal coefficients converted from
/// `unit` per °C^i to strain per °C^i.
fn corrections(a: &AnalyzeArgs, unit: StrainUnit) -> Result<Corrections, CliError> {
    let gauge_factor = match (a.gauge_factor, a.instrument_gauge_factor) {
        (None, None) => None,
        (Some(gauge), Some(instrument)) => {
            for (flag, v) in [
                ("--gauge-factor", gauge),
                ("--instrument-gauge-factor", instrument),
            ] {
                if !(v.is_finite() && v > 0.0) {
                    return Err(usage(format!("{flag} must be a positive number, got {v}")));
                }
            }
            Some(GaugeFactor { instrument, gauge })
        }
        _ => {
            return Err(usage(
                "--gauge-factor and --instrument-gauge-factor go together: give both",
            ));
        }
    };
    let transverse = match (a.transverse_sensitivity, a.transverse_nu0) {
        (None, None) => None,
        (Some(kt), Some(nu0)) => {
            if !(kt.is_finite() && kt.abs() < 1.0) {
                return Err(usage(format!(
                    "--transverse-sensitivity must lie strictly between -1 and 1, got {kt}"
                )));
            }
            if !(nu0.is_finite() && nu0 > -1.0 && nu0 < 0.5) {
                return Err(usage(format!(
                    "--transverse-nu0 must lie strictly between -1 and 0.5, got {nu0}"
                )));
            }
            Some(TransverseSensitivity { kt, nu0 })
        }
        (Some(_), None) => {
            return Err(usage(
                "--transverse-sensitivity needs --transverse-nu0 (the Poisson ratio of the \
                 calibration material; there is no default)",
            ));
        }
        (None, Some(_)) => {
            return Err(usage("--transverse-nu0 needs --transverse-sensitivity"));
        }
    };
    let thermal = match (&a.thermal_coefficients, a.temperature) {
        (None, None) => {
            if a.reference_temperature.is_some() {
                return Err(usage(
                    "--reference-temperature needs --thermal-coefficients and --temperature",
                ));
            }
            None
        }
        (Some(c), Some(t)) => {
            if c.is_empty() {
                return Err(usage("--thermal-coefficients needs at least one value"));
            }
            let mut coefficients = Vec::with_capacity(c.len());
            for v in c {
                let v = finite("--thermal-coefficients", *v)?;
                coefficients.push(match unit {
                    StrainUnit::Strain => v,
                    StrainUnit::Microstrain => v / 1.0e6,
                });
            }
            Some(ThermalOutput {
                coefficients,
                temperature: finite("--temperature", t)?,
                reference_temperature: a
                    .reference_temperature
                    .map(|t0| finite("--reference-temperature", t0))
                    .transpose()?,
            })
        }
        (Some(_), None) => {
            return Err(usage(
                "--thermal-coefficients needs --temperature (°C at the readings)",
            ));
        }
        (None, Some(_)) => {
            return Err(usage("--temperature needs --thermal-coefficients"));
        }
    };
    Ok(Corrections {
        gauge_factor,
        transverse,
        thermal,
    })
}

/// Header parameters of the corrections, in the units shown in their names.
fn correction_parameters(c: &Corrections, unit: StrainUnit) -> Vec<(String, Cell)> {
    let mut p: Vec<(String, Cell)> =
        vec![("reading_unit".into(), Cell::Text(unit.label().to_owned()))];
    let mut names = Vec::new();
    if let Some(t) = &c.thermal {
        names.push("thermal_output".to_owned());
        let coeffs: Vec<String> = t
            .coefficients
            .iter()
            .map(|v| format!("{:?}", unit.from_strain(*v)))
            .collect();
        p.push((
            format!("thermal_coefficients_{}_per_degc_pow_i", unit.label()),
            Cell::Text(coeffs.join(",")),
        ));
        p.push(("temperature_degc".into(), Cell::Num(t.temperature)));
        if let Some(t0) = t.reference_temperature {
            p.push(("reference_temperature_degc".into(), Cell::Num(t0)));
        }
        p.push((
            format!("thermal_apparent_strain_{}", unit.label()),
            Cell::Num(unit.from_strain(t.apparent_strain())),
        ));
    }
    if let Some(k) = c.gauge_factor {
        names.push("gauge_factor".to_owned());
        p.push(("gauge_factor".into(), Cell::Num(k.gauge)));
        p.push(("instrument_gauge_factor".into(), Cell::Num(k.instrument)));
    }
    if let Some(t) = c.transverse {
        names.push("transverse_sensitivity".to_owned());
        p.push(("transverse_sensitivity".into(), Cell::Num(t.kt)));
        p.push(("transverse_nu0".into(), Cell::Num(t.nu0)));
    }
    p.insert(
        0,
        (
            "corrections".into(),
            if names.is_empty() {
                Cell::Text("none (zero readings per gauge where given)".into())
            } else {
                Cell::Text(format!(
                    "{} (and zero readings per gauge where given)",
                    names.join(", ")
                ))
            },
        ),
    );
    p
}

/// Read and check everything for a rosette run. Nothing is written.
pub fn prepare(a: &AnalyzeArgs) -> Result<RosetteRequest, CliError> {
    let unit = a.reading_unit.unwrap_or(DEFAULT_READING_UNIT);
    corrections(a, unit)?;
    StressSpec::from_flags(&a.stress_flags(), 2, a.strain_unit)?;
    let rosettes = read_rosettes(&a.points_file, unit)?;
    prepare_from(a, rosettes)
}

/// The part of [`prepare`] after the gauge readings have been read (readings in
/// dimensionless strain, angles in radians): check the corrections and the stress
/// flags and fill in the header. Nothing is read or written.
pub fn prepare_from(
    a: &AnalyzeArgs,
    rosettes: Vec<RosetteRows>,
) -> Result<RosetteRequest, CliError> {
    let unit = a.reading_unit.unwrap_or(DEFAULT_READING_UNIT);
    let corrections = corrections(a, unit)?;
    let stress = StressSpec::from_flags(&a.stress_flags(), 2, a.strain_unit)?;
    let n_gauges: usize = rosettes.iter().map(|r| r.gauges.len()).sum();
    let mut header = Header::new(
        a.points_file.display().to_string(),
        n_gauges,
        2,
        Method::Rosette.name(),
        a.length_unit,
        a.strain_unit,
    );
    header.parameters.push((
        "rosettes".into(),
        Cell::Int(i64::try_from(rosettes.len()).unwrap_or(i64::MAX)),
    ));
    header.parameters.push((
        "gauges".into(),
        Cell::Int(i64::try_from(n_gauges).unwrap_or(i64::MAX)),
    ));
    header
        .parameters
        .extend(correction_parameters(&corrections, unit));
    header
        .parameters
        .push(("strain_resolution".into(), Cell::Num(a.strain_resolution)));
    if let Some(s) = &stress {
        header.parameters.extend(s.parameters());
    }
    Ok(RosetteRequest {
        rosettes,
        corrections,
        units: Units {
            length: a.length_unit,
            strain: a.strain_unit,
            precision_weighted: false,
        },
        strain_resolution: a.strain_resolution,
        stress,
        header,
    })
}

/// The rosette columns after the 2D strain columns.
pub fn rosette_columns(u: Units) -> Vec<Column> {
    let s = u.strain.label();
    vec![
        Column::new(
            "kind",
            "",
            "exact (three gauges) or least_squares (more than three)",
        ),
        Column::new("n_gauges", "", "gauges in the rosette"),
        Column::new("redundancy", "", "degrees of freedom n_gauges - 3"),
        Column::new(
            "sigma_reading",
            s,
            "a-posteriori standard deviation of one corrected reading (empty without redundancy)",
        ),
        Column::new(
            "sd_exx",
            s,
            "standard deviation of exx from the fit (empty without redundancy)",
        ),
        Column::new("sd_eyy", s, "standard deviation of eyy from the fit"),
        Column::new(
            "sd_exy",
            s,
            "standard deviation of the tensor shear strain exy from the fit",
        ),
        Column::new(
            "max_abs_residual",
            s,
            "largest |corrected reading - modelled reading| (0 for an exact solve)",
        ),
        Column::new(
            "condition",
            "",
            "condition number of the gauge layout (2 rectangular, 1.41 delta; larger amplifies reading errors)",
        ),
        Column::new(
            "corrections_applied",
            "",
            "corrections applied, in order: zero_reading, thermal_output, gauge_factor, transverse_sensitivity",
        ),
    ]
}

fn correction_name(c: &AppliedCorrection) -> &'static str {
    match c {
        AppliedCorrection::ZeroReading { .. } => "zero_reading",
        AppliedCorrection::ThermalOutput { .. } => "thermal_output",
        AppliedCorrection::GaugeFactor { .. } => "gauge_factor",
        AppliedCorrection::TransverseSensitivity { .. } => "transverse_sensitivity",
    }
}

/// Append the rosette cells of `r`.
fn rosette_cells(r: &RosetteResult, u: Units, row: &mut Vec<Cell>) {
    let int = |v: usize| Cell::Int(i64::try_from(v).unwrap_or(i64::MAX));
    let s = |v: f64| Cell::Num(u.strain.from_strain(v));
    row.push(Cell::Text(
        match r.kind {
            SolveKind::Exact => "exact",
            SolveKind::LeastSquares => "least_squares",
        }
        .to_owned(),
    ));
    row.push(int(r.gauges.len()));
    row.push(int(r.redundancy));
    row.push(r.sigma_reading.map_or(Cell::Empty, s));
    match r.sigma_strain {
        Some(sd) => row.extend(sd.map(s)),
        None => row.extend([Cell::Empty, Cell::Empty, Cell::Empty]),
    }
    row.push(s(r.residuals.iter().fold(0.0_f64, |m, v| m.max(v.abs()))));
    row.push(Cell::Num(r.condition));
    row.push(Cell::List(
        r.applied
            .iter()
            .map(|c| correction_name(c).to_owned())
            .collect(),
    ));
}

/// One rosette's outcome: a row, or a rejection (reason, kind of reason).
enum Outcome {
    Row { cells: Vec<Cell>, adequate: bool },
    Rejected { reason: String, kind: &'static str },
}

fn solve_one(
    r: &RosetteRows,
    req: &RosetteRequest,
    opts: &KinematicsOptions,
) -> Result<Outcome, CliError> {
    let res = match solve(&r.gauges, &req.corrections) {
        Ok(res) => res,
        Err(e @ CoreError::SingularRosette { .. }) => {
            return Ok(Outcome::Rejected {
                reason: e.to_string(),
                kind: "near-singular layout",
            });
        }
        Err(e) => {
            return Err(usage(format!("rosette `{}`: {e}", r.id)));
        }
    };
    let st = res.strain;
    // The strain tensor as a gradient with zero rotation: G = ε.
    let g = Matrix2::new(st.exx, st.exy, st.exy, st.eyy);
    let k = match analyze2(&g, opts) {
        Ok(k) => k,
        Err(e) => {
            return Ok(Outcome::Rejected {
                reason: format!("strain state not computed: {e}"),
                kind: "strain state not computed",
            });
        }
    };
    let u = req.units;
    let mut cells = vec![
        Cell::Text(r.id.clone()),
        Cell::List(res.gauges.clone()),
        Cell::Empty,
        Cell::Empty,
    ];
    columns::strain_cells2(&k, u, &mut cells);
    blank_unmeasured(&mut cells, u);
    rosette_cells(&res, u, &mut cells);
    if let Some(s) = &req.stress
        && let Err(e) = s.cells(&g, &mut cells)
    {
        return Ok(Outcome::Rejected {
            reason: format!("stress not computed: {e}"),
            kind: "stress not computed",
        });
    }
    Ok(Outcome::Row {
        cells,
        adequate: k.adequacy.adequate,
    })
}

/// Solve every rosette of `req` and write the result into `sink`; `target` names the
/// output for I/O error messages.
pub fn run(req: &RosetteRequest, sink: &mut dyn RowSink, target: &str) -> Result<(), CliError> {
    let opts = KinematicsOptions {
        strain_resolution: req.strain_resolution,
        ..KinematicsOptions::default()
    };
    opts.validate()?;
    let outcomes = req
        .rosettes
        .iter()
        .map(|r| solve_one(r, req, &opts))
        .collect::<Result<Vec<_>, _>>()?;

    let out = |source| CliError::Output {
        target: target.to_owned(),
        source,
    };
    let mut cols = columns::columns2(req.units, Extra::None);
    cols.extend(rosette_columns(req.units));
    if let Some(s) = &req.stress {
        cols.extend(s.columns());
    }
    let main = Section {
        name: SECTION,
        columns: cols,
    };
    sink.begin(&req.header, &[main, output::rejected_section()])
        .map_err(out)?;
    sink.section(SECTION).map_err(out)?;
    let mut footer = Footer::default();
    let mut inadequate = 0u64;
    let mut rejected = Vec::new();
    for (r, o) in req.rosettes.iter().zip(&outcomes) {
        match o {
            Outcome::Row { cells, adequate } => {
                sink.row(cells).map_err(out)?;
                footer.accepted += 1;
                if !adequate {
                    inadequate += 1;
                }
            }
            Outcome::Rejected { reason, kind } => {
                rejected.push((r, reason));
                match footer
                    .rejected_by_reason
                    .iter_mut()
                    .find(|(k, _)| k == kind)
                {
                    Some((_, n)) => *n += 1,
                    None => footer.rejected_by_reason.push(((*kind).to_owned(), 1)),
                }
            }
        }
    }
    sink.section(output::REJECTED).map_err(out)?;
    for (r, reason) in rejected {
        let ids = r.gauges.iter().map(|g| g.id.clone()).collect();
        sink.row(&output::rejected_row(r.id.clone(), ids, reason.clone()))
            .map_err(out)?;
        footer.rejected += 1;
    }
    footer.notes.push(
        "rosettes: members are gauge IDs; x and y are empty (a rosette has no position in \
         this file); the strain is in the rosette's own frame, angles counter-clockwise \
         from its x axis; corrections are applied in the order zero reading, thermal \
         output, gauge factor, transverse sensitivity."
            .to_owned(),
    );
    if inadequate > 0 {
        footer.notes.push(format!(
            "{inadequate} of {} rosettes: small-strain theory is not adequate at strain \
             resolution {} (see small_strain_ok and adequacy_note).",
            footer.accepted, req.strain_resolution
        ));
    }
    if let Some(s) = &req.stress {
        footer.notes.push(s.note());
    }
    sink.finish(&footer).map_err(out)
}

/// A rosette measures the strain tensor only: no rotation, no finite-strain measures and
/// no small-strain adequacy (they would come from G := ε, not from the gauges). Those
/// cells are left empty rather than filled with values the gauges never saw.
const NOT_MEASURED_BY_ROSETTES: [&str; 9] = [
    "rotation",
    "gl_exx",
    "gl_eyy",
    "gl_exy",
    "jacobian",
    "small_strain_ok",
    "adequacy_note",
    "rotation_spurious_strain",
    "gradient_quadratic_strain",
];

fn blank_unmeasured(cells: &mut [Cell], u: Units) {
    let cols = columns::columns2(u, Extra::None);
    for (c, cell) in cols.iter().zip(cells.iter_mut()) {
        if NOT_MEASURED_BY_ROSETTES.contains(&c.name) {
            *cell = Cell::Empty;
        }
    }
}

#[cfg(test)]
mod tests {
    use kinema_core::rosette::{Gauge, rectangular_gauges};

    use super::*;
    use crate::units::LengthUnit;

    fn request(rosettes: Vec<RosetteRows>) -> RosetteRequest {
        RosetteRequest {
            rosettes,
            corrections: Corrections::default(),
            units: Units {
                length: LengthUnit::Metre,
                strain: StrainUnit::Microstrain,
                precision_weighted: false,
            },
            strain_resolution: 1e-6,
            stress: None,
            header: Header::new(
                "g.csv",
                6,
                2,
                "rosette",
                LengthUnit::Metre,
                StrainUnit::Microstrain,
            ),
        }
    }

    #[test]
    fn row_width_matches_columns_and_singular_layouts_are_rejected() {
        let good = RosetteRows {
            id: "R1".into(),
            gauges: rectangular_gauges([1e-4, 5e-5, -2e-5]),
        };
        let bad = RosetteRows {
            id: "R2".into(),
            gauges: vec![
                Gauge::new("a", 0.0, 1e-4),
                Gauge::new("b", std::f64::consts::PI, 1e-4),
                Gauge::new("c", 0.5, 1e-4),
            ],
        };
        let req = request(vec![good.clone(), bad.clone()]);
        let opts = KinematicsOptions::default();
        match solve_one(&good, &req, &opts).expect("solves") {
            Outcome::Row { cells, .. } => {
                let mut cols = columns::columns2(req.units, Extra::None);
                cols.extend(rosette_columns(req.units));
                assert_eq!(cells.len(), cols.len());
            }
            Outcome::Rejected { reason, .. } => panic!("rejected: {reason}"),
        }
        match solve_one(&bad, &req, &opts).expect("no hard error") {
            Outcome::Rejected { reason, kind } => {
                assert_eq!(kind, "near-singular layout");
                assert!(reason.contains("distinct directions"), "{reason}");
            }
            Outcome::Row { .. } => panic!("0° and 180° coincide"),
        }
    }
}
