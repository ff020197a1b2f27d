//! Exports of a stored result document: RFC 4180 CSV and RFC 7946 GeoJSON.
//!
//! - CSV: one table per section, first row the column keys with their unit suffix
//!   (`exx_microstrain`), sections separated by one empty line, the main section
//!   first and `rejected` last — the layout of `kinema analyze --format csv`.
//! - GeoJSON: a `FeatureCollection` on WGS84 (longitude, latitude in degrees) with
//!   one feature per computed region: a `Polygon` for a triangle (its three points,
//!   ring closed and counter-clockwise as RFC 7946 §3.1.6 asks), a `Point` at the
//!   centroid for every other region; the region's row (strains in the document's
//!   unit) is the feature's `properties`. The collection carries `strain_unit`,
//!   `length_unit`, the conventions and the caution as foreign members. Positions come
//!   from the structure's ENU frame: east, north, up → ECEF → geodetic (WGS84).

use std::collections::HashMap;

use kinema_core::geodesy::{EnuFrame, ecef_to_geodetic};
use serde_json::{Map, Value, json};

use super::AnalysisError;
use crate::model::StoredPoint;
use crate::output::write_field;
use crate::units::LengthUnit;

/// Name of the section of screened-out regions.
const REJECTED: &str = "rejected";

/// The section names of a document, main sections first (by name), `rejected` last.
pub fn sections(doc: &Value) -> Vec<String> {
    let mut names: Vec<String> = doc["columns"]
        .as_object()
        .map(|m| m.keys().filter(|k| *k != REJECTED).cloned().collect())
        .unwrap_or_default();
    names.sort();
    if doc["columns"].get(REJECTED).is_some() {
        names.push(REJECTED.to_owned());
    }
    names
}

/// Text of one JSON cell in CSV: numbers as JSON writes them (shortest round trip),
/// lists space-separated, `null` empty.
fn text(v: &Value) -> String {
    match v {
        Value::Null => String::new(),
        Value::String(s) => s.clone(),
        Value::Array(items) => items.iter().map(text).collect::<Vec<_>>().join(" "),
        other => other.to_string(),
    }
}

fn record(out: &mut Vec<u8>, fields: &[String]) -> Result<(), AnalysisError> {
    for (i, f) in fields.iter().enumerate() {
        if i > 0 {
            out.push(b',');
        }
        write_field(out, f).map_err(|e| AnalysisError::Internal(e.to_string()))?;
    }
    out.extend_from_slice(b"\r\n");
    Ok(())
}

/// The document as CSV (RFC 4180, CRLF line ends).
pub fn csv(doc: &Value) -> Result<Vec<u8>, AnalysisError> {
    let mut out = Vec::new();
    for (n, name) in sections(doc).iter().enumerate() {
        if n > 0 {
            out.extend_from_slice(b"\r\n");
        }
        let keys: Vec<String> = doc["columns"][name]
            .as_array()
            .into_iter()
            .flatten()
            .filter_map(|c| c["key"].as_str().map(str::to_owned))
            .collect();
        record(&mut out, &keys)?;
        for row in doc[name].as_array().into_iter().flatten() {
            let fields: Vec<String> = keys.iter().map(|k| text(&row[k])).collect();
            record(&mut out, &fields)?;
        }
    }
    Ok(out)
}

/// WGS84 longitude and latitude (degrees) and ellipsoidal height (metres) of ENU
/// coordinates (metres) in `frame`.
pub fn enu_to_wgs84(frame: &EnuFrame, enu: [f64; 3]) -> Result<[f64; 3], AnalysisError> {
    let bad = |e: kinema_core::CoreError| AnalysisError::NotComputable(e.to_string());
    let ecef = frame.enu_to_ecef(enu).map_err(bad)?;
    let g = ecef_to_geodetic(ecef).map_err(bad)?;
    Ok([g.lon.to_degrees(), g.lat.to_degrees(), g.h])
}

fn position(p: [f64; 3], three: bool) -> Value {
    if three {
        json!([p[0], p[1], p[2]])
    } else {
        json!([p[0], p[1]])
    }
}

/// The regions of the document as a GeoJSON `FeatureCollection`; `points` are the
/// structure's points (reference coordinates, metres, in `frame`).
pub fn geojson(
    doc: &Value,
    points: &[StoredPoint],
    frame: &EnuFrame,
) -> Result<Value, AnalysisError> {
    let three = doc["dimension"].as_u64() == Some(3);
    let unit = doc["length_unit"]
        .as_str()
        .and_then(LengthUnit::from_label)
        .unwrap_or(LengthUnit::Metre);
    let by_id: HashMap<&str, &StoredPoint> = points.iter().map(|p| (p.id.as_str(), p)).collect();
    let enu_of = |x: &[f64]| [x[0], x[1], x.get(2).copied().unwrap_or(0.0)];
    let mut features = Vec::new();
    for name in sections(doc).iter().filter(|n| *n != REJECTED) {
        for row in doc[name.as_str()].as_array().into_iter().flatten() {
            let members: Vec<&StoredPoint> = row["members"]
                .as_array()
                .into_iter()
                .flatten()
                .filter_map(|m| m.as_str().and_then(|id| by_id.get(id).copied()))
                .collect();
            let geometry = if name == "elements" && !three && members.len() == 3 {
                let mut ring: Vec<[f64; 3]> = members.iter().map(|p| enu_of(&p.x)).collect();
                // Shoelace sign in east-north: positive = counter-clockwise.
                let area2: f64 = (0..3)
                    .map(|i| {
                        let (a, b) = (ring[i], ring[(i + 1) % 3]);
                        a[0] * b[1] - b[0] * a[1]
                    })
                    .sum();
                if area2 < 0.0 {
                    ring.reverse();
                }
                let first = ring[0];
                ring.push(first);
                let coords = ring
                    .into_iter()
                    .map(|p| enu_to_wgs84(frame, p).map(|g| position(g, false)))
                    .collect::<Result<Vec<_>, _>>()?;
                json!({"type": "Polygon", "coordinates": [coords]})
            } else {
                let key = |axis: &str| format!("{axis}_{}", unit.label());
                let c = |axis: &str| row[key(axis)].as_f64().map(|v| unit.to_metres(v));
                let (Some(e), Some(n)) = (c("x"), c("y")) else {
                    continue;
                };
                let up = if three { c("z").unwrap_or(0.0) } else { 0.0 };
                let g = enu_to_wgs84(frame, [e, n, up])?;
                json!({"type": "Point", "coordinates": position(g, three)})
            };
            features.push(json!({
                "type": "Feature",
                "id": row["label"].clone(),
                "geometry": geometry,
                "properties": row.clone(),
            }));
        }
    }
    let mut fc = Map::new();
    fc.insert("type".into(), json!("FeatureCollection"));
    for k in [
        "strain_unit",
        "length_unit",
        "method",
        "shear_convention",
        "angle_convention",
        "caution",
        "summary",
    ] {
        fc.insert(k.into(), doc[k].clone());
    }
    fc.insert(
        "coordinates".into(),
        json!("WGS84 longitude, latitude in degrees (RFC 7946)"),
    );
    fc.insert("features".into(), Value::Array(features));
    Ok(Value::Object(fc))
}
