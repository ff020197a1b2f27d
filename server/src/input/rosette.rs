//! Gauge-reading files for `--method rosette`: one row per gauge, gauges grouped into
//! rosettes by the rosette ID.
//!
//! - CSV: header `rosette,gauge,angle_deg,reading[,zero]`, any column order. A
//!   rosette's rows need not be adjacent; rosettes keep the order in which they first
//!   appear and gauges their file order. An empty `zero` field means "no zero reading".
//! - JSON: `{"rosettes": [{"id": "R1", "gauges": [{"id": "a", "angle_deg": 0,
//!   "reading": 412.5, "zero": 3.1}]}]}`, IDs as strings or integers, `zero` optional.
//!
//! `angle_deg` is the gauge direction in degrees counter-clockwise from the rosette's
//! own x axis. `reading` and `zero` are indicated strains in the declared reading
//! unit (strain or microstrain); they are converted to dimensionless strain here.
//! Rosette and gauge IDs follow the point ID rule (1–64 chars of `A-Za-z0-9._-`);
//! gauge IDs are unique within a rosette, and every rosette has at least
//! [`MIN_GAUGES`] gauges. Whether the directions determine the strain state is
//! decided by the core ([`kinema_core::rosette::solve`]).

use std::collections::HashMap;
use std::io::Read;
use std::path::Path;

use csv::ByteRecord;
use kinema_core::points::validate_id;
use kinema_core::rosette::{Gauge, MIN_GAUGES};
use serde::Deserialize;

use super::error::{InputError, csv_error, excerpt, finite_field};
use super::json_doc::{CheckedSeq, JsonId, parse_document};
use super::source::{self, Source};
use crate::units::StrainUnit;

/// One rosette as read: its ID and its gauges (angles in radians, readings and zero
/// readings in dimensionless strain), in file order.
#[derive(Debug, Clone, PartialEq)]
pub struct RosetteRows {
    /// Rosette identifier.
    pub id: String,
    /// Its gauges, ready for [`kinema_core::rosette::solve`].
    pub gauges: Vec<Gauge>,
}

/// Read a gauge-reading file (CSV or JSON, chosen by content); `reading_unit` is the
/// declared unit of `reading` and `zero`.
pub fn read_rosettes(
    path: &Path,
    reading_unit: StrainUnit,
) -> Result<Vec<RosetteRows>, InputError> {
    let display = path.display().to_string();
    match source::open(path, &display, false)? {
        Source::Blank => Err(InputError::Empty { path: display }),
        Source::Json(bytes) => parse_json(&bytes, &display, reading_unit),
        Source::Csv(reader, _) => parse_csv(reader, &display, reading_unit),
    }
}

/// A reading in the declared unit as dimensionless strain (microstrain divided by
/// 10⁶, one correctly rounded operation).
fn to_strain(unit: StrainUnit, v: f64) -> f64 {
    match unit {
        StrainUnit::Strain => v,
        StrainUnit::Microstrain => v / 1.0e6,
    }
}

const EXPECTED: &str = "rosette, gauge, angle_deg, reading, and optionally zero";
const NAMES: [&str; 5] = ["rosette", "gauge", "angle_deg", "reading", "zero"];

fn parse_csv<R: Read>(
    reader: R,
    path: &str,
    unit: StrainUnit,
) -> Result<Vec<RosetteRows>, InputError> {
    let (mut rdr, header) = source::open_csv(reader, path)?;
    // Column positions: [rosette, gauge, angle_deg, reading, zero].
    let mut cols: [Option<usize>; 5] = [None; 5];
    for (i, name) in header.iter().cloned().enumerate() {
        let Some(slot) = NAMES.iter().position(|n| *n == name) else {
            return Err(InputError::UnknownColumn {
                path: path.to_owned(),
                column: i + 1,
                name: excerpt(&name),
                expected: EXPECTED,
            });
        };
        if cols[slot].replace(i).is_some() {
            return Err(InputError::DuplicateColumn {
                path: path.to_owned(),
                column: i + 1,
                name,
            });
        }
    }
    for (slot, name) in NAMES.iter().enumerate().take(4) {
        if cols[slot].is_none() {
            return Err(InputError::BadHeader {
                path: path.to_owned(),
                reason: format!("missing column `{name}`"),
            });
        }
    }
    let [Some(rc), Some(gc), Some(ac), Some(vc), zc] = cols else {
        return Err(InputError::BadHeader {
            path: path.to_owned(),
            reason: format!("expected {EXPECTED}"),
        });
    };
    let width = header.len();
    let mut rec = ByteRecord::new();
    let mut out: Vec<RosetteRows> = Vec::new();
    // rosette ID → (index in `out`, line of its first row).
    let mut index: HashMap<String, (usize, u64)> = HashMap::new();
    // (rosette index, gauge ID) → line of first occurrence.
    let mut gauges: HashMap<(usize, String), u64> = HashMap::new();
    while rdr
        .read_byte_record(&mut rec)
        .map_err(|e| csv_error(path, &e))?
    {
        let line = rec.position().map(csv::Position::line).unwrap_or(0);
        if rec.len() != width {
            return Err(InputError::FieldCount {
                path: path.to_owned(),
                line,
                expected: width,
                got: rec.len(),
                hint: "",
            });
        }
        let text = |c: usize| -> Result<&str, InputError> {
            std::str::from_utf8(rec.get(c).unwrap_or_default()).map_err(|_| InputError::Csv {
                path: path.to_owned(),
                line,
                message: format!(
                    "field {} (column {}) is not valid UTF-8",
                    c + 1,
                    name_at(&cols, c)
                ),
            })
        };
        let id = |c: usize| -> Result<&str, InputError> {
            let t = text(c)?;
            validate_id(t).map_err(|source| InputError::InvalidId {
                path: path.to_owned(),
                line,
                column: c + 1,
                source,
            })?;
            Ok(t)
        };
        let number = |c: usize| -> Result<f64, InputError> {
            let s = text(c)?;
            finite_field(s, path, line, c + 1, name_at(&cols, c))
        };
        let rosette = id(rc)?;
        let gauge = id(gc)?;
        let angle_deg = number(ac)?;
        let reading = number(vc)?;
        let zero = match zc {
            Some(c) if !text(c)?.is_empty() => Some(number(c)?),
            _ => None,
        };
        let ri = match index.get(rosette) {
            Some(&(ri, _)) => ri,
            None => {
                out.push(RosetteRows {
                    id: rosette.to_owned(),
                    gauges: Vec::new(),
                });
                index.insert(rosette.to_owned(), (out.len() - 1, line));
                out.len() - 1
            }
        };
        if let Some(&first_line) = gauges.get(&(ri, gauge.to_owned())) {
            return Err(InputError::Duplicate {
                path: path.to_owned(),
                line,
                first_line,
                what: format!("gauge in rosette `{rosette}`"),
                id: gauge.to_owned(),
            });
        }
        gauges.insert((ri, gauge.to_owned()), line);
        let mut g = Gauge::new(gauge, angle_deg.to_radians(), to_strain(unit, reading));
        g.zero = zero.map(|z| to_strain(unit, z));
        out[ri].gauges.push(g);
    }
    if out.is_empty() {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "gauge readings",
        });
    }
    for r in &out {
        if r.gauges.len() < MIN_GAUGES {
            let first_line = index.get(&r.id).map_or(0, |&(_, l)| l);
            return Err(too_few(path, first_line, r));
        }
    }
    Ok(out)
}

/// Name of the header column at field `c` (for messages).
fn name_at(cols: &[Option<usize>; 5], c: usize) -> &'static str {
    cols.iter()
        .position(|&x| x == Some(c))
        .map_or("?", |slot| NAMES[slot])
}

fn too_few(path: &str, line: u64, r: &RosetteRows) -> InputError {
    InputError::Csv {
        path: path.to_owned(),
        line,
        message: format!(
            "rosette `{}` has {} gauge(s); a plane strain state needs at least {MIN_GAUGES}",
            r.id,
            r.gauges.len()
        ),
    }
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonGauge {
    id: JsonId,
    angle_deg: f64,
    reading: f64,
    zero: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonRosette {
    id: JsonId,
    gauges: Vec<JsonGauge>,
}

fn parse_json(bytes: &[u8], path: &str, unit: StrainUnit) -> Result<Vec<RosetteRows>, InputError> {
    let mut out: Vec<RosetteRows> = Vec::new();
    let mut names: HashMap<String, usize> = HashMap::new();
    let seq = CheckedSeq::new(|i, r: JsonRosette| {
        let id = r.id.0;
        validate_id(&id).map_err(|err| format!("rosettes[{i}]: {err}"))?;
        if let Some(&first) = names.get(&id) {
            return Err(format!(
                "rosettes[{i}]: duplicate rosette id `{id}` (first at rosettes[{first}])"
            ));
        }
        if r.gauges.len() < MIN_GAUGES {
            return Err(format!(
                "rosettes[{i}] (`{id}`): {} gauge(s); a plane strain state needs at least {MIN_GAUGES}",
                r.gauges.len()
            ));
        }
        let mut seen: HashMap<String, usize> = HashMap::with_capacity(r.gauges.len());
        let mut gauges = Vec::with_capacity(r.gauges.len());
        for (k, g) in r.gauges.into_iter().enumerate() {
            let gid = g.id.0;
            validate_id(&gid).map_err(|err| format!("rosettes[{i}].gauges[{k}]: {err}"))?;
            if let Some(first) = seen.insert(gid.clone(), k) {
                return Err(format!(
                    "rosettes[{i}].gauges[{k}]: gauge `{gid}` appears twice in rosette `{id}` \
                     (first at gauges[{first}])"
                ));
            }
            for (field, v) in [
                ("angle_deg", Some(g.angle_deg)),
                ("reading", Some(g.reading)),
                ("zero", g.zero),
            ] {
                if v.is_some_and(|v| !v.is_finite()) {
                    return Err(format!(
                        "rosettes[{i}].gauges[{k}].{field} is not a finite number"
                    ));
                }
            }
            let mut gauge = Gauge::new(gid, g.angle_deg.to_radians(), to_strain(unit, g.reading));
            gauge.zero = g.zero.map(|z| to_strain(unit, z));
            gauges.push(gauge);
        }
        names.insert(id.clone(), i);
        out.push(RosetteRows { id, gauges });
        Ok(())
    });
    let n = parse_document(bytes, path, "rosettes", None, seq)?;
    if n == 0 {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "rosettes",
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn csv(text: &str) -> Result<Vec<RosetteRows>, InputError> {
        parse_csv(text.as_bytes(), "g.csv", StrainUnit::Microstrain)
    }

    #[test]
    fn csv_groups_gauges_and_converts_units() {
        let r = csv("rosette,gauge,angle_deg,reading,zero\n\
                     R1,a,0,100,\nR2,a,0,1,\nR1,b,45,200,5\nR1,c,90,300,\nR2,b,60,2,\nR2,c,120,3,\n")
        .expect("reads");
        assert_eq!(r.len(), 2);
        assert_eq!(r[0].id, "R1");
        let ids: Vec<&str> = r[0].gauges.iter().map(|g| g.id.as_str()).collect();
        assert_eq!(ids, ["a", "b", "c"]);
        assert_eq!(r[0].gauges[0].reading, 1.0e-4);
        assert_eq!(r[0].gauges[0].zero, None);
        assert_eq!(r[0].gauges[1].zero, Some(5.0e-6));
        assert!((r[0].gauges[1].angle - std::f64::consts::FRAC_PI_4).abs() < 1e-15);
    }

    #[test]
    fn csv_errors_name_line_and_column() {
        let e = csv("rosette,gauge,angle_deg,reading\nR1,a,0,1\nR1,b,4x5,2\n").expect_err("bad");
        assert_eq!(
            e.to_string(),
            "g.csv:3:3 (column angle_deg): `4x5` is not a number"
        );
        let e = csv("rosette,gauge,angle_deg,reading\nR1,a,0,1\nR1,a,45,2\nR1,c,90,3\n")
            .expect_err("dup");
        assert!(e.to_string().starts_with("g.csv:3: duplicate gauge"), "{e}");
        let e = csv("rosette,gauge,angle_deg,reading\nR1,a,0,1\nR1,b,45,2\n").expect_err("few");
        assert!(
            e.to_string().starts_with("g.csv:2: rosette `R1` has 2"),
            "{e}"
        );
        let e = csv("rosette,gauge,angle,reading\n").expect_err("col");
        assert!(
            e.to_string().contains("g.csv:1:3: unknown column `angle`"),
            "{e}"
        );
        let e = csv("rosette,gauge,angle_deg,reading\nR 1,a,0,1\n").expect_err("id");
        assert!(e.to_string().starts_with("g.csv:2:1:"), "{e}");
    }

    #[test]
    fn json_reads_and_checks() {
        let ok = br#"{"rosettes": [{"id": "R1", "gauges": [
            {"id": "a", "angle_deg": 0, "reading": 1e-4, "zero": 1e-6},
            {"id": "b", "angle_deg": 45, "reading": 2e-4},
            {"id": "c", "angle_deg": 90, "reading": 3e-4}]}]}"#;
        let r = parse_json(ok, "g.json", StrainUnit::Strain).expect("reads");
        assert_eq!(r[0].gauges.len(), 3);
        assert_eq!(r[0].gauges[0].zero, Some(1e-6));
        let bad = br#"{"rosettes": [{"id": "R1", "gauges": [
            {"id": "a", "angle_deg": 0, "reading": 1},
            {"id": "a", "angle_deg": 45, "reading": 2},
            {"id": "c", "angle_deg": 90, "reading": 3}]}]}"#;
        let e = parse_json(bad, "g.json", StrainUnit::Strain).expect_err("dup");
        assert!(e.to_string().contains("appears twice"), "{e}");
    }
}
