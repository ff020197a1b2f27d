//! Displacements at an epoch, from stored readings: the points of a structure with a
//! reading at the epoch (minus the reading at the baseline epoch, when one is given),
//! and an account of the points left out.
//!
//! A reading `u` is the displacement from the point's reference coordinates, metres.
//! Without a baseline the displacement is the reading itself; with one it is
//! `u(epoch) − u(baseline)`, and its standard deviation `√(σ_epoch² + σ_baseline²)`
//! (independent readings, common practice), where each σ is the reading's own or,
//! when it states none, the point's.

use std::collections::HashMap;

use serde::Serialize;

use super::field::FieldPoint;
use crate::model::StoredPoint;

/// One point's displacement reading at an epoch, metres.
#[derive(Debug, Clone, PartialEq)]
pub struct Displacement {
    /// Point ID.
    pub point_id: String,
    /// Displacement from the reference coordinates, metres.
    pub u: Vec<f64>,
    /// A-priori standard deviations of the components, metres; `None` = the point's.
    pub sigma: Option<Vec<f64>>,
}

/// A point left out of an epoch analysis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LeftOut {
    /// Point ID.
    pub point_id: String,
    /// Why: `no reading at the epoch` or `no reading at the baseline epoch`.
    pub reason: &'static str,
}

/// The points of an epoch analysis and what was left out.
#[derive(Debug, Clone, PartialEq)]
pub struct EpochPoints {
    /// Points with a displacement, in the structure's point order.
    pub points: Vec<FieldPoint>,
    /// Points of the structure without the readings needed.
    pub left_out: Vec<LeftOut>,
}

fn index(readings: &[Displacement]) -> HashMap<&str, &Displacement> {
    readings.iter().map(|r| (r.point_id.as_str(), r)).collect()
}

fn combine(a: Option<&[f64]>, b: Option<&[f64]>) -> Option<Vec<f64>> {
    let (a, b) = (a?, b?);
    (a.len() == b.len()).then(|| a.iter().zip(b).map(|(x, y)| x.hypot(*y)).collect())
}

/// The displacements of `points` at an epoch with readings `at`, relative to the
/// reference coordinates (`baseline` `None`) or to the readings `baseline`.
/// Readings of points that are not in `points` are ignored.
pub fn epoch_points(
    points: &[StoredPoint],
    at: &[Displacement],
    baseline: Option<&[Displacement]>,
) -> EpochPoints {
    let at = index(at);
    let base = baseline.map(index);
    let mut out = EpochPoints {
        points: Vec::with_capacity(points.len()),
        left_out: Vec::new(),
    };
    for p in points {
        let Some(r) = at.get(p.id.as_str()) else {
            out.left_out.push(LeftOut {
                point_id: p.id.clone(),
                reason: "no reading at the epoch",
            });
            continue;
        };
        let own = |d: &Displacement| d.sigma.clone().or_else(|| p.sigma.clone());
        let (u, sigma) = match &base {
            None => (r.u.clone(), own(r)),
            Some(base) => {
                let Some(b) = base.get(p.id.as_str()) else {
                    out.left_out.push(LeftOut {
                        point_id: p.id.clone(),
                        reason: "no reading at the baseline epoch",
                    });
                    continue;
                };
                let u = r.u.iter().zip(&b.u).map(|(x, y)| x - y).collect();
                (u, combine(own(r).as_deref(), own(b).as_deref()))
            }
        };
        out.points.push(FieldPoint {
            id: p.id.clone(),
            x: p.x.clone(),
            u,
            sigma,
        });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(id: &str, u: [f64; 2], sigma: Option<[f64; 2]>) -> Displacement {
        Displacement {
            point_id: id.into(),
            u: u.to_vec(),
            sigma: sigma.map(|s| s.to_vec()),
        }
    }

    #[test]
    fn baseline_is_subtracted_and_missing_points_are_listed() {
        let pts = ["A", "B", "C"].map(|id| StoredPoint {
            id: id.into(),
            x: vec![0.0, 0.0],
            sigma: Some(vec![0.003, 0.004]),
        });
        let at = [d("A", [0.01, 0.02], None), d("B", [0.0, 0.0], None)];
        let base = [d("A", [0.004, 0.005], Some([0.001, 0.001]))];
        let e = epoch_points(&pts, &at, Some(&base));
        assert_eq!(e.points.len(), 1);
        let a = &e.points[0];
        assert!((a.u[0] - 0.006).abs() < 1e-15 && (a.u[1] - 0.015).abs() < 1e-15);
        // √(0.003² + 0.001²), √(0.004² + 0.001²): independent errors add in quadrature.
        let s = a.sigma.as_ref().expect("sigma");
        assert!((s[0] - 0.001_f64.hypot(0.003)).abs() < 1e-15);
        assert!((s[1] - 0.001_f64.hypot(0.004)).abs() < 1e-15);
        assert_eq!(
            e.left_out,
            vec![
                LeftOut {
                    point_id: "B".into(),
                    reason: "no reading at the baseline epoch"
                },
                LeftOut {
                    point_id: "C".into(),
                    reason: "no reading at the epoch"
                },
            ]
        );
        let r = epoch_points(&pts, &at, None);
        assert_eq!(r.points.len(), 2);
        assert_eq!(r.points[0].u, vec![0.01, 0.02]);
        assert_eq!(r.points[0].sigma, Some(vec![0.003, 0.004]));
    }
}

/// The method restricted to the points that have the displacements needed: a group
/// keeps its other members (and is left out when fewer than `dimension + 1` remain), an
/// element with a vertex without a displacement is left out. Returns the method and,
/// for `inputs.regions_changed`, what was changed and why. Other methods are unchanged
/// (they use the points there are).
pub fn restrict(
    method: &super::params::MethodSpec,
    present: &std::collections::HashSet<&str>,
    dimension: usize,
) -> (super::params::MethodSpec, Vec<serde_json::Value>) {
    use super::params::MethodSpec;
    let mut changed = Vec::new();
    let missing = |ids: &[String]| -> Vec<String> {
        ids.iter()
            .filter(|id| !present.contains(id.as_str()))
            .cloned()
            .collect()
    };
    let m = match method {
        MethodSpec::Groups { groups } => {
            let mut kept = Vec::with_capacity(groups.len());
            for g in groups {
                let gone = missing(&g.point_ids);
                if gone.is_empty() {
                    kept.push(g.clone());
                    continue;
                }
                let rest: Vec<String> = g
                    .point_ids
                    .iter()
                    .filter(|id| present.contains(id.as_str()))
                    .cloned()
                    .collect();
                if rest.len() > dimension {
                    changed.push(serde_json::json!({"region": g.name, "change": "fitted without the points left out", "points_left_out": gone}));
                    kept.push(super::params::GroupInput {
                        name: g.name.clone(),
                        point_ids: rest,
                    });
                } else {
                    changed.push(serde_json::json!({"region": g.name, "change": "left out: too few members have the readings needed", "points_left_out": gone}));
                }
            }
            MethodSpec::Groups { groups: kept }
        }
        MethodSpec::Elements { elements } => {
            let mut kept = Vec::with_capacity(elements.len());
            for e in elements {
                let gone = missing(&e.vertices);
                if gone.is_empty() {
                    kept.push(e.clone());
                } else {
                    changed.push(serde_json::json!({"region": e.id, "change": "left out: a vertex has not the readings needed", "points_left_out": gone}));
                }
            }
            MethodSpec::Elements { elements: kept }
        }
        other => other.clone(),
    };
    (m, changed)
}

/// An epoch analysis as asked for: the epoch, an optional baseline epoch, the
/// estimator, its options and the strain unit of the result.
#[derive(Debug, Clone, PartialEq)]
pub struct EpochRequest {
    /// The epoch analysed.
    pub epoch: time::OffsetDateTime,
    /// The baseline epoch; `None` = displacements from the reference coordinates.
    pub baseline_epoch: Option<time::OffsetDateTime>,
    /// The estimator.
    pub method: super::params::MethodSpec,
    /// Its options.
    pub options: super::params::FieldOptions,
    /// Unit of the strains in the result.
    pub strain_unit: crate::units::StrainUnit,
}

/// Run an epoch analysis of `structure` with its `points` and the readings `at` the
/// epoch (and at the baseline epoch): a succeeded analysis with the result document,
/// or a failed one with the estimator's reason when it cannot compute on the data.
///
/// # Errors
/// [`super::AnalysisError::Invalid`] / [`super::AnalysisError::Parameters`] when the
/// method or options are not valid for these points (nothing is to be stored).
pub fn run_epoch(
    structure: &crate::model::Structure,
    points: &[StoredPoint],
    at: &[Displacement],
    baseline: Option<&[Displacement]>,
    req: &EpochRequest,
) -> Result<crate::model::Analysis, super::AnalysisError> {
    use super::{AnalysisError, field, params};
    use crate::model::{Analysis, AnalysisKind, AnalysisStatus, Frame, now_utc};
    let started = std::time::Instant::now();
    let errs = params::validate_for(&req.method, &req.options, points, structure.dimension);
    if !errs.is_empty() {
        return Err(AnalysisError::Invalid(errs));
    }
    let ep = epoch_points(points, at, baseline);
    let present: std::collections::HashSet<&str> =
        ep.points.iter().map(|p| p.id.as_str()).collect();
    let (method, reduced) = restrict(&req.method, &present, usize::from(structure.dimension));
    let rfc = crate::model::rfc3339;
    let inputs = serde_json::json!({
        "points_in_structure": points.len(),
        "points_used": ep.points.len(),
        "epoch": rfc(req.epoch),
        "baseline_epoch": req.baseline_epoch.map(rfc),
        "readings_at_epoch": at.len(),
        "readings_at_baseline": baseline.map(<[Displacement]>::len),
        "left_out": ep.left_out,
        "regions_changed": reduced,
    });
    let parameters = serde_json::json!({
        "method": req.method,
        "options": req.options,
        "strain_unit": req.strain_unit,
        "length_unit": structure.length_unit,
    });
    let label = format!(
        "structure {} epoch {}{}",
        structure.id,
        rfc(req.epoch),
        req.baseline_epoch.map_or_else(
            || " from the reference coordinates".to_owned(),
            |b| format!(" relative to epoch {}", rfc(b))
        )
    );
    let outcome = (|| {
        if ep.points.is_empty() {
            return Err(AnalysisError::NotComputable(
                "no point of the structure has the readings needed".into(),
            ));
        }
        let empty = match &method {
            params::MethodSpec::Elements { elements } => elements.is_empty(),
            params::MethodSpec::Groups { groups } => groups.is_empty(),
            _ => false,
        };
        if empty {
            return Err(AnalysisError::NotComputable(
                "no region has the readings it needs (see inputs.regions_changed)".into(),
            ));
        }
        let pts = field::points(usize::from(structure.dimension), ep.points.clone())?;
        let mut r = params::request(
            pts,
            &method,
            &req.options,
            structure.length_unit,
            req.strain_unit,
            &label,
        )?;
        if let Frame::Enu { origin } = &structure.frame {
            let frame =
                kinema_core::geodesy::EnuFrame::new(&kinema_core::geodesy::Geodetic::from_degrees(
                    origin.lat_deg,
                    origin.lon_deg,
                    origin.h_m,
                ))
                .map_err(|e| AnalysisError::Internal(format!("stored ENU origin: {e}")))?;
            field::set_enu(&mut r, frame);
        }
        let doc = field::run(&r)?;
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
    Ok(Analysis {
        id: uuid::Uuid::new_v4(),
        structure_id: structure.id.clone(),
        kind: AnalysisKind::Epoch,
        status,
        method: req.method.name().to_owned(),
        epoch: Some(req.epoch),
        baseline_epoch: req.baseline_epoch,
        series_first: None,
        series_last: None,
        parameters,
        inputs,
        software_version: env!("CARGO_PKG_VERSION").to_owned(),
        result,
        error,
        created_at: now_utc(),
        duration_ms: u64::try_from(started.elapsed().as_millis()).unwrap_or(u64::MAX),
    })
}

#[cfg(test)]
mod restrict_tests {
    use super::restrict;
    use crate::analysis::params::{ElementInput, GroupInput, MethodSpec};

    fn ids(v: &[&str]) -> Vec<String> {
        v.iter().map(|s| (*s).to_owned()).collect()
    }

    #[test]
    fn groups_lose_members_without_readings_and_elements_are_left_out() {
        let present: std::collections::HashSet<&str> = ["A", "B", "C", "D"].into_iter().collect();
        let groups = MethodSpec::Groups {
            groups: vec![
                GroupInput {
                    name: "G1".into(),
                    point_ids: ids(&["A", "B", "C", "E"]),
                },
                GroupInput {
                    name: "G2".into(),
                    point_ids: ids(&["A", "E", "F", "B"]),
                },
                GroupInput {
                    name: "G3".into(),
                    point_ids: ids(&["B", "C", "D"]),
                },
            ],
        };
        let (m, changed) = restrict(&groups, &present, 2);
        let MethodSpec::Groups { groups } = m else {
            panic!("groups")
        };
        let kept: Vec<(&str, Vec<String>)> = groups
            .iter()
            .map(|g| (g.name.as_str(), g.point_ids.clone()))
            .collect();
        assert_eq!(
            kept,
            vec![("G1", ids(&["A", "B", "C"])), ("G3", ids(&["B", "C", "D"]))]
        );
        assert_eq!(changed.len(), 2);
        assert_eq!(changed[0]["region"], "G1");
        assert_eq!(changed[1]["region"], "G2");
        assert_eq!(changed[1]["points_left_out"], serde_json::json!(["E", "F"]));
        let elements = MethodSpec::Elements {
            elements: vec![
                ElementInput {
                    id: "T1".into(),
                    vertices: ids(&["A", "B", "C"]),
                },
                ElementInput {
                    id: "T2".into(),
                    vertices: ids(&["B", "C", "E"]),
                },
            ],
        };
        let (m, changed) = restrict(&elements, &present, 2);
        let MethodSpec::Elements { elements } = m else {
            panic!("elements")
        };
        assert_eq!(elements.len(), 1);
        assert_eq!(elements[0].id, "T1");
        assert_eq!(changed[0]["region"], "T2");
        assert_eq!(
            restrict(&MethodSpec::Delaunay, &present, 2).0,
            MethodSpec::Delaunay
        );
    }
}
