//! Points from JSON: `{"length_unit"?: .., "points": [{"id", "x", "y", ["z"], "ux",
//! "uy", ["uz"], ["sigma_x", "sigma_y", ["sigma_z"]]}]}`.

use std::collections::HashMap;

use kinema_core::Point;
use kinema_core::points::validate_id;
use serde::Deserialize;

use super::error::InputError;
use super::json_doc::{CheckedSeq, JsonId, parse_document};
use super::{Parsed, Points};
use crate::units::LengthUnit;

/// One point as written in the file, in the declared unit.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonPoint {
    id: JsonId,
    x: f64,
    y: f64,
    z: Option<f64>,
    ux: f64,
    uy: f64,
    uz: Option<f64>,
    sigma_x: Option<f64>,
    sigma_y: Option<f64>,
    sigma_z: Option<f64>,
}

/// Points collected while parsing; the dimension is fixed by the first point.
#[derive(Default)]
struct Collector {
    plane: Vec<Point<2>>,
    space: Vec<Point<3>>,
    dim: Option<usize>,
    /// ID → index of its first occurrence.
    seen: HashMap<String, usize>,
}

impl Collector {
    fn take(&mut self, i: usize, p: JsonPoint, unit: LengthUnit) -> Result<(), String> {
        let id = p.id.0;
        validate_id(&id).map_err(|e| format!("points[{i}]: {e}"))?;
        let dim = match (p.z, p.uz) {
            (Some(_), Some(_)) => 3,
            (None, None) => 2,
            (Some(_), None) => return Err(format!("points[{i}] (`{id}`): `z` given without `uz`")),
            (None, Some(_)) => return Err(format!("points[{i}] (`{id}`): `uz` given without `z`")),
        };
        let first_dim = *self.dim.get_or_insert(dim);
        if dim != first_dim {
            return Err(format!(
                "points[{i}] (`{id}`) is {dim}D but points[0] is {first_dim}D; 2D and 3D points are mixed"
            ));
        }
        let sig = [p.sigma_x, p.sigma_y, p.sigma_z];
        let given = sig.iter().filter(|s| s.is_some()).count();
        let sigma = if given == 0 {
            None
        } else if given != dim || (dim == 2 && p.sigma_z.is_some()) {
            return Err(format!(
                "points[{i}] (`{id}`): give sigma_x, sigma_y{} together, or none",
                if dim == 3 { ", sigma_z" } else { "" }
            ));
        } else {
            let mut s = [0.0; 3];
            for (k, (v, name)) in sig
                .iter()
                .zip(["sigma_x", "sigma_y", "sigma_z"])
                .take(dim)
                .enumerate()
            {
                let v = v.unwrap_or(0.0);
                if v <= 0.0 {
                    return Err(format!(
                        "points[{i}] (`{id}`): {name} must be a positive standard deviation, got {v}"
                    ));
                }
                s[k] = unit.to_metres(v);
            }
            Some(s)
        };
        if let Some(&first) = self.seen.get(&id) {
            return Err(format!(
                "points[{i}]: duplicate point id `{id}` (first at points[{first}])"
            ));
        }
        self.seen.insert(id.clone(), i);
        let m = |v: f64| unit.to_metres(v);
        if dim == 2 {
            let mut q = Point::new(id, [m(p.x), m(p.y)], [m(p.ux), m(p.uy)]);
            q.sigma = sigma.map(|s| [s[0], s[1]]);
            self.plane.push(q);
        } else {
            let z = p.z.unwrap_or(0.0);
            let uz = p.uz.unwrap_or(0.0);
            let mut q = Point::new(id, [m(p.x), m(p.y), m(z)], [m(p.ux), m(p.uy), m(uz)]);
            q.sigma = sigma;
            self.space.push(q);
        }
        Ok(())
    }
}

/// Parse a JSON points document (bytes of the whole file).
pub(crate) fn parse(bytes: &[u8], path: &str, unit: LengthUnit) -> Result<Points, InputError> {
    let mut c = Collector::default();
    let seq = CheckedSeq::new(|i, p: JsonPoint| c.take(i, p, unit));
    let n = parse_document(bytes, path, "points", Some(unit), seq)?;
    if n == 0 {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "points",
        });
    }
    let parsed = if c.dim == Some(3) {
        Parsed::Space(c.space)
    } else {
        Parsed::Plane(c.plane)
    };
    parsed.validate(path)
}
