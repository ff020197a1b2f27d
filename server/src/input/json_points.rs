//! Points from JSON: `{"length_unit"?: .., "points": [{"id", "x", "y", ["z"], "ux",
//! "uy", ["uz"], precision}]}` where the optional precision is one of
//! `"sigma_x", "sigma_y", ["sigma_z"]` (per axis, length unit), `"cov_xx", "cov_xy",
//! ["cov_xz"], "cov_yy", ["cov_yz", "cov_zz"]` (covariance of the displacement, length
//! unit squared) or `"sigma_x_ref", "sigma_y_ref", ["sigma_z_ref"], "sigma_x_cur",
//! "sigma_y_cur", ["sigma_z_cur"]` (per epoch, combined as `C_ref + C_cur` with the
//! epochs taken as uncorrelated).

use std::collections::HashMap;

use kinema_core::Point;
use kinema_core::kinematics::nalgebra::SMatrix;
use kinema_core::points::{validate_cov, validate_id};
use kinema_core::uncertainty::covariance::displacement_covariance;
use serde::Deserialize;

use super::error::InputError;
use super::json_doc::{CheckedSeq, JsonId, parse_document};
use super::{Parsed, Points, to_square_metres};
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
    cov_xx: Option<f64>,
    cov_xy: Option<f64>,
    cov_xz: Option<f64>,
    cov_yy: Option<f64>,
    cov_yz: Option<f64>,
    cov_zz: Option<f64>,
    sigma_x_ref: Option<f64>,
    sigma_y_ref: Option<f64>,
    sigma_z_ref: Option<f64>,
    sigma_x_cur: Option<f64>,
    sigma_y_cur: Option<f64>,
    sigma_z_cur: Option<f64>,
}

/// Names of the covariance members by (row, column) of the upper triangle.
const COV_NAMES: [[&str; 3]; 3] = [
    ["cov_xx", "cov_xy", "cov_xz"],
    ["", "cov_yy", "cov_yz"],
    ["", "", "cov_zz"],
];

/// The full covariance (m², row-major `3×3`, only the leading `dim×dim` used) from the
/// `cov_*` members, or from the per-epoch `sigma_*_ref`/`sigma_*_cur`; `None` when
/// neither form is given.
fn full_covariance(
    p: &JsonPoint,
    i: usize,
    id: &str,
    dim: usize,
    unit: LengthUnit,
) -> Result<Option<[[f64; 3]; 3]>, String> {
    let cov = [
        [p.cov_xx, p.cov_xy, p.cov_xz],
        [None, p.cov_yy, p.cov_yz],
        [None, None, p.cov_zz],
    ];
    let epoch = [
        [p.sigma_x_ref, p.sigma_y_ref, p.sigma_z_ref],
        [p.sigma_x_cur, p.sigma_y_cur, p.sigma_z_cur],
    ];
    let n_cov = cov.iter().flatten().filter(|v| v.is_some()).count();
    let n_epoch = epoch.iter().flatten().filter(|v| v.is_some()).count();
    let n_sigma = [p.sigma_x, p.sigma_y, p.sigma_z]
        .iter()
        .filter(|v| v.is_some())
        .count();
    if [n_sigma, n_cov, n_epoch].iter().filter(|&&n| n > 0).count() > 1 {
        return Err(format!(
            "points[{i}] (`{id}`): give one form of precision: sigma_* (per axis), cov_* \
             (full covariance) or sigma_*_ref with sigma_*_cur (per epoch), not several"
        ));
    }
    if n_cov > 0 {
        let names: Vec<&str> = (0..dim)
            .flat_map(|a| (a..dim).map(move |b| COV_NAMES[a][b]))
            .collect();
        let in_dim = (0..dim)
            .flat_map(|a| (a..dim).map(move |b| (a, b)))
            .filter(|&(a, b)| cov[a][b].is_some())
            .count();
        if in_dim != names.len() || n_cov != in_dim {
            return Err(format!(
                "points[{i}] (`{id}`): give {} together, or none",
                names.join(", ")
            ));
        }
        let mut c = [[0.0; 3]; 3];
        for a in 0..dim {
            for b in a..dim {
                let v = to_square_metres(unit, cov[a][b].unwrap_or(0.0));
                c[a][b] = v;
                c[b][a] = v;
            }
        }
        return Ok(Some(c));
    }
    if n_epoch > 0 {
        let z = if dim == 3 { ", sigma_z_ref" } else { "" };
        let zc = if dim == 3 { ", sigma_z_cur" } else { "" };
        let given = epoch.iter().flat_map(|e| &e[..dim]).filter(|v| v.is_some());
        if given.count() != 2 * dim || n_epoch != 2 * dim {
            return Err(format!(
                "points[{i}] (`{id}`): give sigma_x_ref, sigma_y_ref{z} and sigma_x_cur, \
                 sigma_y_cur{zc} together, or none"
            ));
        }
        let mut m = [[[0.0; 3]; 3]; 2];
        for (e, (vals, suffix)) in epoch.iter().zip(["ref", "cur"]).enumerate() {
            for k in 0..dim {
                let v = vals[k].unwrap_or(0.0);
                if v <= 0.0 {
                    return Err(format!(
                        "points[{i}] (`{id}`): sigma_{}_{suffix} must be a positive standard \
                         deviation, got {v}",
                        ["x", "y", "z"][k]
                    ));
                }
                let s = unit.to_metres(v);
                m[e][k][k] = s * s;
            }
        }
        let c = if dim == 2 {
            let f = |a: &[[f64; 3]; 3]| SMatrix::<f64, 2, 2>::from_fn(|r, c| a[r][c]);
            let c = displacement_covariance(&f(&m[0]), &f(&m[1]), None)
                .map_err(|e| format!("points[{i}] (`{id}`): {e}"))?;
            std::array::from_fn(|r| {
                std::array::from_fn(|k| if r < 2 && k < 2 { c[(r, k)] } else { 0.0 })
            })
        } else {
            let f = |a: &[[f64; 3]; 3]| SMatrix::<f64, 3, 3>::from_fn(|r, c| a[r][c]);
            let c = displacement_covariance(&f(&m[0]), &f(&m[1]), None)
                .map_err(|e| format!("points[{i}] (`{id}`): {e}"))?;
            std::array::from_fn(|r| std::array::from_fn(|k| c[(r, k)]))
        };
        return Ok(Some(c));
    }
    Ok(None)
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
    fn take(&mut self, i: usize, mut p: JsonPoint, unit: LengthUnit) -> Result<(), String> {
        let id = std::mem::take(&mut p.id.0);
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
        let cov = full_covariance(&p, i, &id, dim, unit)?;
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
            if let Some(c) = cov {
                let c = [[c[0][0], c[0][1]], [c[1][0], c[1][1]]];
                validate_cov(&q.id, &c).map_err(|e| format!("points[{i}]: {e}"))?;
                q.cov = Some(Box::new(c));
            }
            self.plane.push(q);
        } else {
            let z = p.z.unwrap_or(0.0);
            let uz = p.uz.unwrap_or(0.0);
            let mut q = Point::new(id, [m(p.x), m(p.y), m(z)], [m(p.ux), m(p.uy), m(uz)]);
            q.sigma = sigma;
            if let Some(c) = cov {
                validate_cov(&q.id, &c).map_err(|e| format!("points[{i}]: {e}"))?;
                q.cov = Some(Box::new(c));
            }
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
