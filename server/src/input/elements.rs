//! Element files for `--method elements`: triangles (2D) or tetrahedra (3D) given as
//! point IDs.
//!
//! - CSV: header `element_id,v0,v1,v2` (triangles) or `element_id,v0,v1,v2,v3`
//!   (tetrahedra); `id` may stand for `element_id`.
//! - JSON: `{"elements": [{"id": "E1", "vertices": ["T01", "T02", "T03"]}]}`, IDs as
//!   strings or integers.
//!
//! Element IDs and vertex IDs follow the point ID rule (1–64 chars of `A-Za-z0-9._-`),
//! element IDs are unique, and all elements of a file have the same vertex count.
//! Whether the vertices exist, are distinct and are ordered is checked by the core.

use std::collections::HashMap;
use std::io::Read;
use std::path::Path;

use csv::ByteRecord;
use kinema_core::points::validate_id;
use serde::Deserialize;

use super::error::{InputError, csv_error, excerpt};
use super::json_doc::{CheckedSeq, JsonId, parse_document};
use super::source::{self, Source};

/// One element as written in the file: its ID and its vertices' point IDs, in order.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ElementRow {
    /// Element identifier.
    pub id: String,
    /// Point IDs of the vertices: 3 for a triangle, 4 for a tetrahedron.
    pub vertices: Vec<String>,
}

/// Read an element file (CSV or JSON, chosen by content).
pub fn read_elements(path: &Path) -> Result<Vec<ElementRow>, InputError> {
    let display = path.display().to_string();
    match source::open(path, &display, false)? {
        Source::Blank => Err(InputError::Empty { path: display }),
        Source::Json(bytes) => parse_json(&bytes, &display),
        Source::Csv(reader, _) => parse_csv(reader, &display),
    }
}

const EXPECTED: &str = "element_id (or id), v0, v1, v2, and v3 for tetrahedra";

fn parse_csv<R: Read>(reader: R, path: &str) -> Result<Vec<ElementRow>, InputError> {
    let (mut rdr, header) = source::open_csv(reader, path)?;
    // Column positions: [id, v0, v1, v2, v3].
    let mut cols: [Option<usize>; 5] = [None; 5];
    let mut names = Vec::with_capacity(header.len());
    for (i, name) in header.iter().cloned().enumerate() {
        let slot = match name.as_str() {
            "element_id" | "id" => 0,
            "v0" => 1,
            "v1" => 2,
            "v2" => 3,
            "v3" => 4,
            _ => {
                return Err(InputError::UnknownColumn {
                    path: path.to_owned(),
                    column: i + 1,
                    name: excerpt(&name),
                    expected: EXPECTED,
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
        names.push(name);
    }
    let required = ["element_id", "v0", "v1", "v2"];
    for (slot, name) in required.iter().enumerate() {
        if cols[slot].is_none() {
            return Err(InputError::BadHeader {
                path: path.to_owned(),
                reason: format!("missing column `{name}`"),
            });
        }
    }
    let used: Vec<usize> = cols.iter().flatten().copied().collect();
    let mut rec = ByteRecord::new();
    let mut out = Vec::new();
    let mut seen: HashMap<String, u64> = HashMap::new();
    while rdr
        .read_byte_record(&mut rec)
        .map_err(|e| csv_error(path, &e))?
    {
        let line = rec.position().map(csv::Position::line).unwrap_or(0);
        if rec.len() != names.len() {
            return Err(InputError::FieldCount {
                path: path.to_owned(),
                line,
                expected: names.len(),
                got: rec.len(),
                hint: "",
            });
        }
        let mut ids = Vec::with_capacity(used.len());
        for &c in &used {
            let text = std::str::from_utf8(rec.get(c).unwrap_or_default()).map_err(|_| {
                InputError::Csv {
                    path: path.to_owned(),
                    line,
                    message: format!("field {} (column {}) is not valid UTF-8", c + 1, names[c]),
                }
            })?;
            validate_id(text).map_err(|source| InputError::InvalidId {
                path: path.to_owned(),
                line,
                column: c + 1,
                source,
            })?;
            ids.push(text.to_owned());
        }
        let id = ids.remove(0);
        if let Some(&first_line) = seen.get(&id) {
            return Err(InputError::Duplicate {
                path: path.to_owned(),
                line,
                first_line,
                what: "element id".into(),
                id,
            });
        }
        seen.insert(id.clone(), line);
        out.push(ElementRow { id, vertices: ids });
    }
    if out.is_empty() {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "elements",
        });
    }
    Ok(out)
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonElement {
    id: JsonId,
    vertices: Vec<JsonId>,
}

fn parse_json(bytes: &[u8], path: &str) -> Result<Vec<ElementRow>, InputError> {
    let mut out: Vec<ElementRow> = Vec::new();
    let mut seen: HashMap<String, usize> = HashMap::new();
    let seq = CheckedSeq::new(|i, e: JsonElement| {
        let id = e.id.0;
        validate_id(&id).map_err(|err| format!("elements[{i}]: {err}"))?;
        let n = e.vertices.len();
        if n != 3 && n != 4 {
            return Err(format!(
                "elements[{i}] (`{id}`): {n} vertices; a triangle has 3, a tetrahedron 4"
            ));
        }
        if let Some(first) = out.first()
            && first.vertices.len() != n
        {
            return Err(format!(
                "elements[{i}] (`{id}`) has {n} vertices but elements[0] has {}; triangles and tetrahedra are mixed",
                first.vertices.len()
            ));
        }
        let mut vertices = Vec::with_capacity(n);
        for (k, v) in e.vertices.into_iter().enumerate() {
            validate_id(&v.0).map_err(|err| format!("elements[{i}].vertices[{k}]: {err}"))?;
            vertices.push(v.0);
        }
        if let Some(&first) = seen.get(&id) {
            return Err(format!(
                "elements[{i}]: duplicate element id `{id}` (first at elements[{first}])"
            ));
        }
        seen.insert(id.clone(), i);
        out.push(ElementRow { id, vertices });
        Ok(())
    });
    let n = parse_document(bytes, path, "elements", None, seq)?;
    if n == 0 {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "elements",
        });
    }
    Ok(out)
}
