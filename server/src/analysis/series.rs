//! A strain series from stored readings: the epochs of a structure turned into the
//! offline series pipeline's epochs ([`crate::pipeline::series`]) and run over fixed
//! regions (elements or groups).
//!
//! A reading `u` is the displacement from the point's reference coordinates, metres,
//! so the measured position of a point at an epoch is `x_ref + u`. The series is
//! relative to a baseline epoch: its positions are the reference geometry of the
//! regions and the cumulative strains are measured from it. The standard deviation of
//! a position is the reading's `sigma`, or the point's when the reading states none
//! (the reference coordinates are taken as exact).
//!
//! Temperatures of epochs are not stored, so the series has no temperature
//! compensation.

use kinema_core::timeseries::{Epoch, EpochPoint};
use serde::Serialize;
use time::OffsetDateTime;

use super::epoch::Displacement;
use super::{AnalysisError, field, params};
use crate::api::problem::FieldError;
use crate::cli::analyze::{self, Method};
use crate::input::{ElementRow, EpochSeries, GroupRows};
use crate::model::{
    Analysis, AnalysisKind, AnalysisStatus, StoredPoint, Structure, now_utc, rfc3339,
};
use crate::output::JsonSink;
use crate::pipeline::series::{self as pipeline_series, RegionRows};
use crate::units::StrainUnit;

/// Most epochs in one series analysis.
pub const MAX_SERIES_EPOCHS: usize = 5_000;

/// A series analysis as asked for: the time range, the baseline epoch, the regions'
/// estimator, its options and the strain unit of the result.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesAnalysisRequest {
    /// Start of the time range as asked (inclusive); `None` = from the first epoch.
    pub from: Option<OffsetDateTime>,
    /// End of the time range as asked (inclusive); `None` = to the last epoch.
    pub to: Option<OffsetDateTime>,
    /// The baseline epoch, one of the epochs given to [`run_series`].
    pub baseline_epoch: OffsetDateTime,
    /// The estimator: `elements` or `groups`.
    pub method: params::MethodSpec,
    /// Its options.
    pub options: params::FieldOptions,
    /// Unit of the strains in the result.
    pub strain_unit: StrainUnit,
}

/// The readings of one epoch of a series.
#[derive(Debug, Clone, PartialEq)]
pub struct SeriesEpoch {
    /// The epoch.
    pub epoch: OffsetDateTime,
    /// Its readings (displacements from the reference coordinates, metres).
    pub readings: Vec<Displacement>,
}

/// What one epoch contributed, for the analysis's `inputs`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EpochUse {
    /// The epoch, RFC 3339 UTC (also its label in the result).
    pub epoch: String,
    /// Readings stored at the epoch.
    pub readings: usize,
    /// Points of the structure with a reading at the epoch.
    pub points_used: usize,
    /// Points of the structure without a reading at the epoch.
    pub left_out: Vec<String>,
}

/// Check the method (elements or groups only, every member a point of the structure)
/// and the options; every bad field with its pointer.
pub fn validate(
    method: &params::MethodSpec,
    options: &params::FieldOptions,
    points: &[StoredPoint],
    dimension: u8,
) -> Vec<FieldError> {
    let mut errs = params::validate_for(method, options, points, dimension);
    if !matches!(
        method,
        params::MethodSpec::Elements { .. } | params::MethodSpec::Groups { .. }
    ) {
        errs.push(FieldError::new(
            "/method/kind",
            format!(
                "a series follows fixed regions: use elements or groups, not {}",
                method.name()
            ),
        ));
    }
    errs
}

fn epoch_d<const D: usize>(
    points: &[StoredPoint],
    e: &SeriesEpoch,
) -> Result<(Epoch<D>, EpochUse), AnalysisError> {
    let by_id: std::collections::HashMap<&str, &Displacement> = e
        .readings
        .iter()
        .map(|r| (r.point_id.as_str(), r))
        .collect();
    let label = rfc3339(e.epoch);
    let mut pts = Vec::with_capacity(e.readings.len());
    let mut left_out = Vec::new();
    for p in points {
        let Some(r) = by_id.get(p.id.as_str()) else {
            left_out.push(p.id.clone());
            continue;
        };
        let bad = || AnalysisError::Internal(format!("point {} does not have {D} values", p.id));
        let x: [f64; D] = p.x.as_slice().try_into().map_err(|_| bad())?;
        let u: [f64; D] = r.u.as_slice().try_into().map_err(|_| bad())?;
        let mut q = EpochPoint::new(p.id.clone(), std::array::from_fn(|i| x[i] + u[i]));
        if let Some(s) = r.sigma.as_ref().or(p.sigma.as_ref()) {
            q = q.with_sigma(s.as_slice().try_into().map_err(|_| bad())?);
        }
        pts.push(q);
    }
    let time_s = e.epoch.unix_timestamp_nanos() as f64 / 1e9;
    let used = EpochUse {
        epoch: label.clone(),
        readings: e.readings.len(),
        points_used: pts.len(),
        left_out,
    };
    Ok((Epoch::new(label, time_s, pts), used))
}

fn epochs_of<const D: usize>(
    points: &[StoredPoint],
    epochs: &[SeriesEpoch],
) -> Result<(Vec<Epoch<D>>, Vec<EpochUse>), AnalysisError> {
    let mut out = Vec::with_capacity(epochs.len());
    let mut uses = Vec::with_capacity(epochs.len());
    for e in epochs {
        let (ep, u) = epoch_d::<D>(points, e)?;
        out.push(ep);
        uses.push(u);
    }
    Ok((out, uses))
}

/// Run a series analysis of `structure` with its `points` over `epochs` (in time
/// order, the baseline among them): a succeeded analysis with the result document of
/// the offline series (sections `cumulative`, `increments`, `rates`, `excluded`,
/// `rejected`), or a failed one with the reason when no region can be computed.
///
/// # Errors
/// [`AnalysisError::Invalid`] when the method or options are not valid for a series
/// on these points, fewer than 2 epochs are given, or the baseline is not one of them
/// (nothing is to be stored).
pub fn run_series(
    structure: &Structure,
    points: &[StoredPoint],
    epochs: &[SeriesEpoch],
    req: &SeriesAnalysisRequest,
) -> Result<Analysis, AnalysisError> {
    let started = std::time::Instant::now();
    let errs = validate(&req.method, &req.options, points, structure.dimension);
    if !errs.is_empty() {
        return Err(AnalysisError::Invalid(errs));
    }
    if epochs.len() < 2 || epochs.len() > MAX_SERIES_EPOCHS {
        return Err(AnalysisError::Invalid(vec![FieldError::new(
            "/from",
            format!(
                "a series needs 2 to {MAX_SERIES_EPOCHS} epochs with readings in the time \
                 range; it has {}",
                epochs.len()
            ),
        )]));
    }
    let (first, last) = (epochs[0].epoch, epochs[epochs.len() - 1].epoch);
    if !epochs.iter().any(|e| e.epoch == req.baseline_epoch) {
        return Err(AnalysisError::Invalid(vec![FieldError::new(
            "/baseline_epoch",
            "the baseline epoch is not one of the series' epochs",
        )]));
    }
    let (series, uses) = match structure.dimension {
        2 => {
            let (e, u) = epochs_of::<2>(points, epochs)?;
            (EpochSeries::Plane(e), u)
        }
        3 => {
            let (e, u) = epochs_of::<3>(points, epochs)?;
            (EpochSeries::Space(e), u)
        }
        d => return Err(AnalysisError::Internal(format!("dimension {d}"))),
    };
    let missing_sigma = match &series {
        EpochSeries::Plane(e) => e.iter().flat_map(|x| &x.points).any(|p| p.sigma.is_none()),
        EpochSeries::Space(e) => e.iter().flat_map(|x| &x.points).any(|p| p.sigma.is_none()),
    };
    if req.options.use_precision && missing_sigma {
        return Err(AnalysisError::Invalid(vec![FieldError::new(
            "/options/use_precision",
            "precision weighting needs standard deviations (sigma) for every reading, from \
             the reading or its point",
        )]));
    }
    let label = format!(
        "structure {} series {} to {}, baseline {}",
        structure.id,
        rfc3339(first),
        rfc3339(last),
        rfc3339(req.baseline_epoch)
    );
    let mut a = analyze::default_args(&label)?;
    a.series = true;
    a.baseline = Some(rfc3339(req.baseline_epoch));
    a.length_unit = structure.length_unit;
    a.strain_unit = req.strain_unit;
    a.quiet = true;
    a.use_precision = req.options.use_precision;
    if let Some(v) = req.options.alpha {
        a.alpha = v;
    }
    if let Some(v) = req.options.strain_resolution {
        a.strain_resolution = v;
    }
    if let Some(v) = req.options.min_angle_deg {
        a.min_angle_deg = v;
    }
    if let Some(v) = req.options.max_aspect_ratio {
        a.max_aspect_ratio = v;
    }
    let request_label = || Some(std::path::PathBuf::from("(request)"));
    let (method, rows) = match &req.method {
        params::MethodSpec::Elements { elements } => {
            a.elements = request_label();
            (
                Method::Elements,
                RegionRows::Elements(
                    elements
                        .iter()
                        .map(|e| ElementRow {
                            id: e.id.clone(),
                            vertices: e.vertices.clone(),
                        })
                        .collect(),
                ),
            )
        }
        params::MethodSpec::Groups { groups } => {
            a.groups = request_label();
            (
                Method::Groups,
                RegionRows::Groups(
                    groups
                        .iter()
                        .map(|g| GroupRows {
                            name: g.name.clone(),
                            point_ids: g.point_ids.clone(),
                        })
                        .collect(),
                ),
            )
        }
        _ => {
            return Err(AnalysisError::Internal(
                "series method checked above".into(),
            ));
        }
    };
    a.method = Some(method);
    let sr = pipeline_series::prepare_from(&a, method, series, rows)?;
    let outcome = (|| {
        let mut sink = JsonSink::new(Vec::new());
        pipeline_series::run(&sr, &mut sink, "result document")?;
        let doc: serde_json::Value = serde_json::from_slice(&sink.into_inner())
            .map_err(|e| AnalysisError::Internal(format!("result document: {e}")))?;
        if field::accepted(&doc) == 0 {
            return Err(AnalysisError::NotComputable(field::rejection_reasons(&doc)));
        }
        Ok(doc)
    })();
    let (status, result, error) = match outcome {
        Ok(doc) => (AnalysisStatus::Succeeded, Some(doc), None),
        Err(AnalysisError::NotComputable(m)) => (AnalysisStatus::Failed, None, Some(m)),
        Err(e) => return Err(e),
    };
    let inputs = serde_json::json!({
        "points_in_structure": points.len(),
        "from": req.from.map(rfc3339),
        "to": req.to.map(rfc3339),
        "baseline_epoch": rfc3339(req.baseline_epoch),
        "epochs_used": epochs.len(),
        "epochs": uses,
    });
    let parameters = serde_json::json!({
        "method": req.method,
        "options": req.options,
        "strain_unit": req.strain_unit,
        "length_unit": structure.length_unit,
        "thermal_compensation": "none (epoch temperatures are not stored)",
    });
    Ok(Analysis {
        id: uuid::Uuid::new_v4(),
        structure_id: structure.id.clone(),
        kind: AnalysisKind::Series,
        status,
        method: req.method.name().to_owned(),
        epoch: None,
        baseline_epoch: Some(req.baseline_epoch),
        series_first: Some(first),
        series_last: Some(last),
        parameters,
        inputs,
        software_version: env!("CARGO_PKG_VERSION").to_owned(),
        result,
        error,
        created_at: now_utc(),
        duration_ms: u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX),
    })
}
