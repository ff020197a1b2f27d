//! Values and standard deviations of the watched quantities, read from a stored result
//! document (see [`crate::output::JsonSink`] for its layout).
//!
//! Values are in the document's `strain_unit` (per day for rates); [`convert`] turns
//! them into another unit in one correctly rounded operation, so that a value of
//! 100 µε stays exactly 100 µε when the rule's unit is the document's. Conventions of the document: extension
//! positive, `exy`, `eyz`, `exz` tensor shears, angles in degrees counter-clockwise
//! from +x of the structure's frame.
//!
//! - Principal values, the engineering maximum shear and the volumetric strain are the
//!   document's own columns (`e1`, `e2`/`e3`, `max_shear_engineering`, `evol`), with
//!   their own standard deviations where the row has them (`sd_e1`, …; propagated
//!   with the full covariance by the estimator).
//! - The normal strain along an axis is `ε_n = n·ε·n` from the components.
//! - Where the row has no standard deviation of the quantity itself (axial strain;
//!   every derived quantity of a series row, which states only component standard
//!   deviations), it is propagated to first order from the components' standard
//!   deviations **ignoring their correlations**: `sd² = Σ w_c² sd_c²` with `w_c` the
//!   derivative of the quantity with respect to component `c` (for a principal value
//!   `n_k·ε·n_k` with `n_k` its direction: the first-order change of a simple
//!   eigenvalue). Such values are marked [`Measured::sd_approximation`].

use std::collections::HashMap;

use serde_json::{Map, Value};
use time::OffsetDateTime;
use time::format_description::well_known::Rfc3339;

use super::rule::Quantity;
use crate::model::{Analysis, AnalysisKind};
use crate::units::StrainUnit;

/// `v` in unit `from` as a value in unit `to`: unchanged for the same unit, else
/// through dimensionless strain ([`StrainUnit::to_strain`], [`StrainUnit::from_strain`]:
/// one multiplication or division by 10^6).
pub fn convert(v: f64, from: StrainUnit, to: StrainUnit) -> f64 {
    if from == to {
        v
    } else {
        to.from_strain(from.to_strain(v))
    }
}

/// Components of the strain vector, in the order used here: normal strains, then
/// tensor shears. In 2D only `exx`, `eyy`, `exy` exist (the others are 0).
pub const COMPONENTS: [&str; 6] = ["exx", "eyy", "ezz", "exy", "eyz", "exz"];

/// Tensor indices of [`COMPONENTS`].
const INDEX: [(usize, usize); 6] = [(0, 0), (1, 1), (2, 2), (0, 1), (1, 2), (0, 2)];

/// Sections of an epoch result that hold one row per region, in the order they are
/// looked for.
pub const MAIN_SECTIONS: [&str; 5] = [
    "elements",
    "groups",
    "neighbourhoods",
    "network",
    "grid_nodes",
];

/// Section of a series result that holds the cumulative strain of every region and
/// epoch.
pub const CUMULATIVE: &str = crate::pipeline::series::CUMULATIVE;
/// Section of a series result that holds the strain rates.
pub const RATES: &str = crate::pipeline::series::RATES;

/// A value read from a result, in the document's strain unit (per day for a rate).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measured {
    /// The signed value.
    pub value: f64,
    /// Its standard deviation; `None` when the result has nothing to give it from.
    pub sd: Option<f64>,
    /// Whether `sd` was propagated from several components ignoring their
    /// correlations (an approximation).
    pub sd_approximation: bool,
}

/// Directions of the largest and the smallest principal strain, unit vectors.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Directions {
    /// Direction of `e1`.
    pub n1: [f64; 3],
    /// Direction of the minor principal strain (`e2` in 2D, `e3` in 3D).
    pub n_min: [f64; 3],
}

/// The derivative of quantity `q` with respect to each of [`COMPONENTS`]: `dq = Σ
/// w_c dε_c`, exact for the linear quantities (volumetric, axial) and to first order
/// for the principal ones (which need their `dirs`). `axis` is the unit vector of an
/// axial quantity. `None` when a needed direction is missing (e.g. an isotropic state
/// has no principal direction) or `q` is `strain_rate`.
pub fn weights(
    q: Quantity,
    dim: usize,
    axis: Option<[f64; 3]>,
    dirs: Option<Directions>,
) -> Option<[f64; 6]> {
    let outer = |n: [f64; 3]| {
        let mut m = [[0.0; 3]; 3];
        for (i, row) in m.iter_mut().enumerate() {
            for (j, v) in row.iter_mut().enumerate() {
                *v = n[i] * n[j];
            }
        }
        m
    };
    let w: [[f64; 3]; 3] = match q {
        Quantity::Volumetric => {
            let mut m = [[0.0; 3]; 3];
            for (i, row) in m.iter_mut().enumerate().take(dim) {
                row[i] = 1.0;
            }
            m
        }
        Quantity::Axial => outer(axis?),
        Quantity::PrincipalTensile => outer(dirs?.n1),
        Quantity::PrincipalCompressive => outer(dirs?.n_min),
        Quantity::MaxShear => {
            let d = dirs?;
            let (a, b) = (outer(d.n1), outer(d.n_min));
            let mut m = [[0.0; 3]; 3];
            for i in 0..3 {
                for j in 0..3 {
                    m[i][j] = a[i][j] - b[i][j];
                }
            }
            m
        }
        Quantity::StrainRate => return None,
    };
    let mut out = [0.0; 6];
    for (c, &(i, j)) in INDEX.iter().enumerate() {
        if i >= dim || j >= dim {
            continue;
        }
        // W:ε counts each off-diagonal (tensor) shear twice.
        out[c] = if i == j { w[i][j] } else { 2.0 * w[i][j] };
    }
    Some(out)
}

/// `Σ w_c x_c` and, when every needed `sd_c` is known, `sqrt(Σ w_c² sd_c²)` with the
/// approximation flag (set when more than one component contributes).
fn combine(w: &[f64; 6], x: &[Option<f64>; 6], sd: &[Option<f64>; 6]) -> Option<Measured> {
    let mut value = 0.0;
    let mut var = Some(0.0);
    let mut used = 0;
    for c in 0..6 {
        if w[c] == 0.0 {
            continue;
        }
        value += w[c] * x[c]?;
        used += 1;
        var = match (var, sd[c]) {
            (Some(v), Some(s)) => Some(v + (w[c] * s).powi(2)),
            _ => None,
        };
    }
    Some(Measured {
        value,
        sd: var.map(f64::sqrt),
        sd_approximation: used > 1,
    })
}

/// One row of a result with how to read its strain columns.
#[derive(Debug, Clone, Copy)]
pub struct Row<'a> {
    row: &'a Map<String, Value>,
    /// The document's strain unit.
    unit: StrainUnit,
    dim: usize,
}

impl<'a> Row<'a> {
    /// A row of a document whose strain unit is `unit`, of a structure of dimension
    /// `dim`.
    pub fn new(row: &'a Map<String, Value>, unit: StrainUnit, dim: usize) -> Self {
        Self { row, unit, dim }
    }

    /// The structure's dimension the row is read with (2 or 3).
    pub fn dim(&self) -> usize {
        self.dim
    }

    /// Strain column `name` (key `name_<unit>`), in the document's unit.
    fn strain(&self, name: &str) -> Option<f64> {
        let v = self
            .row
            .get(&format!("{name}_{}", self.unit.label()))?
            .as_f64()?;
        v.is_finite().then_some(v)
    }

    /// A column without a unit suffix, as it is.
    fn plain(&self, key: &str) -> Option<f64> {
        self.row.get(key)?.as_f64().filter(|v| v.is_finite())
    }

    /// The strain components (`None` where the row has none; 0 outside the dimension).
    pub fn components(&self) -> [Option<f64>; 6] {
        std::array::from_fn(|c| {
            let (i, j) = INDEX[c];
            if i >= self.dim || j >= self.dim {
                Some(0.0)
            } else {
                self.strain(COMPONENTS[c])
            }
        })
    }

    /// The standard deviations of the components (as [`Row::components`]).
    pub fn component_sds(&self) -> [Option<f64>; 6] {
        std::array::from_fn(|c| {
            let (i, j) = INDEX[c];
            if i >= self.dim || j >= self.dim {
                Some(0.0)
            } else {
                self.strain(&format!("sd_{}", COMPONENTS[c]))
            }
        })
    }

    /// The principal directions: from `theta1` (degrees, counter-clockwise from +x) in
    /// 2D, from `n1x…n1z` and `n3x…n3z` in 3D; `None` when the row leaves them empty
    /// (a repeated principal value has no direction).
    pub fn directions(&self) -> Option<Directions> {
        if self.dim == 2 {
            let t = self.plain("theta1_deg")?.to_radians();
            let (s, c) = t.sin_cos();
            Some(Directions {
                n1: [c, s, 0.0],
                n_min: [-s, c, 0.0],
            })
        } else {
            let v = |p: &str| -> Option<[f64; 3]> {
                Some([
                    self.plain(&format!("{p}x"))?,
                    self.plain(&format!("{p}y"))?,
                    self.plain(&format!("{p}z"))?,
                ])
            };
            Some(Directions {
                n1: v("n1")?,
                n_min: v("n3")?,
            })
        }
    }

    /// The document's own column of `q` and of its standard deviation, if it has one.
    fn own_columns(&self, q: Quantity) -> Option<(&'static str, &'static str)> {
        Some(match q {
            Quantity::PrincipalTensile => ("e1", "sd_e1"),
            Quantity::PrincipalCompressive if self.dim == 2 => ("e2", "sd_e2"),
            Quantity::PrincipalCompressive => ("e3", "sd_e3"),
            Quantity::MaxShear => ("max_shear_engineering", "sd_max_shear_engineering"),
            Quantity::Volumetric => ("evol", "sd_evol"),
            Quantity::Axial | Quantity::StrainRate => return None,
        })
    }

    /// The value of `q` (not `strain_rate`) in this row, in the document's unit, with its
    /// standard deviation: the row's own columns where it has them, otherwise from the
    /// components (see the module notes). `axis` is the unit vector of an axial
    /// quantity. `None` when the row does not give the value.
    pub fn measure(&self, q: Quantity, axis: Option<[f64; 3]>) -> Option<Measured> {
        let propagated = || {
            let w = weights(q, self.dim, axis, self.directions())?;
            combine(&w, &self.components(), &self.component_sds())
        };
        match self.own_columns(q) {
            Some((value, sd)) => {
                let value = self.strain(value)?;
                match self.strain(sd) {
                    Some(sd) => Some(Measured {
                        value,
                        sd: Some(sd),
                        sd_approximation: false,
                    }),
                    None => {
                        let p = propagated().filter(|p| p.sd.is_some());
                        Some(Measured {
                            value,
                            sd: p.and_then(|p| p.sd),
                            sd_approximation: p.is_some_and(|p| p.sd_approximation),
                        })
                    }
                }
            }
            None => propagated(),
        }
    }
}

/// One region of a result: a row of its main section.
#[derive(Debug, Clone)]
pub struct Region<'a> {
    /// Its label: element ID, group name, point ID, grid node `i,j` or the network's.
    pub label: String,
    /// The section the region belongs to (`elements`, `groups`, `neighbourhoods`,
    /// `network`, `grid_nodes`; for a series, `elements` or `groups` after its method).
    pub section: &'static str,
    /// Point IDs the region's estimate uses.
    pub members: Vec<String>,
    /// The row (an epoch row, or the series' cumulative row at its last epoch).
    pub row: Row<'a>,
}

/// A component rate of a series and its standard deviation, per day, in the
/// document's unit.
type ComponentRates = HashMap<String, (f64, Option<f64>)>;

/// The regions of a result at the epoch it is evaluated at.
#[derive(Debug, Clone)]
pub struct ResultView<'a> {
    /// The epoch the values belong to: the analysed epoch, or a series' last epoch.
    pub epoch: OffsetDateTime,
    /// The document's strain unit: the unit of every value read from it.
    pub unit: StrainUnit,
    /// The regions, in the document's order.
    pub regions: Vec<Region<'a>>,
    /// A series' uncompensated component rates by region (empty for an epoch result).
    rates: HashMap<String, ComponentRates>,
    dim: usize,
}

fn strings(v: Option<&Value>) -> Vec<String> {
    v.and_then(Value::as_array)
        .map(|a| {
            a.iter()
                .filter_map(|s| s.as_str().map(str::to_owned))
                .collect()
        })
        .unwrap_or_default()
}

/// The members of each region of a series, from the analysis's `parameters.method`
/// (elements' `vertices`, groups' `point_ids`).
fn series_members(parameters: &Value) -> (&'static str, HashMap<String, Vec<String>>) {
    let method = &parameters["method"];
    let (section, list, id, members) = match method["kind"].as_str() {
        Some("groups") => ("groups", &method["groups"], "name", "point_ids"),
        _ => ("elements", &method["elements"], "id", "vertices"),
    };
    let map = list
        .as_array()
        .into_iter()
        .flatten()
        .filter_map(|r| Some((r[id].as_str()?.to_owned(), strings(r.get(members)))))
        .collect();
    (section, map)
}

impl<'a> ResultView<'a> {
    /// The regions of `analysis`'s result `doc` (of a structure of dimension `dim`):
    /// for an epoch analysis the rows of its main section at `analysis.epoch`; for a
    /// series the rows of `cumulative` at `series_last`, with the `rates` section.
    /// `None` when the document is not one this reads (no epoch, unknown strain unit).
    pub fn of(analysis: &Analysis, doc: &'a Value, dim: usize) -> Option<Self> {
        let unit_label = doc["strain_unit"].as_str()?;
        let unit = StrainUnit::from_label(unit_label)?;
        let dim = doc["dimension"]
            .as_u64()
            .and_then(|d| usize::try_from(d).ok())
            .unwrap_or(dim);
        let row = |r: &'a Value| Some(Row::new(r.as_object()?, unit, dim));
        match analysis.kind {
            AnalysisKind::Epoch => {
                let epoch = analysis.epoch?;
                let section = MAIN_SECTIONS
                    .into_iter()
                    .find(|s| doc.get(*s).is_some_and(Value::is_array))?;
                let regions = doc[section]
                    .as_array()
                    .into_iter()
                    .flatten()
                    .filter_map(|r| {
                        Some(Region {
                            label: r["label"].as_str()?.to_owned(),
                            section,
                            members: strings(r.get("members")),
                            row: row(r)?,
                        })
                    })
                    .collect();
                Some(Self {
                    epoch,
                    unit,
                    regions,
                    rates: HashMap::new(),
                    dim,
                })
            }
            AnalysisKind::Series => {
                let epoch = analysis.series_last?;
                let (section, members) = series_members(&analysis.parameters);
                let at_last = |r: &Value| {
                    r["epoch"]
                        .as_str()
                        .and_then(|t| OffsetDateTime::parse(t, &Rfc3339).ok())
                        == Some(epoch)
                };
                let regions = doc[CUMULATIVE]
                    .as_array()
                    .into_iter()
                    .flatten()
                    .filter(|r| at_last(r))
                    .filter_map(|r| {
                        let label = r["region"].as_str()?.to_owned();
                        Some(Region {
                            members: members.get(&label).cloned().unwrap_or_default(),
                            label,
                            section,
                            row: row(r)?,
                        })
                    })
                    .collect();
                let per_day = format!("rate_{unit_label}_per_day");
                let sd_per_day = format!("sd_rate_{unit_label}_per_day");
                let mut rates: HashMap<String, ComponentRates> = HashMap::new();
                for r in doc[RATES].as_array().into_iter().flatten() {
                    if r["compensated"].as_bool() == Some(true) {
                        continue;
                    }
                    let (Some(region), Some(component), Some(v)) = (
                        r["region"].as_str(),
                        r["component"].as_str(),
                        r[&per_day].as_f64(),
                    ) else {
                        continue;
                    };
                    let sd = r[&sd_per_day].as_f64();
                    rates
                        .entry(region.to_owned())
                        .or_default()
                        .insert(component.to_owned(), (v, sd));
                }
                Some(Self {
                    epoch,
                    unit,
                    regions,
                    rates,
                    dim,
                })
            }
        }
    }

    /// The rate per day of `q` in `region` from a series' component rates
    /// (`dq/dt = Σ w_c dε_c/dt`, the principal directions taken from the region's
    /// cumulative row at the last epoch), per day in the document's unit, with its standard
    /// deviation (component rates' correlations ignored). `None` when the series has no
    /// rate for the region (e.g. too few epochs) or a needed direction is missing.
    pub fn series_rate(
        &self,
        region: &Region<'_>,
        q: Quantity,
        axis: Option<[f64; 3]>,
    ) -> Option<Measured> {
        let rates = self.rates.get(&region.label)?;
        let w = weights(q, self.dim, axis, region.row.directions())?;
        let x: [Option<f64>; 6] = std::array::from_fn(|c| {
            if w[c] == 0.0 {
                Some(0.0)
            } else {
                rates.get(COMPONENTS[c]).map(|r| r.0)
            }
        });
        let sd: [Option<f64>; 6] = std::array::from_fn(|c| {
            if w[c] == 0.0 {
                Some(0.0)
            } else {
                rates.get(COMPONENTS[c]).and_then(|r| r.1)
            }
        });
        combine(&w, &x, &sd)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::alerts::fixtures::{T0, real_epoch2, real_epoch3};
    use crate::units::StrainUnit;

    /// Row `label` of section `section` of a real result document.
    fn row_of(doc: &Value, section: &str, label: &str) -> Map<String, Value> {
        doc[section]
            .as_array()
            .expect("section")
            .iter()
            .find(|r| r["label"] == label)
            .and_then(Value::as_object)
            .cloned()
            .expect("the row")
    }

    /// Element E1 of a real 2D epoch analysis under gradient `g`.
    fn row2(g: [[f64; 2]; 2], unit: StrainUnit) -> Map<String, Value> {
        let a = real_epoch2(g, None, unit, T0);
        row_of(a.result.as_ref().expect("result"), "elements", "E1")
    }

    /// Tetrahedron T1 of a real 3D epoch analysis under gradient `g`.
    fn row3(g: [[f64; 3]; 3]) -> Map<String, Value> {
        let a = real_epoch3(g, T0);
        row_of(a.result.as_ref().expect("result"), "elements", "T1")
    }

    /// exx = 300, eyy = −100, exy = 50 µε (symmetric gradient: no rotation).
    fn known() -> [[f64; 2]; 2] {
        [[300e-6, 50e-6], [50e-6, -100e-6]]
    }

    /// Textbook principal strains (Gere & Goodno, *Mechanics of Materials*, plane
    /// strain transformation): ε1,2 = (εx+εy)/2 ± sqrt(((εx−εy)/2)² + εxy²), εxy the
    /// tensor shear (γxy/2).
    fn textbook(ex: f64, ey: f64, exy: f64) -> (f64, f64) {
        let c = (ex + ey) / 2.0;
        let r = (((ex - ey) / 2.0).powi(2) + exy.powi(2)).sqrt();
        (c + r, c - r)
    }

    fn close(a: f64, b: f64, tol: f64) {
        assert!((a - b).abs() <= tol, "{a} vs {b}");
    }

    #[test]
    fn principal_shear_and_volumetric_match_the_textbook_formula() {
        for unit in [StrainUnit::Microstrain, StrainUnit::Strain] {
            let m = row2(known(), unit);
            let r = Row::new(&m, unit, 2);
            let to = |v: f64| convert(v, StrainUnit::Strain, unit);
            let (e1, e2) = textbook(to(300e-6), to(-100e-6), to(50e-6));
            let tol = to(1e-15);
            // e1 = 100 + sqrt(200² + 50²) = 306.155… µε, e2 = −106.155… µε.
            let t = r.measure(Quantity::PrincipalTensile, None).expect("e1");
            close(t.value, e1, tol);
            close(
                convert(t.value, unit, StrainUnit::Microstrain),
                100.0 + 42500f64.sqrt(),
                1e-9,
            );
            let c = r.measure(Quantity::PrincipalCompressive, None).expect("e2");
            close(c.value, e2, tol);
            let s = r.measure(Quantity::MaxShear, None).expect("shear");
            // Engineering maximum shear γmax = ε1 − ε2 (Gere & Goodno).
            close(s.value, e1 - e2, tol);
            let v = r.measure(Quantity::Volumetric, None).expect("trace");
            close(v.value, to(200e-6), tol);
            assert_eq!(t.sd, None, "no precision block: no sd");
        }
    }

    #[test]
    fn axial_strain_follows_the_strain_transformation() {
        let m = row2(known(), StrainUnit::Microstrain);
        let r = Row::new(&m, StrainUnit::Microstrain, 2);
        // Gere & Goodno: εx1(θ) = (εx+εy)/2 + (εx−εy)/2·cos2θ + (γxy/2)·sin2θ.
        let transformed = |deg: f64| {
            let t = f64::to_radians(deg);
            100.0 + 200.0 * (2.0 * t).cos() + 50.0 * (2.0 * t).sin()
        };
        for (deg, dir) in [
            (0.0, [1.0, 0.0]),
            (90.0, [0.0, 1.0]),
            (45.0, [1.0, 1.0]),
            (30.0, [3f64.sqrt(), 1.0]),
        ] {
            let n = super::super::rule::unit_vector(&dir);
            let a = r.measure(Quantity::Axial, n).expect("axial");
            close(a.value, transformed(deg), 1e-9);
        }
        close(
            r.measure(Quantity::Axial, Some([1.0, 0.0, 0.0]))
                .expect("x")
                .value,
            300.0,
            1e-9,
        );
        close(
            r.measure(Quantity::Axial, Some([0.0, 1.0, 0.0]))
                .expect("y")
                .value,
            -100.0,
            1e-9,
        );
        // 45°: (εx+εy)/2 + εxy = 150 µε.
        close(
            r.measure(
                Quantity::Axial,
                super::super::rule::unit_vector(&[1.0, 1.0]),
            )
            .expect("45")
            .value,
            150.0,
            1e-9,
        );
    }

    #[test]
    fn three_d_compressive_is_e3_and_shear_is_e1_minus_e3() {
        // A diagonal tensor: principal values are the diagonal (any textbook).
        let m = row3([[400e-6, 0.0, 0.0], [0.0, 100e-6, 0.0], [0.0, 0.0, -250e-6]]);
        let r = Row::new(&m, StrainUnit::Microstrain, 3);
        close(
            r.measure(Quantity::PrincipalTensile, None)
                .expect("e1")
                .value,
            400.0,
            1e-9,
        );
        close(
            r.measure(Quantity::PrincipalCompressive, None)
                .expect("e3")
                .value,
            -250.0,
            1e-9,
        );
        close(
            r.measure(Quantity::MaxShear, None).expect("shear").value,
            650.0,
            1e-9,
        );
        close(
            r.measure(Quantity::Volumetric, None).expect("trace").value,
            250.0,
            1e-9,
        );
        close(
            r.measure(Quantity::Axial, Some([0.0, 0.0, 1.0]))
                .expect("z")
                .value,
            -250.0,
            1e-9,
        );
        let d = r.directions().expect("distinct principal values");
        close(d.n1[0].abs(), 1.0, 1e-12);
        close(d.n_min[2].abs(), 1.0, 1e-12);
    }

    #[test]
    fn principal_weights_give_the_first_order_change_of_e1() {
        // e1(ε + h·dε) − e1(ε) ≈ h · w·dε, checked against the textbook formula by a
        // central difference.
        let m = row2(known(), StrainUnit::Microstrain);
        let r = Row::new(&m, StrainUnit::Microstrain, 2);
        let w = weights(Quantity::PrincipalTensile, 2, None, r.directions()).expect("dirs");
        // In microstrain, as the document.
        let d = [2.0, -1.0, 0.0, 3.0, 0.0, 0.0];
        let h = 1e-3;
        let at = |s: f64| textbook(300.0 + s * d[0], -100.0 + s * d[1], 50.0 + s * d[3]);
        let fd = (at(h).0 - at(-h).0) / (2.0 * h);
        let lin: f64 = w.iter().zip(&d).map(|(a, b)| a * b).sum();
        close(lin, fd, 1e-6);
        let fd2 = (at(h).1 - at(-h).1) / (2.0 * h);
        let w2 = weights(Quantity::PrincipalCompressive, 2, None, r.directions()).expect("dirs");
        close(
            w2.iter().zip(&d).map(|(a, b)| a * b).sum::<f64>(),
            fd2,
            1e-6,
        );
    }

    #[test]
    fn axial_sd_ignores_correlations_and_says_so() {
        let mut m = row2(known(), StrainUnit::Microstrain);
        for (k, v) in [
            ("sd_exx_microstrain", 10.0),
            ("sd_eyy_microstrain", 20.0),
            ("sd_exy_microstrain", 5.0),
        ] {
            m.insert(k.into(), Value::from(v));
        }
        let r = Row::new(&m, StrainUnit::Microstrain, 2);
        let along_x = r
            .measure(Quantity::Axial, Some([1.0, 0.0, 0.0]))
            .expect("x");
        close(along_x.sd.expect("sd"), 10.0, 1e-12);
        assert!(
            !along_x.sd_approximation,
            "one component: nothing is ignored"
        );
        let n = super::super::rule::unit_vector(&[1.0, 1.0]);
        let diag = r.measure(Quantity::Axial, n).expect("45");
        // w = (1/2, 1/2, 2·1/2) on (exx, eyy, exy): sd² = 5² + 10² + 5² (µε²).
        close(diag.sd.expect("sd"), 150f64.sqrt(), 1e-12);
        assert!(diag.sd_approximation);
        // The row's own sd column wins where it exists.
        m.insert("sd_e1_microstrain".into(), Value::from(7.0));
        let r = Row::new(&m, StrainUnit::Microstrain, 2);
        let e1 = r.measure(Quantity::PrincipalTensile, None).expect("e1");
        assert_eq!(e1.sd, Some(7.0));
        assert!(!e1.sd_approximation);
    }
}
