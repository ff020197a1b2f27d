//! GNSS points in WGS84 geodetic coordinates (latitude, longitude, ellipsoidal height
//! at two epochs), converted to a local East-North-Up (ENU) frame.
//!
//! ## Form
//! CSV with a header (names case-sensitive, any column order):
//! `id,lat_ref,lon_ref,h_ref,lat_cur,lon_cur,h_cur[,sigma_e,sigma_n,sigma_u]`
//! (`point_id` may stand for `id`). The file is recognised by its `lat_ref` column.
//! - latitude and longitude in decimal degrees, north and east positive; latitude in
//!   [−90, 90]; any finite longitude (normalised by the core, so 370 is 10);
//! - ellipsoidal heights `h_*` in the declared length unit;
//! - `sigma_e,sigma_n,sigma_u` (all three or none): standard deviations of the
//!   displacement (current − reference) along East, North and Up of the antenna's own
//!   local frame, in the declared length unit, as GNSS processing reports them. For
//!   two uncorrelated epochs with position standard deviations `s_ref`, `s_cur` that is
//!   `sqrt(s_ref² + s_cur²)` per axis.
//!
//! ## Conversion
//! Each position goes to ECEF by the closed form of IOGP Guidance Note 7-2, EPSG method
//! 9602 ([`geodetic_to_ecef`]), and then into the ENU frame about one origin by EPSG
//! method 9836 ([`EnuFrame`]). The origin is `--enu-origin LAT,LON,H`, or by default
//! the mean of the reference positions (the mean of their ECEF vectors, taken back to
//! geodetic, which has no trouble at the antimeridian). The reference point is
//! `x = ENU(reference)`, the displacement `u = R·(X_cur − X_ref)`.
//! 3D (E, N, U) by default; `horizontal` keeps E and N only.
//!
//! A sigma triple is a covariance diag(σ²) in the antenna's own East-North-Up frame; it is
//! rotated into the origin's frame (`R0·R_iᵀ·diag(σ²)·R_i·R0ᵀ`, the core's covariance
//! rotations) and kept whole as the point's covariance (its East-North block with
//! `horizontal`), so the small correlations the rotation creates (of the order of the
//! angle between the two frames, 1.6·10⁻⁴ rad per km from the origin) are not dropped.

use std::path::Path;

use csv::ByteRecord;
use kinema_core::geodesy::{EnuFrame, Geodetic, ecef_to_geodetic, geodetic_to_ecef};
use kinema_core::points::validate_id;
use kinema_core::{CoreError, Point};
use nalgebra::{Matrix3, Vector3};

use super::error::{InputError, csv_error, excerpt, finite_field};
use super::{Parsed, Points, ReadOptions, source};
use crate::units::LengthUnit;

/// Names accepted in a geodetic header, for the error message on an unknown column.
const EXPECTED: &str = "id (or point_id), lat_ref, lon_ref, h_ref, lat_cur, lon_cur, h_cur, \
and optionally sigma_e, sigma_n, sigma_u";

/// Column names in the order of [`Layout::cols`].
const NAMES: [&str; 10] = [
    "lat_ref", "lon_ref", "h_ref", "lat_cur", "lon_cur", "h_cur", "sigma_e", "sigma_n", "sigma_u",
    "id",
];

/// How to convert geodetic points.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GeodeticOptions {
    /// ENU origin given by the user (latitude and longitude in degrees, height in the
    /// declared length unit); `None` = the mean of the reference positions.
    pub origin: Option<[f64; 3]>,
    /// Keep East and North only (a 2D horizontal network).
    pub horizontal: bool,
}

/// How the ENU origin was chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OriginSource {
    /// Given with `--enu-origin`.
    Given,
    /// The mean of the reference positions (mean ECEF vector, back to geodetic).
    MeanOfReference,
}

/// The local frame of a geodetic run, for the output header.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EnuInfo {
    /// The ENU frame (origin geodetic in radians and metres, longitude normalised).
    pub frame: EnuFrame,
    /// How its origin was chosen.
    pub origin_source: OriginSource,
    /// True when only East and North are kept.
    pub horizontal: bool,
}

impl EnuInfo {
    /// Header parameters: `frame = "ENU"`, axes, the origin in degrees and the declared
    /// length unit, how it was chosen, and `horizontal`.
    pub fn parameters(&self, unit: LengthUnit) -> Vec<(String, crate::output::Cell)> {
        use crate::output::Cell;
        let o = &self.frame.origin;
        vec![
            ("coordinates".into(), Cell::Text("geodetic WGS84".into())),
            ("frame".into(), Cell::Text("ENU".into())),
            (
                "axes".into(),
                Cell::Text(if self.horizontal {
                    "x = east, y = north (horizontal)".into()
                } else {
                    "x = east, y = north, z = up (ellipsoid normal)".into()
                }),
            ),
            ("enu_origin_lat_deg".into(), Cell::Num(o.lat.to_degrees())),
            ("enu_origin_lon_deg".into(), Cell::Num(o.lon.to_degrees())),
            (
                format!("enu_origin_h_{}", unit.label()),
                Cell::Num(unit.from_metres(o.h)),
            ),
            (
                "enu_origin".into(),
                Cell::Text(match self.origin_source {
                    OriginSource::Given => "given (--enu-origin)".into(),
                    OriginSource::MeanOfReference => "mean of the reference positions".into(),
                }),
            ),
            ("horizontal".into(), Cell::Bool(self.horizontal)),
        ]
    }
}

/// Geodetic points converted to ENU.
#[derive(Debug, Clone, PartialEq)]
pub struct GeodeticPoints {
    /// The points in the ENU frame, metres (2D when horizontal).
    pub points: Points,
    /// The frame.
    pub enu: EnuInfo,
}

/// Column positions (0-based), in the order of [`NAMES`]; sigma columns optional.
struct Layout {
    cols: [Option<usize>; 10],
    names: Vec<String>,
}

impl Layout {
    fn col(&self, k: usize) -> usize {
        self.cols[k].unwrap_or(0)
    }
}

/// One data row, already in ECEF (metres).
struct Row {
    id: String,
    line: u64,
    x_ref: [f64; 3],
    x_cur: [f64; 3],
    /// Sigma along E, N, U of the antenna's own frame (m), and that frame's origin.
    sigma: Option<([f64; 3], Geodetic)>,
}

/// Read a geodetic points file when its header has a `lat_ref` column; `Ok(None)`
/// for any other file (JSON, or a CSV of another form), which the caller then reads
/// with [`super::read_points`].
///
/// Errors: as the other CSV readers (`file:line:column`), plus
/// [`InputError::CoreAt`] for a latitude outside [−90°, 90°]. `geo.origin` is checked
/// by the caller (a bad origin comes back as [`InputError::Core`]).
pub fn read_geodetic(
    path: &Path,
    options: &ReadOptions,
    geo: &GeodeticOptions,
) -> Result<Option<GeodeticPoints>, InputError> {
    let display = path.display().to_string();
    let reader = match source::open(path, &display, options.progress)? {
        source::Source::Csv(reader, _) => reader,
        source::Source::Json(_) | source::Source::Blank => return Ok(None),
    };
    let (mut rdr, names) = source::open_csv(reader, &display)?;
    if !names.iter().any(|n| n == "lat_ref") {
        return Ok(None);
    }
    let layout = layout(names, &display)?;
    let unit = options.length_unit;
    let mut rows = Vec::new();
    let mut rec = ByteRecord::new();
    loop {
        match rdr.read_byte_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => return Err(csv_error(&display, &e)),
        }
        rows.push(row(&rec, &layout, &display, unit)?);
    }
    if rows.is_empty() {
        return Err(InputError::NoRows {
            path: display,
            what: "points",
        });
    }
    let (origin, origin_source) = match geo.origin {
        Some([lat, lon, h]) => (
            Geodetic::from_degrees(lat, lon, unit.to_metres(h)),
            OriginSource::Given,
        ),
        None => {
            let mut sum = Vector3::zeros();
            for r in &rows {
                sum += Vector3::from(r.x_ref);
            }
            let mean = sum / rows.len() as f64;
            let g = ecef_to_geodetic(mean.into()).map_err(|source| InputError::Core {
                path: display.clone(),
                source,
            })?;
            (g, OriginSource::MeanOfReference)
        }
    };
    let frame = EnuFrame::new(&origin).map_err(|source| InputError::Core {
        path: display.clone(),
        source,
    })?;
    let enu = EnuInfo {
        frame,
        origin_source,
        horizontal: geo.horizontal,
    };
    let parsed = convert(&rows, &frame, geo.horizontal, &display)?;
    let points = parsed.validate(&display).map_err(|e| match e {
        InputError::Core {
            source: CoreError::DuplicatePoint { id },
            ..
        } => duplicate(&rows, &display, id),
        other => other,
    })?;
    Ok(Some(GeodeticPoints { points, enu }))
}

/// Rows → points in the ENU frame about `frame`.
fn convert(
    rows: &[Row],
    frame: &EnuFrame,
    horizontal: bool,
    path: &str,
) -> Result<Parsed, InputError> {
    let core = |source| InputError::Core {
        path: path.to_owned(),
        source,
    };
    let mut plane = Vec::new();
    let mut space = Vec::new();
    for r in rows {
        let x = frame.ecef_to_enu(r.x_ref).map_err(core)?;
        // The displacement is the ECEF difference rotated into ENU, R·(X_cur − X_ref),
        // rather than ENU(cur) − ENU(ref) = R·(X_cur − X0) − R·(X_ref − X0). The two are
        // equal in exact arithmetic. In floating point both start from ECEF vectors
        // rounded to ~1e-9 m (the ulp of 6.4e6 m); X_cur − X_ref is then exact (Sterbenz
        // lemma: the two are within a factor of two), and rotating it adds an error
        // relative to |u| (mm to m). Subtracting two ENU positions instead adds the
        // rounding of two vectors as long as the distance from the origin (relative to
        // |x|, up to km), then cancels them: the difference form is the better
        // conditioned one and does not depend on X0 at all. (Both are far below GNSS
        // precision; the choice keeps the conversion from adding error of its own.)
        let d = Vector3::from(r.x_cur) - Vector3::from(r.x_ref);
        let u: [f64; 3] = (frame.rotation * d).into();
        let cov = match &r.sigma {
            None => None,
            Some((s, at)) => Some(rotate_sigma(*s, at, frame).map_err(core)?),
        };
        if horizontal {
            let mut p = Point::new(r.id.clone(), [x[0], x[1]], [u[0], u[1]]);
            p.cov = cov.map(|c| Box::new([[c[0][0], c[0][1]], [c[1][0], c[1][1]]]));
            plane.push(p);
        } else {
            let mut p = Point::new(r.id.clone(), x, u);
            p.cov = cov.map(Box::new);
            space.push(p);
        }
    }
    Ok(if horizontal {
        Parsed::Plane(plane)
    } else {
        Parsed::Space(space)
    })
}

/// Standard deviations along E, N, U of the frame at `at` → the covariance along the
/// axes of `frame`, `R0·R_atᵀ·diag(σ²)·R_at·R0ᵀ` (m², row-major, symmetrised).
fn rotate_sigma(s: [f64; 3], at: &Geodetic, frame: &EnuFrame) -> Result<[[f64; 3]; 3], CoreError> {
    let local = EnuFrame::new(at)?;
    let c = Matrix3::from_diagonal(&Vector3::new(s[0] * s[0], s[1] * s[1], s[2] * s[2]));
    let c = frame.covariance_to_enu(&local.covariance_to_ecef(&c)?)?;
    let c = (c + c.transpose()) * 0.5;
    Ok(std::array::from_fn(|i| std::array::from_fn(|j| c[(i, j)])))
}

fn duplicate(rows: &[Row], path: &str, id: String) -> InputError {
    let lines: Vec<u64> = rows
        .iter()
        .filter(|r| r.id == id)
        .map(|r| r.line)
        .take(2)
        .collect();
    match lines[..] {
        [first_line, line] => InputError::Duplicate {
            path: path.to_owned(),
            line,
            first_line,
            what: "point id".into(),
            id,
        },
        _ => InputError::Core {
            path: path.to_owned(),
            source: CoreError::DuplicatePoint { id },
        },
    }
}

/// Check the header: every name known and once, the six coordinates present, the
/// sigma columns all or none.
fn layout(names: Vec<String>, path: &str) -> Result<Layout, InputError> {
    let mut cols = [None; 10];
    for (i, name) in names.iter().enumerate() {
        let k = match name.as_str() {
            "id" | "point_id" => 9,
            n => NAMES
                .iter()
                .position(|m| *m == n)
                .ok_or_else(|| InputError::UnknownColumn {
                    path: path.to_owned(),
                    column: i + 1,
                    name: excerpt(n),
                    expected: EXPECTED,
                })?,
        };
        if cols[k].is_some() {
            return Err(InputError::DuplicateColumn {
                path: path.to_owned(),
                column: i + 1,
                name: name.clone(),
            });
        }
        cols[k] = Some(i);
    }
    let bad = |reason: String| InputError::BadHeader {
        path: path.to_owned(),
        reason,
    };
    if cols[9].is_none() {
        return Err(bad("missing column `id` (or `point_id`)".into()));
    }
    for k in 0..6 {
        if cols[k].is_none() {
            return Err(bad(format!(
                "missing column `{}` (a geodetic file needs lat_ref, lon_ref, h_ref, lat_cur, \
                 lon_cur, h_cur)",
                NAMES[k]
            )));
        }
    }
    let n_sigma = cols[6..9].iter().filter(|c| c.is_some()).count();
    if n_sigma != 0 && n_sigma != 3 {
        let missing = (6..9).find(|&k| cols[k].is_none()).unwrap_or(6);
        return Err(bad(format!(
            "missing column `{}`: give sigma_e, sigma_n and sigma_u, or none",
            NAMES[missing]
        )));
    }
    Ok(Layout { cols, names })
}

/// One data row → ECEF positions of both epochs.
fn row(rec: &ByteRecord, layout: &Layout, path: &str, unit: LengthUnit) -> Result<Row, InputError> {
    let line = rec.position().map(csv::Position::line).unwrap_or(0);
    if rec.len() != layout.names.len() {
        return Err(InputError::FieldCount {
            path: path.to_owned(),
            line,
            expected: layout.names.len(),
            got: rec.len(),
            hint: "",
        });
    }
    let id_col = layout.col(9);
    let id = text(rec, id_col, line, layout, path)?;
    validate_id(id).map_err(|source| InputError::InvalidId {
        path: path.to_owned(),
        line,
        column: id_col + 1,
        source,
    })?;
    let mut v = [0.0; 9];
    for (k, slot) in v.iter_mut().enumerate() {
        if let Some(c) = layout.cols[k] {
            *slot = number(rec, c, line, layout, path)?;
        }
    }
    let epoch = |k: usize| -> Result<(Geodetic, [f64; 3]), InputError> {
        let g = Geodetic::from_degrees(v[k], v[k + 1], unit.to_metres(v[k + 2]));
        let at = |source| InputError::CoreAt {
            path: path.to_owned(),
            line,
            column: layout.col(k) + 1,
            name: NAMES[k],
            source: Box::new(source),
        };
        let x = geodetic_to_ecef(&g).map_err(at)?;
        Ok((g, x))
    };
    let (g_ref, x_ref) = epoch(0)?;
    let (_, x_cur) = epoch(3)?;
    let sigma = if layout.cols[6].is_some() {
        let mut s = [0.0; 3];
        for (k, slot) in s.iter_mut().enumerate() {
            let c = layout.col(6 + k);
            if v[6 + k] <= 0.0 {
                return Err(InputError::NonPositiveSigma {
                    path: path.to_owned(),
                    line,
                    column: c + 1,
                    name: layout.names[c].clone(),
                    value: v[6 + k],
                });
            }
            *slot = unit.to_metres(v[6 + k]);
        }
        Some((s, g_ref))
    } else {
        None
    };
    Ok(Row {
        id: id.to_owned(),
        line,
        x_ref,
        x_cur,
        sigma,
    })
}

fn text<'r>(
    rec: &'r ByteRecord,
    col: usize,
    line: u64,
    layout: &Layout,
    path: &str,
) -> Result<&'r str, InputError> {
    std::str::from_utf8(rec.get(col).unwrap_or_default()).map_err(|_| InputError::Csv {
        path: path.to_owned(),
        line,
        message: format!(
            "field {} (column {}) is not valid UTF-8",
            col + 1,
            layout.names[col]
        ),
    })
}

/// Field `col` as a finite number; NaN and infinities are errors naming the field.
fn number(
    rec: &ByteRecord,
    col: usize,
    line: u64,
    layout: &Layout,
    path: &str,
) -> Result<f64, InputError> {
    let s = text(rec, col, line, layout, path)?;
    finite_field(s, path, line, col + 1, &layout.names[col])
}
