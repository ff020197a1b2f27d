//! Group files for `--method groups`: named sets of points fitted one by one.
//!
//! - CSV: header `group,point_id`, one row per member; a group's rows need not be
//!   adjacent, groups keep the order in which they first appear.
//! - JSON: `{"groups": [{"name": "G1", "point_ids": ["T01", "T02", "T03"]}]}`, IDs as
//!   strings or integers.
//!
//! Group names and point IDs follow the point ID rule (1–64 chars of `A-Za-z0-9._-`);
//! a point appears at most once per group (it may belong to several groups). Whether
//! a group has enough points, and whether they are collinear, is checked by the core.

use std::collections::{HashMap, HashSet};
use std::io::Read;
use std::path::Path;

use csv::ByteRecord;
use kinema_core::points::validate_id;
use serde::Deserialize;

use super::error::{InputError, csv_error, excerpt};
use super::json_doc::{CheckedSeq, JsonId, parse_document};
use super::source::{self, Source};

/// One named group and its members' point IDs, in file order.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct GroupRows {
    /// Group name.
    pub name: String,
    /// Point IDs of the members.
    pub point_ids: Vec<String>,
}

/// Read a group file (CSV or JSON, chosen by content).
pub fn read_groups(path: &Path) -> Result<Vec<GroupRows>, InputError> {
    let display = path.display().to_string();
    match source::open(path, &display, false)? {
        Source::Blank => Err(InputError::Empty { path: display }),
        Source::Json(bytes) => parse_json(&bytes, &display),
        Source::Csv(reader, _) => parse_csv(reader, &display),
    }
}

fn parse_csv<R: Read>(reader: R, path: &str) -> Result<Vec<GroupRows>, InputError> {
    let (mut rdr, header) = source::open_csv(reader, path)?;
    let mut cols: [Option<usize>; 2] = [None; 2];
    for (i, name) in header.iter().cloned().enumerate() {
        let slot = match name.as_str() {
            "group" => 0,
            "point_id" => 1,
            _ => {
                return Err(InputError::UnknownColumn {
                    path: path.to_owned(),
                    column: i + 1,
                    name: excerpt(&name),
                    expected: "group, point_id",
                });
            }
        };
        if cols[slot].replace(i).is_some() {
            return Err(InputError::DuplicateColumn {
                path: path.to_owned(),
                column: i + 1,
                name,
            });
        }
    }
    let (Some(gc), Some(pc)) = (cols[0], cols[1]) else {
        return Err(InputError::BadHeader {
            path: path.to_owned(),
            reason: format!(
                "missing column `{}`",
                if cols[0].is_none() {
                    "group"
                } else {
                    "point_id"
                }
            ),
        });
    };
    let mut rec = ByteRecord::new();
    let mut out: Vec<GroupRows> = Vec::new();
    let mut index: HashMap<String, usize> = HashMap::new();
    // (group index, point id) → line of first occurrence.
    let mut members: HashMap<(usize, String), u64> = HashMap::new();
    while rdr
        .read_byte_record(&mut rec)
        .map_err(|e| csv_error(path, &e))?
    {
        let line = rec.position().map(csv::Position::line).unwrap_or(0);
        if rec.len() != 2 {
            return Err(InputError::FieldCount {
                path: path.to_owned(),
                line,
                expected: 2,
                got: rec.len(),
                hint: "",
            });
        }
        let field = |c: usize| -> Result<&str, InputError> {
            let text = std::str::from_utf8(rec.get(c).unwrap_or_default()).map_err(|_| {
                InputError::Csv {
                    path: path.to_owned(),
                    line,
                    message: format!("field {} is not valid UTF-8", c + 1),
                }
            })?;
            validate_id(text).map_err(|source| InputError::InvalidId {
                path: path.to_owned(),
                line,
                column: c + 1,
                source,
            })?;
            Ok(text)
        };
        let group = field(gc)?;
        let point = field(pc)?;
        let gi = match index.get(group) {
            Some(&gi) => gi,
            None => {
                out.push(GroupRows {
                    name: group.to_owned(),
                    point_ids: Vec::new(),
                });
                index.insert(group.to_owned(), out.len() - 1);
                out.len() - 1
            }
        };
        if let Some(&first_line) = members.get(&(gi, point.to_owned())) {
            return Err(InputError::Duplicate {
                path: path.to_owned(),
                line,
                first_line,
                what: format!("point in group `{group}`"),
                id: point.to_owned(),
            });
        }
        members.insert((gi, point.to_owned()), line);
        out[gi].point_ids.push(point.to_owned());
    }
    if out.is_empty() {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "groups",
        });
    }
    Ok(out)
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonGroup {
    name: JsonId,
    point_ids: Vec<JsonId>,
}

fn parse_json(bytes: &[u8], path: &str) -> Result<Vec<GroupRows>, InputError> {
    let mut out: Vec<GroupRows> = Vec::new();
    let mut names: HashMap<String, usize> = HashMap::new();
    let seq = CheckedSeq::new(|i, g: JsonGroup| {
        let name = g.name.0;
        validate_id(&name).map_err(|err| format!("groups[{i}]: {err}"))?;
        if let Some(&first) = names.get(&name) {
            return Err(format!(
                "groups[{i}]: duplicate group name `{name}` (first at groups[{first}])"
            ));
        }
        if g.point_ids.is_empty() {
            return Err(format!("groups[{i}] (`{name}`): no point_ids"));
        }
        let mut seen = HashSet::with_capacity(g.point_ids.len());
        let mut point_ids = Vec::with_capacity(g.point_ids.len());
        for (k, p) in g.point_ids.into_iter().enumerate() {
            validate_id(&p.0).map_err(|err| format!("groups[{i}].point_ids[{k}]: {err}"))?;
            if !seen.insert(p.0.clone()) {
                return Err(format!(
                    "groups[{i}].point_ids[{k}]: point `{}` appears twice in group `{name}`",
                    p.0
                ));
            }
            point_ids.push(p.0);
        }
        names.insert(name.clone(), i);
        out.push(GroupRows { name, point_ids });
        Ok(())
    });
    let n = parse_document(bytes, path, "groups", None, seq)?;
    if n == 0 {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "groups",
        });
    }
    Ok(out)
}
