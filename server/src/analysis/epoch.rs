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
