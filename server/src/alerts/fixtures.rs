//! Test fixtures of the alerts module: an invented structure, rules, hand-made result
//! documents (for the level logic), and real epoch and series analyses run through the
//! service's own pipeline (for the values read from a document).

use serde_json::{Value, json};
use time::OffsetDateTime;
use time::macros::datetime;
use uuid::Uuid;

use crate::analysis::epoch::{Displacement, EpochRequest, run_epoch};
use crate::analysis::params::{ElementInput, FieldOptions, MethodSpec};
use crate::analysis::series::{SeriesAnalysisRequest, SeriesEpoch, run_series};
use crate::model::{
    AlertRuleRecord, AlertState, Analysis, AnalysisKind, AnalysisStatus, Evaluation, Frame,
    StoredPoint, Structure,
};
use crate::units::{LengthUnit, StrainUnit};

/// The first epoch of the fixtures.
pub const T0: OffsetDateTime = datetime!(2026-03-01 06:00 UTC);

/// `T0` plus `days`.
pub fn day(days: f64) -> OffsetDateTime {
    T0 + time::Duration::seconds_f64(days * 86_400.0)
}

/// An invented retaining wall, local frame, metres.
pub fn structure(dimension: u8) -> Structure {
    Structure {
        id: "WALL-7".into(),
        name: "invented wall".into(),
        dimension,
        frame: Frame::Local,
        length_unit: LengthUnit::Metre,
        material: None,
        metadata: json!({}),
        created_at: T0,
        updated_at: T0,
    }
}

/// A stored rule with `definition`.
pub fn rule(definition: Value) -> AlertRuleRecord {
    AlertRuleRecord {
        id: Uuid::new_v4(),
        structure_id: "WALL-7".into(),
        definition,
        created_at: T0,
        updated_at: T0,
    }
}

/// A principal-tensile rule with levels 100 and 200 µε, hysteresis 10 µε, and `extra`
/// members merged in.
pub fn tensile(extra: Value) -> AlertRuleRecord {
    let mut d = json!({
        "name": "wall tension",
        "quantity": "principal_tensile",
        "unit": "microstrain",
        "levels": [{"name": "watch", "threshold": 100}, {"name": "alarm", "threshold": 200}],
        "hysteresis": 10
    });
    if let (Some(d), Some(e)) = (d.as_object_mut(), extra.as_object()) {
        for (k, v) in e {
            d.insert(k.clone(), v.clone());
        }
    }
    rule(d)
}

/// A hand-made row of section `elements`: e1 (µε) and its standard deviation.
pub fn row(label: &str, members: &[&str], e1: f64, sd_e1: Option<f64>) -> Value {
    json!({
        "label": label,
        "members": members,
        "e1_microstrain": e1,
        "sd_e1_microstrain": sd_e1,
    })
}

/// An epoch analysis at `epoch` whose result has `rows` in section `section`.
pub fn analysis_with(section: &str, rows: Vec<Value>, epoch: OffsetDateTime) -> Analysis {
    let mut doc = json!({"strain_unit": "microstrain", "dimension": 2, "rejected": []});
    doc[section] = Value::Array(rows);
    Analysis {
        id: Uuid::new_v4(),
        structure_id: "WALL-7".into(),
        kind: AnalysisKind::Epoch,
        status: AnalysisStatus::Succeeded,
        method: "elements".into(),
        epoch: Some(epoch),
        baseline_epoch: None,
        series_first: None,
        series_last: None,
        parameters: json!({}),
        inputs: json!({}),
        software_version: "test".into(),
        result: Some(doc),
        error: None,
        created_at: epoch,
        duration_ms: 0,
    }
}

/// An epoch analysis with one element `E1` (members A, B, C) of `e1` µε ± `sd`.
pub fn one(e1: f64, sd: Option<f64>, epoch: OffsetDateTime) -> Analysis {
    analysis_with("elements", vec![row("E1", &["A", "B", "C"], e1, sd)], epoch)
}

/// Evaluate and write the new states over `states` (insert or replace by rule and
/// region), as the store does.
pub fn apply(
    structure: &Structure,
    rules: &[AlertRuleRecord],
    states: &mut Vec<AlertState>,
    a: &Analysis,
) -> Evaluation {
    let e = super::evaluate(structure, rules, states, a, a.created_at);
    for s in &e.states {
        match states
            .iter_mut()
            .find(|x| x.rule_id == s.rule_id && x.region == s.region)
        {
            Some(x) => *x = s.clone(),
            None => states.push(s.clone()),
        }
    }
    e
}

fn point(id: &str, x: &[f64], sigma: Option<f64>) -> StoredPoint {
    StoredPoint {
        id: id.into(),
        x: x.to_vec(),
        sigma: sigma.map(|s| vec![s; x.len()]),
    }
}

/// Points of the 2D fixture: a 10 m square A(0,0), B(10,0), C(0,10), D(10,10).
pub fn points2(sigma: Option<f64>) -> Vec<StoredPoint> {
    vec![
        point("A", &[0.0, 0.0], sigma),
        point("B", &[10.0, 0.0], sigma),
        point("C", &[0.0, 10.0], sigma),
        point("D", &[10.0, 10.0], sigma),
    ]
}

/// Elements of the 2D fixture: E1 (A, B, C) and E2 (B, D, C), counter-clockwise.
pub fn elements2() -> MethodSpec {
    MethodSpec::Elements {
        elements: vec![
            ElementInput {
                id: "E1".into(),
                vertices: vec!["A".into(), "B".into(), "C".into()],
            },
            ElementInput {
                id: "E2".into(),
                vertices: vec!["B".into(), "D".into(), "C".into()],
            },
        ],
    }
}

/// Displacements `u = G·x` of `points` (metres), a homogeneous gradient.
fn displaced(points: &[StoredPoint], g: &[[f64; 3]; 3]) -> Vec<Displacement> {
    points
        .iter()
        .map(|p| Displacement {
            point_id: p.id.clone(),
            u: (0..p.x.len())
                .map(|i| (0..p.x.len()).map(|j| g[i][j] * p.x[j]).sum())
                .collect(),
            sigma: None,
        })
        .collect()
}

/// A real epoch analysis of the 2D fixture (elements E1, E2) under the homogeneous
/// gradient `g` (dimensionless), points with standard deviation `sigma` metres.
pub fn real_epoch2(
    g: [[f64; 2]; 2],
    sigma: Option<f64>,
    unit: StrainUnit,
    epoch: OffsetDateTime,
) -> Analysis {
    let pts = points2(sigma);
    let g3 = [[g[0][0], g[0][1], 0.0], [g[1][0], g[1][1], 0.0], [0.0; 3]];
    let req = EpochRequest {
        epoch,
        baseline_epoch: None,
        method: elements2(),
        options: FieldOptions::default(),
        strain_unit: unit,
    };
    let a = run_epoch(&structure(2), &pts, &displaced(&pts, &g3), None, &req)
        .expect("a valid epoch analysis");
    assert_eq!(a.status, AnalysisStatus::Succeeded, "{:?}", a.error);
    a
}

/// A real epoch analysis of a 3D tetrahedron T1 (A origin, B, C, D 10 m along x, y, z)
/// under the gradient `g`.
pub fn real_epoch3(g: [[f64; 3]; 3], epoch: OffsetDateTime) -> Analysis {
    let pts = vec![
        point("A", &[0.0, 0.0, 0.0], None),
        point("B", &[10.0, 0.0, 0.0], None),
        point("C", &[0.0, 10.0, 0.0], None),
        point("D", &[0.0, 0.0, 10.0], None),
    ];
    let req = EpochRequest {
        epoch,
        baseline_epoch: None,
        method: MethodSpec::Elements {
            elements: vec![ElementInput {
                id: "T1".into(),
                vertices: ["A", "B", "C", "D"].map(str::to_owned).to_vec(),
            }],
        },
        options: FieldOptions::default(),
        strain_unit: StrainUnit::Microstrain,
    };
    let a = run_epoch(&structure(3), &pts, &displaced(&pts, &g), None, &req)
        .expect("a valid epoch analysis");
    assert_eq!(a.status, AnalysisStatus::Succeeded, "{:?}", a.error);
    a
}

/// A real series of the 2D fixture (elements E1, E2) over epochs at `days` after
/// `T0`, the gradient growing as `rate_per_day · t_days` (baseline the first epoch).
pub fn real_series2(rate_per_day: [[f64; 2]; 2], days: &[f64]) -> Analysis {
    let pts = points2(Some(0.0005));
    let epochs: Vec<SeriesEpoch> = days
        .iter()
        .map(|&d| {
            let g = [
                [rate_per_day[0][0] * d, rate_per_day[0][1] * d, 0.0],
                [rate_per_day[1][0] * d, rate_per_day[1][1] * d, 0.0],
                [0.0; 3],
            ];
            SeriesEpoch {
                epoch: day(d),
                readings: displaced(&pts, &g),
            }
        })
        .collect();
    let req = SeriesAnalysisRequest {
        from: None,
        to: None,
        baseline_epoch: day(days[0]),
        method: elements2(),
        options: FieldOptions::default(),
        strain_unit: StrainUnit::Microstrain,
    };
    let a = run_series(&structure(2), &pts, &epochs, &req).expect("a valid series");
    assert_eq!(a.status, AnalysisStatus::Succeeded, "{:?}", a.error);
    a
}
