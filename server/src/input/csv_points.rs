//! Points from CSV: header analysis (which form, which dimension) and a fast row loop
//! that reuses one `ByteRecord`.

use std::fs::File;
use std::io::{BufReader, Read};
use std::path::Path;

use csv::{ByteRecord, ReaderBuilder, Trim};
use kinema_core::kinematics::nalgebra::SMatrix;
use kinema_core::points::{validate_cov, validate_id};
use kinema_core::uncertainty::covariance::displacement_covariance;
use kinema_core::{CoreError, Point};

use super::error::{InputError, csv_error, excerpt, finite_field};
use super::{Parsed, Points, to_square_metres};
use crate::units::LengthUnit;

/// Names accepted in a points header, for the error message on an unknown column.
const EXPECTED: &str = "id (or point_id), x, y, z, ux, uy, uz, or x_ref, y_ref, z_ref, \
x_cur, y_cur, z_cur, and optionally sigma_x, sigma_y, sigma_z, or cov_xx, cov_xy, cov_xz, \
cov_yy, cov_yz, cov_zz, or sigma_x_ref, sigma_y_ref, sigma_z_ref, sigma_x_cur, sigma_y_cur, \
sigma_z_cur";

/// Names of the covariance columns, by (row, column) of the upper triangle.
const COV_NAMES: [[&str; 3]; 3] = [
    ["cov_xx", "cov_xy", "cov_xz"],
    ["", "cov_yy", "cov_yz"],
    ["", "", "cov_zz"],
];

/// What one header column holds; the index is the axis (0 = x, 1 = y, 2 = z).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Field {
    Id,
    Coord(usize),
    Disp(usize),
    Ref(usize),
    Cur(usize),
    Sigma(usize),
    /// Covariance entry `(a, b)` of the displacement, `a ≤ b` (unit²).
    Cov(usize, usize),
    /// Standard deviation of the reference-epoch coordinate.
    SigmaRef(usize),
    /// Standard deviation of the current-epoch coordinate.
    SigmaCur(usize),
}

fn field_of(name: &str) -> Option<Field> {
    Some(match name {
        "id" | "point_id" => Field::Id,
        "x" => Field::Coord(0),
        "y" => Field::Coord(1),
        "z" => Field::Coord(2),
        "ux" => Field::Disp(0),
        "uy" => Field::Disp(1),
        "uz" => Field::Disp(2),
        "x_ref" => Field::Ref(0),
        "y_ref" => Field::Ref(1),
        "z_ref" => Field::Ref(2),
        "x_cur" => Field::Cur(0),
        "y_cur" => Field::Cur(1),
        "z_cur" => Field::Cur(2),
        "sigma_x" => Field::Sigma(0),
        "sigma_y" => Field::Sigma(1),
        "sigma_z" => Field::Sigma(2),
        "cov_xx" => Field::Cov(0, 0),
        "cov_xy" => Field::Cov(0, 1),
        "cov_xz" => Field::Cov(0, 2),
        "cov_yy" => Field::Cov(1, 1),
        "cov_yz" => Field::Cov(1, 2),
        "cov_zz" => Field::Cov(2, 2),
        "sigma_x_ref" => Field::SigmaRef(0),
        "sigma_y_ref" => Field::SigmaRef(1),
        "sigma_z_ref" => Field::SigmaRef(2),
        "sigma_x_cur" => Field::SigmaCur(0),
        "sigma_y_cur" => Field::SigmaCur(1),
        "sigma_z_cur" => Field::SigmaCur(2),
        _ => return None,
    })
}

/// Column positions (0-based) for one dimension `D`, found from the header.
struct Layout<const D: usize> {
    id: usize,
    /// Reference coordinate columns (`x` or `x_ref`).
    coord: [usize; D],
    /// Displacement columns (`ux`) or current coordinate columns (`x_cur`).
    second: [usize; D],
    /// True when `second` holds current coordinates rather than displacements.
    second_is_current: bool,
    sigma: Option<[usize; D]>,
    /// Covariance columns: `cov[a][b]` for `a ≤ b` (the lower triangle mirrors it).
    cov: Option<[[usize; D]; D]>,
    /// Per-epoch standard deviation columns (reference, current).
    epoch_sigma: Option<([usize; D], [usize; D])>,
    names: Vec<String>,
}

/// Parse a whole CSV points file.
pub(crate) fn parse<R: Read>(
    reader: R,
    file_len: u64,
    path: &str,
    unit: LengthUnit,
    file: &Path,
) -> Result<Points, InputError> {
    let mut rdr = ReaderBuilder::new()
        .has_headers(true)
        .flexible(true)
        .trim(Trim::All)
        .buffer_capacity(1 << 16)
        .from_reader(reader);
    let header = rdr.byte_headers().map_err(|e| csv_error(path, &e))?.clone();
    if header.is_empty() || (header.len() == 1 && header[0].is_empty()) {
        return Err(InputError::Empty {
            path: path.to_owned(),
        });
    }
    let fields = header_fields(&header, path)?;
    let dim = if fields.iter().any(|f| {
        matches!(
            f,
            Field::Coord(2) | Field::Disp(2) | Field::Ref(2) | Field::Cur(2)
        )
    }) {
        3
    } else {
        2
    };
    let (parsed, id_col) = if dim == 2 {
        let layout = layout::<2>(&fields, &header, path)?;
        (
            Parsed::Plane(rows(&mut rdr, &layout, file_len, path, unit)?),
            layout.id,
        )
    } else {
        let layout = layout::<3>(&fields, &header, path)?;
        (
            Parsed::Space(rows(&mut rdr, &layout, file_len, path, unit)?),
            layout.id,
        )
    };
    drop(rdr);
    match parsed.validate(path) {
        Err(InputError::Core {
            source: CoreError::DuplicatePoint { id },
            ..
        }) => Err(locate_duplicate(file, path, id_col, id)),
        other => other,
    }
}

/// A duplicate ID with the lines of its first two occurrences. The core finds the
/// duplicate (its hash check runs anyway); only on that error path is the file read a
/// second time for the lines, so the fast path keeps no per-row line numbers.
fn locate_duplicate(file: &Path, path: &str, id_col: usize, id: String) -> InputError {
    let mut found: Vec<u64> = Vec::with_capacity(2);
    if let Ok(f) = File::open(file) {
        let mut rdr = ReaderBuilder::new()
            .flexible(true)
            .trim(Trim::All)
            .from_reader(BufReader::new(f));
        let mut rec = ByteRecord::new();
        while found.len() < 2 && matches!(rdr.read_byte_record(&mut rec), Ok(true)) {
            if rec.get(id_col) == Some(id.as_bytes()) {
                found.push(rec.position().map(csv::Position::line).unwrap_or(0));
            }
        }
    }
    match found[..] {
        [first_line, line] => InputError::Duplicate {
            path: path.to_owned(),
            line,
            first_line,
            what: "point id".into(),
            id,
        },
        // The file changed under us: report without lines.
        _ => InputError::Core {
            path: path.to_owned(),
            source: CoreError::DuplicatePoint { id },
        },
    }
}

/// Map every header name to a [`Field`]; unknown and repeated names are errors.
fn header_fields(header: &ByteRecord, path: &str) -> Result<Vec<Field>, InputError> {
    let mut fields = Vec::with_capacity(header.len());
    for (i, raw) in header.iter().enumerate() {
        let name = String::from_utf8_lossy(raw);
        let name = name.trim_start_matches('\u{feff}').trim();
        let field = field_of(name).ok_or_else(|| InputError::UnknownColumn {
            path: path.to_owned(),
            column: i + 1,
            name: excerpt(name),
            expected: EXPECTED,
        })?;
        if fields.contains(&field) {
            return Err(InputError::DuplicateColumn {
                path: path.to_owned(),
                column: i + 1,
                name: name.to_owned(),
            });
        }
        fields.push(field);
    }
    Ok(fields)
}

/// Check that the header is one complete form for dimension `D` and find the columns.
fn layout<const D: usize>(
    fields: &[Field],
    header: &ByteRecord,
    path: &str,
) -> Result<Layout<D>, InputError> {
    const AX: [&str; 3] = ["x", "y", "z"];
    let bad = |reason: String| InputError::BadHeader {
        path: path.to_owned(),
        reason,
    };
    let find = |f: Field| fields.iter().position(|g| *g == f);
    let plain = fields
        .iter()
        .any(|f| matches!(f, Field::Coord(_) | Field::Disp(_)));
    let refcur = fields
        .iter()
        .any(|f| matches!(f, Field::Ref(_) | Field::Cur(_)));
    if plain && refcur {
        return Err(bad(
            "the header mixes the displacement form (x, y, ux, uy …) with the reference/current \
             form (x_ref, y_ref, x_cur, y_cur …); use one form"
                .into(),
        ));
    }
    let why = if D == 3 {
        " (the file is 3D because a z column is present)"
    } else {
        ""
    };
    let need = |f: Field, name: String| {
        find(f).ok_or_else(|| bad(format!("missing column `{name}`{why}")))
    };
    let id = find(Field::Id).ok_or_else(|| bad("missing column `id` (or `point_id`)".into()))?;
    let mut coord = [0; D];
    let mut second = [0; D];
    for k in 0..D {
        if refcur {
            coord[k] = need(Field::Ref(k), format!("{}_ref", AX[k]))?;
            second[k] = need(Field::Cur(k), format!("{}_cur", AX[k]))?;
        } else {
            coord[k] = need(Field::Coord(k), AX[k].to_owned())?;
            second[k] = need(Field::Disp(k), format!("u{}", AX[k]))?;
        }
    }
    let sig: Vec<Option<usize>> = (0..3).map(|k| find(Field::Sigma(k))).collect();
    if D == 2 && sig[2].is_some() {
        return Err(bad(
            "column `sigma_z` in a 2D file (no z column is present)".into(),
        ));
    }
    let sigma = if sig[..D].iter().all(Option::is_none) {
        None
    } else {
        let mut s = [0; D];
        for k in 0..D {
            s[k] = sig[k].ok_or_else(|| {
                bad(format!(
                    "missing column `sigma_{}`: give a standard deviation for every axis or none",
                    AX[k]
                ))
            })?;
        }
        Some(s)
    };
    // Full covariance: every upper-triangle entry of dimension D, or none.
    let any_cov = fields.iter().any(|f| matches!(f, Field::Cov(..)));
    if let Some(Field::Cov(a, b)) = fields
        .iter()
        .find(|f| matches!(f, Field::Cov(a, b) if *a >= D || *b >= D))
    {
        return Err(bad(format!(
            "column `{}` in a 2D file (no z column is present)",
            COV_NAMES[*a][*b]
        )));
    }
    let cov = if any_cov {
        let mut c = [[0; D]; D];
        for a in 0..D {
            for b in a..D {
                c[a][b] = find(Field::Cov(a, b)).ok_or_else(|| {
                    bad(format!(
                        "missing column `{}`: give every entry of the covariance ({}) or none",
                        COV_NAMES[a][b],
                        cov_names(D)
                    ))
                })?;
                c[b][a] = c[a][b];
            }
        }
        Some(c)
    } else {
        None
    };
    // Per-epoch standard deviations: all of both epochs, or none.
    let any_epoch = fields
        .iter()
        .any(|f| matches!(f, Field::SigmaRef(_) | Field::SigmaCur(_)));
    if D == 2 && (find(Field::SigmaRef(2)).is_some() || find(Field::SigmaCur(2)).is_some()) {
        return Err(bad(
            "column `sigma_z_ref` or `sigma_z_cur` in a 2D file (no z column is present)".into(),
        ));
    }
    let epoch_sigma = if any_epoch {
        let mut r = [0; D];
        let mut c = [0; D];
        for k in 0..D {
            let missing = |name: String| {
                bad(format!(
                    "missing column `{name}`: give sigma_x_ref, sigma_y_ref{z} and \
                     sigma_x_cur, sigma_y_cur{zc} together, or none",
                    z = if D == 3 { ", sigma_z_ref" } else { "" },
                    zc = if D == 3 { ", sigma_z_cur" } else { "" },
                ))
            };
            r[k] =
                find(Field::SigmaRef(k)).ok_or_else(|| missing(format!("sigma_{}_ref", AX[k])))?;
            c[k] =
                find(Field::SigmaCur(k)).ok_or_else(|| missing(format!("sigma_{}_cur", AX[k])))?;
        }
        Some((r, c))
    } else {
        None
    };
    let forms = [sigma.is_some(), cov.is_some(), epoch_sigma.is_some()];
    if forms.iter().filter(|f| **f).count() > 1 {
        return Err(bad(
            "give one form of precision: sigma_* (per axis), cov_* (full covariance) or \
             sigma_*_ref with sigma_*_cur (per epoch), not several"
                .into(),
        ));
    }
    let names = header
        .iter()
        .map(|n| {
            String::from_utf8_lossy(n)
                .trim_start_matches('\u{feff}')
                .trim()
                .to_owned()
        })
        .collect();
    Ok(Layout {
        id,
        coord,
        second,
        second_is_current: refcur,
        sigma,
        cov,
        epoch_sigma,
        names,
    })
}

/// Read every data row into points (metres).
fn rows<R: Read, const D: usize>(
    rdr: &mut csv::Reader<R>,
    layout: &Layout<D>,
    file_len: u64,
    path: &str,
    unit: LengthUnit,
) -> Result<Vec<Point<D>>, InputError> {
    let ncols = layout.names.len();
    let mut rec = ByteRecord::new();
    let mut points: Vec<Point<D>> = Vec::new();
    let header_end = rdr.position().byte();
    loop {
        match rdr.read_byte_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(path, &e)),
        }
        let line = rec.position().map(csv::Position::line).unwrap_or(0);
        if points.is_empty() {
            // Pre-allocate from the width of the first row.
            let row_bytes = rdr.position().byte().saturating_sub(header_end).max(1);
            let estimate = file_len.saturating_sub(header_end) / row_bytes + 16;
            let estimate = usize::try_from(estimate).unwrap_or(0).min(1 << 28);
            points.reserve(estimate);
        }
        if rec.len() != ncols {
            let diff = rec.len().abs_diff(ncols);
            return Err(InputError::FieldCount {
                path: path.to_owned(),
                line,
                expected: ncols,
                got: rec.len(),
                hint: if diff == 2 || diff == 3 {
                    "; are 2D and 3D rows mixed?"
                } else {
                    ""
                },
            });
        }
        let id_text = text(&rec, layout.id, line, layout, path)?;
        validate_id(id_text).map_err(|source| InputError::InvalidId {
            path: path.to_owned(),
            line,
            column: layout.id + 1,
            source,
        })?;
        let mut x = [0.0; D];
        let mut u = [0.0; D];
        for k in 0..D {
            let a = number(&rec, layout.coord[k], line, layout, path)?;
            let b = number(&rec, layout.second[k], line, layout, path)?;
            x[k] = unit.to_metres(a);
            // Current minus reference in the declared unit (exact by the Sterbenz
            // lemma when the two are within a factor of two), converted once.
            u[k] = unit.to_metres(if layout.second_is_current { b - a } else { b });
            if !u[k].is_finite() {
                // Only a difference of two huge finite values can overflow here.
                return Err(InputError::NonFinite {
                    path: path.to_owned(),
                    line,
                    column: layout.second[k] + 1,
                    name: layout.names[layout.second[k]].clone(),
                    text: "current − reference overflows".into(),
                });
            }
        }
        let mut point = Point::new(id_text.to_owned(), x, u);
        if let Some(cols) = layout.sigma {
            let mut s = [0.0; D];
            for k in 0..D {
                let v = number(&rec, cols[k], line, layout, path)?;
                if v <= 0.0 {
                    return Err(InputError::NonPositiveSigma {
                        path: path.to_owned(),
                        line,
                        column: cols[k] + 1,
                        name: layout.names[cols[k]].clone(),
                        value: v,
                    });
                }
                s[k] = unit.to_metres(v);
            }
            point.sigma = Some(s);
        }
        if let Some(cols) = &layout.cov {
            let mut c = [[0.0; D]; D];
            for a in 0..D {
                for b in a..D {
                    let v = number(&rec, cols[a][b], line, layout, path)?;
                    c[a][b] = to_square_metres(unit, v);
                    c[b][a] = c[a][b];
                }
            }
            validate_cov(&point.id, &c)
                .map_err(|e| bad_covariance(path, line, cols[0][0], &cov_names(D), &e))?;
            point.cov = Some(Box::new(c));
        }
        if let Some((rc, cc)) = &layout.epoch_sigma {
            let mut cr = SMatrix::<f64, D, D>::zeros();
            let mut ccur = SMatrix::<f64, D, D>::zeros();
            for k in 0..D {
                for (col, m) in [(rc[k], &mut cr), (cc[k], &mut ccur)] {
                    let v = number(&rec, col, line, layout, path)?;
                    if v <= 0.0 {
                        return Err(InputError::NonPositiveSigma {
                            path: path.to_owned(),
                            line,
                            column: col + 1,
                            name: layout.names[col].clone(),
                            value: v,
                        });
                    }
                    let s = unit.to_metres(v);
                    m[(k, k)] = s * s;
                }
            }
            // Epochs taken as uncorrelated: no cross-covariance in the file.
            let names = epoch_names(D);
            let c = displacement_covariance(&cr, &ccur, None)
                .map_err(|e| bad_covariance(path, line, rc[0], &names, &e))?;
            let c: [[f64; D]; D] = std::array::from_fn(|a| std::array::from_fn(|b| c[(a, b)]));
            validate_cov(&point.id, &c)
                .map_err(|e| bad_covariance(path, line, rc[0], &names, &e))?;
            point.cov = Some(Box::new(c));
        }
        points.push(point);
    }
    if points.is_empty() {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "points",
        });
    }
    Ok(points)
}

/// The covariance column names of dimension `d`, comma-separated.
fn cov_names(d: usize) -> String {
    let v: Vec<&str> = COV_NAMES[..d]
        .iter()
        .enumerate()
        .flat_map(|(a, row)| row[a..d].iter().copied())
        .collect();
    v.join(", ")
}

/// The per-epoch standard deviation column names of dimension `d`, comma-separated.
fn epoch_names(d: usize) -> String {
    let ax = ["x", "y", "z"];
    let r = ax[..d].iter().map(|a| format!("sigma_{a}_ref"));
    let c = ax[..d].iter().map(|a| format!("sigma_{a}_cur"));
    r.chain(c).collect::<Vec<_>>().join(", ")
}

/// A covariance of one row that is not a covariance, at `line`, column `col` (0-based,
/// the first of its columns).
fn bad_covariance(path: &str, line: u64, col: usize, names: &str, e: &CoreError) -> InputError {
    InputError::Csv {
        path: path.to_owned(),
        line,
        message: format!("columns {} ff. ({names}): {e}", col + 1),
    }
}

/// Field `col` as UTF-8 text.
fn text<'r, const D: usize>(
    rec: &'r ByteRecord,
    col: usize,
    line: u64,
    layout: &Layout<D>,
    path: &str,
) -> Result<&'r str, InputError> {
    let raw = rec.get(col).unwrap_or_default();
    std::str::from_utf8(raw).map_err(|_| InputError::Csv {
        path: path.to_owned(),
        line,
        message: format!(
            "field {} (column {}) is not valid UTF-8",
            col + 1,
            layout.names[col]
        ),
    })
}

/// Field `col` as a finite `f64` in the declared unit.
fn number<const D: usize>(
    rec: &ByteRecord,
    col: usize,
    line: u64,
    layout: &Layout<D>,
    path: &str,
) -> Result<f64, InputError> {
    let s = text(rec, col, line, layout, path)?;
    finite_field(s, path, line, col + 1, &layout.names[col])
}
