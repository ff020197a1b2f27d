//! The CSV body of a sensor batch: a header line naming the columns, then one reading
//! per line. Columns (any order, names as written here):
//! `point_id,epoch,ux,uy[,uz][,sigma_x,sigma_y[,sigma_z]]` — `uz` (and `sigma_z`)
//! exactly when the structure is 3D; the sigma columns all or none, and a line may
//! leave all its sigma cells empty. Cells are trimmed; a UTF-8 byte-order mark is
//! skipped. Values are in the unit of `?length_unit=` (default: the structure's).
//!
//! Pointers are `/rows/<line>/<column>` with `line` the 1-based line number of the
//! body (the header is line 1).

use std::io::Read;

use super::body::BodyReader;
use super::json::too_large;
use super::validate::{Field, Locate, RawReading, Validator};
use super::{Context, IngestError, Outcome, Sink};
use crate::api::problem::FieldError;

const U_NAMES: [&str; 3] = ["ux", "uy", "uz"];
const SIGMA_NAMES: [&str; 3] = ["sigma_x", "sigma_y", "sigma_z"];

/// Pointers of a CSV batch: `/rows/<line>/<column>`.
struct CsvPlaces;

impl Locate for CsvPlaces {
    fn at(&self, line: u64, field: Field) -> String {
        match field {
            Field::Row | Field::U | Field::Sigma => format!("/rows/{line}"),
            Field::PointId => format!("/rows/{line}/point_id"),
            Field::Epoch => format!("/rows/{line}/epoch"),
            Field::Ui(i) => format!("/rows/{line}/{}", U_NAMES[i.min(2)]),
            Field::SigmaI(i) => format!("/rows/{line}/{}", SIGMA_NAMES[i.min(2)]),
        }
    }
}

/// Column positions found in the header.
struct Layout {
    point_id: usize,
    epoch: usize,
    u: Vec<usize>,
    sigma: Option<Vec<usize>>,
}

/// Find the columns; every problem of the header is reported at `/rows/1/<column>`.
fn layout(header: &csv::StringRecord, dim: usize) -> Result<Layout, IngestError> {
    let names: Vec<String> = header
        .iter()
        .enumerate()
        .map(|(i, h)| {
            let h = if i == 0 {
                h.trim_start_matches('\u{feff}')
            } else {
                h
            };
            h.trim().to_owned()
        })
        .collect();
    let mut errs = Vec::new();
    let known: Vec<&str> = ["point_id", "epoch"]
        .into_iter()
        .chain(U_NAMES[..dim].iter().copied())
        .chain(SIGMA_NAMES[..dim].iter().copied())
        .collect();
    for (i, n) in names.iter().enumerate() {
        if names[..i].contains(n) {
            errs.push(FieldError::new(
                format!("/rows/1/{n}"),
                format!("column {n} appears twice in the header"),
            ));
        } else if !known.contains(&n.as_str()) {
            let why = if U_NAMES.contains(&n.as_str()) || SIGMA_NAMES.contains(&n.as_str()) {
                format!("the structure is {dim}D: it has no column {n}")
            } else {
                format!(
                    "unknown column {n:?}; the columns are point_id,epoch,{}",
                    known[2..].join(",")
                )
            };
            errs.push(FieldError::new(format!("/rows/1/{n}"), why));
        }
    }
    let find = |n: &str| names.iter().position(|h| h == n);
    let need = |n: &str, errs: &mut Vec<FieldError>| {
        let p = find(n);
        if p.is_none() {
            errs.push(FieldError::new(
                format!("/rows/1/{n}"),
                format!("the header has no column {n}"),
            ));
        }
        p.unwrap_or(0)
    };
    let point_id = need("point_id", &mut errs);
    let epoch = need("epoch", &mut errs);
    let u: Vec<usize> = U_NAMES[..dim].iter().map(|n| need(n, &mut errs)).collect();
    let sig: Vec<Option<usize>> = SIGMA_NAMES[..dim].iter().map(|n| find(n)).collect();
    let sigma = if sig.iter().all(Option::is_none) {
        None
    } else {
        for (n, s) in SIGMA_NAMES[..dim].iter().zip(&sig) {
            if s.is_none() {
                errs.push(FieldError::new(
                    format!("/rows/1/{n}"),
                    format!("give all of the sigma columns or none: {n} is missing"),
                ));
            }
        }
        Some(sig.iter().map(|s| s.unwrap_or(0)).collect())
    };
    if errs.is_empty() {
        Ok(Layout {
            point_id,
            epoch,
            u,
            sigma,
        })
    } else {
        Err(IngestError::Invalid(errs))
    }
}

/// The error for what the csv reader reported.
fn csv_error<R: Read>(e: csv::Error, reader: &BodyReader<R>) -> IngestError {
    let line = e.position().map(|p| p.line());
    match e.into_kind() {
        csv::ErrorKind::Io(_) if reader.over_limit() => too_large(reader),
        csv::ErrorKind::Io(e) => IngestError::Read(e.to_string()),
        csv::ErrorKind::UnequalLengths {
            expected_len,
            len,
            pos,
            ..
        } => IngestError::Malformed(format!(
            "the CSV body is malformed: line {} has {len} fields, the header has {expected_len}",
            pos.map_or(line.unwrap_or(0), |p| p.line())
        )),
        csv::ErrorKind::Utf8 { pos, err } => IngestError::Malformed(format!(
            "the CSV body is not UTF-8 text at line {}, field {}",
            pos.map_or(line.unwrap_or(0), |p| p.line()),
            err.field() + 1
        )),
        other => IngestError::Malformed(format!("the CSV body is malformed: {other:?}")),
    }
}

/// Parse a number cell; `None` (and a bad field) when it is not a number.
fn number(v: &mut Validator<'_>, cell: &str, pointer: impl FnOnce() -> String) -> Option<f64> {
    match cell.parse::<f64>() {
        Ok(x) => Some(x),
        Err(_) => {
            v.bad(
                pointer(),
                format!("{cell:?} is not a number (use a decimal point)"),
            );
            None
        }
    }
}

/// Parse a CSV batch from `reader` (counted and hashed), sending readings into `sink`.
pub fn parse<R: Read>(
    reader: &mut BodyReader<R>,
    ctx: Context,
    sink: Sink,
) -> Result<Outcome, IngestError> {
    let dim = usize::from(ctx.dimension);
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .from_reader(&mut *reader);
    let header = match rdr.headers() {
        Ok(h) => h.clone(),
        Err(e) => {
            drop(rdr);
            return Err(csv_error(e, reader));
        }
    };
    if header.iter().all(|h| h.trim().is_empty()) {
        return Err(IngestError::Invalid(vec![FieldError::new(
            "/rows",
            "the CSV body is empty; send a header line and at least one reading",
        )]));
    }
    let lay = layout(&header, dim)?;
    let places = CsvPlaces;
    let mut v = Validator::new(ctx, &places, sink);
    let mut rec = csv::StringRecord::new();
    let mut u = [0.0; 3];
    let mut s = [0.0; 3];
    loop {
        match rdr.read_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => {
                drop(rdr);
                return Err(csv_error(e, reader));
            }
        }
        let line = rec.position().map_or(0, csv::Position::line);
        v.count_one()?;
        let cell = |i: usize| rec.get(i).unwrap_or("");
        let mut ok = true;
        for (k, &col) in lay.u.iter().enumerate() {
            match number(&mut v, cell(col), || places.at(line, Field::Ui(k))) {
                Some(x) => u[k] = x,
                None => ok = false,
            }
        }
        let sigma = match &lay.sigma {
            Some(cols) if cols.iter().all(|&c| cell(c).is_empty()) => None,
            Some(cols) => {
                for (k, &col) in cols.iter().enumerate() {
                    let c = cell(col);
                    if c.is_empty() {
                        v.bad(
                            places.at(line, Field::SigmaI(k)),
                            "give all standard deviations of a reading or leave all empty",
                        );
                        ok = false;
                    } else {
                        match number(&mut v, c, || places.at(line, Field::SigmaI(k))) {
                            Some(x) => s[k] = x,
                            None => ok = false,
                        }
                    }
                }
                Some(&s[..dim])
            }
            None => None,
        };
        let raw = RawReading {
            point_id: cell(lay.point_id),
            epoch: cell(lay.epoch),
            u: &u[..dim],
            sigma,
        };
        if ok {
            v.reading(line, raw)?;
        } else {
            // Still check the point and epoch, so that one answer names every problem.
            v.reading(
                line,
                RawReading {
                    u: &[0.0; 3][..dim],
                    sigma: None,
                    ..raw
                },
            )?;
        }
        if v.full() {
            return Err(IngestError::Invalid(v.into_errors()));
        }
    }
    drop(rdr);
    let readings = v.finish("/rows")?;
    let (body_sha256, bytes) = reader
        .finish()
        .map_err(|e| IngestError::Read(e.to_string()))?;
    Ok(Outcome {
        readings,
        body_sha256,
        bytes,
    })
}
