//! Epoch files for `kinema analyze --series`: the measured positions of one network at
//! several survey epochs.
//!
//! - CSV: header `epoch,time,id,x,y[,z][,sigma_x,sigma_y[,sigma_z]][,temperature_c]`,
//!   any column order, `point_id` may stand for `id`. One row per point per epoch. An
//!   epoch's rows need not be adjacent; epochs keep the order in which they first
//!   appear. Every row of an epoch repeats the same `time` and the same
//!   `temperature_c` (empty on every row for "no temperature"); a disagreement is an
//!   error naming the line.
//! - JSON: `{"length_unit": "m"|"mm" (optional), "epochs": [{"label": "S0", "time":
//!   "2026-03-01T10:00:00Z", "temperature_c": 11.5 (optional), "points": [{"id": "T1",
//!   "x": .., "y": .., ["z"], ["sigma_x", "sigma_y", ["sigma_z"]]}]}]}`.
//!
//! `time` is an RFC 3339 timestamp with a `Z` or a numeric offset
//! (`2026-03-01T10:00:00Z`, `2026-03-01T11:00:00+01:00`); any offset is accepted and
//! converted to UTC. Leap seconds (`:60`) are refused, as Unix time does not count them.
//! Epochs must be listed in strictly increasing time: the reader does not sort them,
//! so a file whose epochs are out of order is an error, not silently reordered.
//!
//! Coordinates and standard deviations are in the declared length unit and are
//! converted to metres here; `temperature_c` is in degrees Celsius. Point IDs follow
//! the point ID rule (1–64 chars of `A-Za-z0-9._-`) and are unique within an epoch.
//! A point of the network that was not measured at an epoch is simply absent from it.

use std::collections::HashMap;
use std::io::Read;
use std::path::Path;

use csv::ByteRecord;
use kinema_core::CoreError;
use kinema_core::points::validate_id;
use kinema_core::timeseries::{Epoch, EpochPoint};
use serde::Deserialize;

use super::ReadOptions;
use super::error::{InputError, csv_error, excerpt, finite_field};
use super::json_doc::{CheckedSeq, JsonId, parse_document};
use super::source::{self, Source};
use crate::units::LengthUnit;

/// The epochs of a file, in metres, in file order (strictly increasing time).
#[derive(Debug, Clone, PartialEq)]
pub enum EpochSeries {
    /// Plane network: `x`, `y`.
    Plane(Vec<Epoch<2>>),
    /// Spatial network: `x`, `y`, `z`.
    Space(Vec<Epoch<3>>),
}

impl EpochSeries {
    /// 2 or 3.
    pub fn dimension(&self) -> usize {
        match self {
            Self::Plane(_) => 2,
            Self::Space(_) => 3,
        }
    }

    /// Number of epochs.
    pub fn len(&self) -> usize {
        match self {
            Self::Plane(e) => e.len(),
            Self::Space(e) => e.len(),
        }
    }

    /// Always false: a file with no epoch is an error.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Labels of the epochs, in order.
    pub fn labels(&self) -> Vec<&str> {
        match self {
            Self::Plane(e) => e.iter().map(|x| x.label.as_str()).collect(),
            Self::Space(e) => e.iter().map(|x| x.label.as_str()).collect(),
        }
    }

    /// Number of distinct point IDs over all epochs.
    pub fn distinct_points(&self) -> usize {
        let ids: std::collections::HashSet<&str> = match self {
            Self::Plane(e) => e
                .iter()
                .flat_map(|x| &x.points)
                .map(|p| p.id.as_str())
                .collect(),
            Self::Space(e) => e
                .iter()
                .flat_map(|x| &x.points)
                .map(|p| p.id.as_str())
                .collect(),
        };
        ids.len()
    }
}

/// Read an epochs file (CSV or JSON, chosen by content) into metres.
///
/// Checked here: the header, every number (finite; standard deviations positive),
/// every point ID (valid, unique within its epoch), the time (RFC 3339), one time and
/// one temperature per epoch, and strictly increasing epoch times. The core
/// ([`kinema_core::timeseries::strain_series`]) checks the rest.
pub fn read_epochs(path: &Path, options: &ReadOptions) -> Result<EpochSeries, InputError> {
    let display = path.display().to_string();
    match source::open(path, &display, options.progress)? {
        Source::Blank => Err(InputError::Empty { path: display }),
        Source::Json(bytes) => parse_json(&bytes, &display, options.length_unit),
        Source::Csv(reader, _) => parse_csv(reader, &display, options.length_unit),
    }
}

// ---------------------------------------------------------------------------------
// RFC 3339 times

/// Days from 1970-01-01 to the proleptic Gregorian date `y-m-d`.
///
/// Source: H. Hinnant, "chrono-Compatible Low-Level Date Algorithms",
/// `days_from_civil` (eras of 400 years, years starting in March).
fn days_from_civil(y: i64, m: u32, d: u32) -> i64 {
    let y = if m <= 2 { y - 1 } else { y };
    let era = y.div_euclid(400);
    let yoe = y - era * 400;
    let mp = (i64::from(m) + 9) % 12;
    let doy = (153 * mp + 2) / 5 + i64::from(d) - 1;
    let doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    era * 146_097 + doe - 719_468
}

/// The date `(y, m, d)` of day `z` counted from 1970-01-01 (inverse of
/// [`days_from_civil`], same source: `civil_from_days`).
fn civil_from_days(z: i64) -> (i64, u32, u32) {
    let z = z + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    // d in 1..=31 and m in 1..=12 by construction.
    (y, m as u32, d as u32)
}

fn is_leap(y: i64) -> bool {
    (y % 4 == 0 && y % 100 != 0) || y % 400 == 0
}

fn days_in_month(y: i64, m: u32) -> u32 {
    match m {
        2 if is_leap(y) => 29,
        2 => 28,
        4 | 6 | 9 | 11 => 30,
        _ => 31,
    }
}

/// Parse an RFC 3339 date-time (`YYYY-MM-DDTHH:MM:SS[.frac](Z|±HH:MM)`; `t` or a
/// space may stand for `T`, `z` for `Z`) into seconds since 1970-01-01T00:00:00Z.
/// A numeric offset is removed (local time − offset = UTC). Seconds `60` (a leap
/// second) are refused.
///
/// # Errors
/// A plain-words reason, e.g. `month 13 is out of range`.
pub fn parse_rfc3339(text: &str) -> Result<f64, String> {
    const FORM: &str = "expected an RFC 3339 time such as 2026-03-01T10:00:00Z";
    let b = text.as_bytes();
    let num = |at: usize, n: usize| -> Result<i64, String> {
        let s = b.get(at..at + n).ok_or_else(|| FORM.to_owned())?;
        if !s.iter().all(u8::is_ascii_digit) {
            return Err(FORM.to_owned());
        }
        Ok(s.iter().fold(0, |v, c| v * 10 + i64::from(c - b'0')))
    };
    let sep = |at: usize, allowed: &[u8]| -> Result<(), String> {
        match b.get(at) {
            Some(c) if allowed.contains(c) => Ok(()),
            _ => Err(FORM.to_owned()),
        }
    };
    let year = num(0, 4)?;
    sep(4, b"-")?;
    let month = num(5, 2)?;
    sep(7, b"-")?;
    let day = num(8, 2)?;
    sep(10, b"Tt ")?;
    let hour = num(11, 2)?;
    sep(13, b":")?;
    let minute = num(14, 2)?;
    sep(16, b":")?;
    let second = num(17, 2)?;
    let mut i = 19;
    let mut frac = 0.0;
    if b.get(i) == Some(&b'.') {
        let start = i + 1;
        i = start;
        while b.get(i).is_some_and(u8::is_ascii_digit) {
            i += 1;
        }
        if i == start {
            return Err(format!("{FORM} (no digits after the decimal point)"));
        }
        // "0.ddd" parses exactly as the nearest double.
        frac = format!("0.{}", &text[start..i])
            .parse::<f64>()
            .map_err(|_| FORM.to_owned())?;
    }
    let offset_s = match b.get(i) {
        Some(b'Z' | b'z') if i + 1 == b.len() => 0,
        Some(&c @ (b'+' | b'-')) if i + 6 == b.len() => {
            sep(i + 3, b":")?;
            let oh = num(i + 1, 2)?;
            let om = num(i + 4, 2)?;
            if oh > 23 || om > 59 {
                return Err(format!("offset {} is out of range", &text[i..]));
            }
            let s = (oh * 60 + om) * 60;
            if c == b'-' { -s } else { s }
        }
        None => {
            return Err(format!(
                "{FORM}: the time needs `Z` or an offset such as +01:00"
            ));
        }
        _ => return Err(FORM.to_owned()),
    };
    if !(1..=12).contains(&month) {
        return Err(format!("month {month} is out of range"));
    }
    // month is in 1..=12 here.
    let m = month as u32;
    let dim = i64::from(days_in_month(year, m));
    if !(1..=dim).contains(&day) {
        return Err(format!(
            "day {day} is out of range for {year:04}-{month:02} ({dim} days)"
        ));
    }
    if hour > 23 {
        return Err(format!("hour {hour} is out of range"));
    }
    if minute > 59 {
        return Err(format!("minute {minute} is out of range"));
    }
    if second == 60 {
        return Err("leap second :60 is not accepted (Unix time does not count it)".into());
    }
    if second > 59 {
        return Err(format!("second {second} is out of range"));
    }
    let days = days_from_civil(year, m, day as u32);
    let secs = days * 86_400 + hour * 3600 + minute * 60 + second - offset_s;
    Ok(secs as f64 + frac)
}

/// Format seconds since 1970-01-01T00:00:00Z as RFC 3339 UTC
/// (`2026-03-01T10:00:00Z`), with microseconds when the time has a fraction.
pub fn format_rfc3339(time_s: f64) -> String {
    if !time_s.is_finite() {
        return String::new();
    }
    let mut secs = time_s.floor();
    let mut micros = ((time_s - secs) * 1.0e6).round();
    if micros >= 1.0e6 {
        secs += 1.0;
        micros = 0.0;
    }
    // Any RFC 3339 time lies well within i64 seconds.
    let secs = secs as i64;
    let (days, rem) = (secs.div_euclid(86_400), secs.rem_euclid(86_400));
    let (y, m, d) = civil_from_days(days);
    let (hh, mm, ss) = (rem / 3600, (rem % 3600) / 60, rem % 60);
    let mut s = format!("{y:04}-{m:02}-{d:02}T{hh:02}:{mm:02}:{ss:02}");
    if micros > 0.0 {
        let f = format!("{:06}", micros as u32);
        s.push('.');
        s.push_str(f.trim_end_matches('0'));
    }
    s.push('Z');
    s
}

// ---------------------------------------------------------------------------------
// CSV

const EXPECTED: &str =
    "epoch, time, id (or point_id), x, y, z, sigma_x, sigma_y, sigma_z, temperature_c";
const NAMES: [&str; 10] = [
    "epoch",
    "time",
    "id",
    "x",
    "y",
    "z",
    "sigma_x",
    "sigma_y",
    "sigma_z",
    "temperature_c",
];
const EPOCH: usize = 0;
const TIME: usize = 1;
const ID: usize = 2;
const X: usize = 3;
const SX: usize = 6;
const TEMP: usize = 9;

/// An epoch being read: label, time (text and seconds), line of its first row, the
/// temperature as first given (and its line), and its points.
struct Building<const D: usize> {
    label: String,
    time_text: String,
    time_s: f64,
    first_line: u64,
    temperature: Option<f64>,
    points: Vec<EpochPoint<D>>,
    ids: HashMap<String, u64>,
}

fn parse_csv<R: Read>(reader: R, path: &str, unit: LengthUnit) -> Result<EpochSeries, InputError> {
    let (mut rdr, header) = source::open_csv(reader, path)?;
    let mut cols: [Option<usize>; 10] = [None; 10];
    for (i, name) in header.iter().cloned().enumerate() {
        let key = if name == "point_id" { "id" } else { &name };
        let Some(slot) = NAMES.iter().position(|n| *n == key) else {
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
    for slot in [EPOCH, TIME, ID, X, X + 1] {
        if cols[slot].is_none() {
            return Err(InputError::BadHeader {
                path: path.to_owned(),
                reason: format!("missing column `{}`; expected {EXPECTED}", NAMES[slot]),
            });
        }
    }
    let bad = |reason: &str| InputError::BadHeader {
        path: path.to_owned(),
        reason: reason.to_owned(),
    };
    let three = cols[X + 2].is_some();
    let sigma_given = [cols[SX], cols[SX + 1], cols[SX + 2]];
    let want_sigma = if three { 3 } else { 2 };
    let n_sigma = sigma_given.iter().flatten().count();
    if n_sigma != 0 && (n_sigma != want_sigma || (!three && sigma_given[2].is_some())) {
        return Err(bad(if three {
            "give sigma_x, sigma_y and sigma_z together, or none"
        } else {
            "give sigma_x and sigma_y together, or none (sigma_z needs a z column)"
        }));
    }
    let ctx = CsvContext {
        path,
        unit,
        cols,
        width: header.len(),
        sigma: n_sigma != 0,
    };
    if three {
        ctx.rows::<3, R>(&mut rdr).map(EpochSeries::Space)
    } else {
        ctx.rows::<2, R>(&mut rdr).map(EpochSeries::Plane)
    }
}

struct CsvContext<'a> {
    path: &'a str,
    unit: LengthUnit,
    cols: [Option<usize>; 10],
    width: usize,
    sigma: bool,
}

impl CsvContext<'_> {
    fn name_at(&self, c: usize) -> &'static str {
        self.cols
            .iter()
            .position(|&x| x == Some(c))
            .map_or("?", |slot| NAMES[slot])
    }

    fn field_error(&self, line: u64, c: usize, message: String) -> InputError {
        InputError::BadField {
            path: self.path.to_owned(),
            line,
            column: c + 1,
            name: self.name_at(c).to_owned(),
            message,
        }
    }

    fn rows<const D: usize, R: Read>(
        &self,
        rdr: &mut csv::Reader<R>,
    ) -> Result<Vec<Epoch<D>>, InputError> {
        let path = self.path;
        let mut rec = ByteRecord::new();
        let mut out: Vec<Building<D>> = Vec::new();
        let mut index: HashMap<String, usize> = HashMap::new();
        while rdr
            .read_byte_record(&mut rec)
            .map_err(|e| csv_error(path, &e))?
        {
            let line = rec.position().map(csv::Position::line).unwrap_or(0);
            if rec.len() != self.width {
                return Err(InputError::FieldCount {
                    path: path.to_owned(),
                    line,
                    expected: self.width,
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
                        self.name_at(c)
                    ),
                })
            };
            let number = |c: usize| -> Result<f64, InputError> {
                let s = text(c)?;
                finite_field(s, path, line, c + 1, self.name_at(c))
            };
            let col = |slot: usize| self.cols[slot].unwrap_or(0);
            let label = text(col(EPOCH))?;
            if label.is_empty() {
                return Err(self.field_error(line, col(EPOCH), "the epoch label is empty".into()));
            }
            let time_text = text(col(TIME))?;
            let time_s = parse_rfc3339(time_text).map_err(|reason| {
                self.field_error(
                    line,
                    col(TIME),
                    format!("`{}`: {reason}", excerpt(time_text)),
                )
            })?;
            let temperature = match self.cols[TEMP] {
                Some(c) if !text(c)?.is_empty() => Some(number(c)?),
                _ => None,
            };
            let id = text(col(ID))?;
            validate_id(id).map_err(|source| InputError::InvalidId {
                path: path.to_owned(),
                line,
                column: col(ID) + 1,
                source,
            })?;
            let mut x = [0.0; D];
            for (k, xk) in x.iter_mut().enumerate() {
                *xk = self.unit.to_metres(number(col(X + k))?);
            }
            let sigma = if self.sigma {
                let mut s = [0.0; D];
                for (k, sk) in s.iter_mut().enumerate() {
                    let c = col(SX + k);
                    let v = number(c)?;
                    if v <= 0.0 {
                        return Err(InputError::NonPositiveSigma {
                            path: path.to_owned(),
                            line,
                            column: c + 1,
                            name: self.name_at(c).to_owned(),
                            value: v,
                        });
                    }
                    *sk = self.unit.to_metres(v);
                }
                Some(s)
            } else {
                None
            };
            let ei = match index.get(label) {
                Some(&ei) => {
                    let e = &out[ei];
                    if e.time_s != time_s {
                        return Err(self.field_error(
                            line,
                            col(TIME),
                            format!(
                                "epoch `{label}` has time `{}` here but `{}` on line {}; one \
                                 epoch has one time",
                                excerpt(time_text),
                                e.time_text,
                                e.first_line
                            ),
                        ));
                    }
                    if e.temperature != temperature {
                        let show =
                            |t: Option<f64>| t.map_or_else(|| "none".into(), |v| v.to_string());
                        return Err(self.field_error(
                            line,
                            self.cols[TEMP].unwrap_or(0),
                            format!(
                                "epoch `{label}` has temperature {} °C here but {} °C on line {}; \
                                 one epoch has one temperature",
                                show(temperature),
                                show(e.temperature),
                                e.first_line
                            ),
                        ));
                    }
                    ei
                }
                None => {
                    out.push(Building {
                        label: label.to_owned(),
                        time_text: excerpt(time_text),
                        time_s,
                        first_line: line,
                        temperature,
                        points: Vec::new(),
                        ids: HashMap::new(),
                    });
                    index.insert(label.to_owned(), out.len() - 1);
                    out.len() - 1
                }
            };
            let e = &mut out[ei];
            if let Some(&first_line) = e.ids.get(id) {
                return Err(InputError::Duplicate {
                    path: path.to_owned(),
                    line,
                    first_line,
                    what: format!("point in epoch `{label}`"),
                    id: id.to_owned(),
                });
            }
            e.ids.insert(id.to_owned(), line);
            e.points.push(EpochPoint {
                id: id.to_owned(),
                x,
                sigma,
            });
        }
        if out.is_empty() {
            return Err(InputError::NoRows {
                path: path.to_owned(),
                what: "epochs",
            });
        }
        for w in out.windows(2) {
            if w[1].time_s <= w[0].time_s {
                let e = CoreError::EpochsOutOfOrder {
                    previous: w[0].label.clone(),
                    previous_time_s: w[0].time_s,
                    next: w[1].label.clone(),
                    next_time_s: w[1].time_s,
                };
                return Err(self.field_error(
                    w[1].first_line,
                    self.cols[TIME].unwrap_or(0),
                    format!(
                        "`{}` is not later than `{}` (line {}): {e}; the epochs are not sorted, \
                         list them in time order",
                        w[1].time_text, w[0].time_text, w[0].first_line
                    ),
                ));
            }
        }
        Ok(out
            .into_iter()
            .map(|b| Epoch {
                label: b.label,
                time_s: b.time_s,
                points: b.points,
                temperature_c: b.temperature,
            })
            .collect())
    }
}

// ---------------------------------------------------------------------------------
// JSON

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonPoint {
    id: JsonId,
    x: f64,
    y: f64,
    z: Option<f64>,
    sigma_x: Option<f64>,
    sigma_y: Option<f64>,
    sigma_z: Option<f64>,
}

#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct JsonEpoch {
    label: JsonId,
    time: String,
    temperature_c: Option<f64>,
    points: Vec<JsonPoint>,
}

/// Epochs of either dimension while the JSON list is read.
#[derive(Default)]
struct JsonOut {
    dim: Option<usize>,
    plane: Vec<Epoch<2>>,
    space: Vec<Epoch<3>>,
}

fn json_point<const D: usize>(
    p: &JsonPoint,
    unit: LengthUnit,
    at: &str,
) -> Result<EpochPoint<D>, String> {
    let coords = [Some(p.x), Some(p.y), p.z];
    let sig = [p.sigma_x, p.sigma_y, p.sigma_z];
    let names = ["x", "y", "z"];
    let mut x = [0.0; D];
    for k in 0..D {
        let v = coords[k].ok_or_else(|| format!("{at}: missing `{}`", names[k]))?;
        if !v.is_finite() {
            return Err(format!("{at}.{} is not a finite number", names[k]));
        }
        x[k] = unit.to_metres(v);
    }
    let n_sig = sig[..D].iter().flatten().count();
    if D == 2 && p.sigma_z.is_some() {
        return Err(format!("{at}: sigma_z needs z"));
    }
    let sigma = if n_sig == 0 {
        None
    } else if n_sig < D {
        return Err(format!(
            "{at}: give all of sigma_x, sigma_y{} or none",
            if D == 3 { ", sigma_z" } else { "" }
        ));
    } else {
        let mut s = [0.0; D];
        for k in 0..D {
            let v = sig[k].unwrap_or(f64::NAN);
            if !(v.is_finite() && v > 0.0) {
                return Err(format!(
                    "{at}.sigma_{}: standard deviation must be positive, got {v}",
                    names[k]
                ));
            }
            s[k] = unit.to_metres(v);
        }
        Some(s)
    };
    Ok(EpochPoint {
        id: p.id.0.clone(),
        x,
        sigma,
    })
}

fn json_epoch<const D: usize>(
    i: usize,
    e: &JsonEpoch,
    time_s: f64,
    unit: LengthUnit,
) -> Result<Epoch<D>, String> {
    let mut seen: HashMap<&str, usize> = HashMap::with_capacity(e.points.len());
    let mut points = Vec::with_capacity(e.points.len());
    for (k, p) in e.points.iter().enumerate() {
        let at = format!("epochs[{i}].points[{k}]");
        validate_id(&p.id.0).map_err(|err| format!("{at}: {err}"))?;
        if let Some(first) = seen.insert(p.id.0.as_str(), k) {
            return Err(format!(
                "{at}: point `{}` appears twice in epoch `{}` (first at points[{first}])",
                p.id.0, e.label.0
            ));
        }
        points.push(json_point::<D>(p, unit, &at)?);
    }
    Ok(Epoch {
        label: e.label.0.clone(),
        time_s,
        points,
        temperature_c: e.temperature_c,
    })
}

fn parse_json(bytes: &[u8], path: &str, unit: LengthUnit) -> Result<EpochSeries, InputError> {
    let mut out = JsonOut::default();
    let mut labels: HashMap<String, usize> = HashMap::new();
    let mut previous: Option<(String, String, f64)> = None;
    let seq = CheckedSeq::new(|i, e: JsonEpoch| {
        if e.label.0.is_empty() {
            return Err(format!("epochs[{i}].label is empty"));
        }
        if let Some(first) = labels.insert(e.label.0.clone(), i) {
            return Err(format!(
                "epochs[{i}]: duplicate epoch label `{}` (first at epochs[{first}])",
                e.label.0
            ));
        }
        let time_s = parse_rfc3339(&e.time)
            .map_err(|r| format!("epochs[{i}].time `{}`: {r}", excerpt(&e.time)))?;
        if let Some(t) = e.temperature_c
            && !t.is_finite()
        {
            return Err(format!("epochs[{i}].temperature_c is not a finite number"));
        }
        if let Some((plabel, ptext, pt)) = &previous
            && time_s <= *pt
        {
            let err = CoreError::EpochsOutOfOrder {
                previous: plabel.clone(),
                previous_time_s: *pt,
                next: e.label.0.clone(),
                next_time_s: time_s,
            };
            return Err(format!(
                "epochs[{i}].time `{}` is not later than `{ptext}`: {err}; the epochs are \
                 not sorted, list them in time order",
                e.time
            ));
        }
        if e.points.is_empty() {
            return Err(format!("epochs[{i}] (`{}`) has no points", e.label.0));
        }
        let dim = if e.points[0].z.is_some() { 3 } else { 2 };
        if e.points.iter().any(|p| p.z.is_some() != (dim == 3)) {
            return Err(format!(
                "epochs[{i}]: some points have `z` and some do not; one network has one dimension"
            ));
        }
        match out.dim {
            Some(d) if d != dim => {
                return Err(format!(
                    "epochs[{i}] is {dim}D but the epochs before it are {d}D"
                ));
            }
            _ => out.dim = Some(dim),
        }
        if dim == 3 {
            out.space.push(json_epoch::<3>(i, &e, time_s, unit)?);
        } else {
            out.plane.push(json_epoch::<2>(i, &e, time_s, unit)?);
        }
        previous = Some((e.label.0, e.time, time_s));
        Ok(())
    });
    let n = parse_document(bytes, path, "epochs", Some(unit), seq)?;
    if n == 0 {
        return Err(InputError::NoRows {
            path: path.to_owned(),
            what: "epochs",
        });
    }
    Ok(match out.dim {
        Some(3) => EpochSeries::Space(out.space),
        _ => EpochSeries::Plane(out.plane),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn csv(text: &str) -> Result<EpochSeries, InputError> {
        parse_csv(text.as_bytes(), "e.csv", LengthUnit::Millimetre)
    }

    #[test]
    fn rfc3339_against_known_unix_times() {
        // Source: POSIX Unix time; 1e9 s was 2001-09-09T01:46:40Z and 946684800 s was
        // 2000-01-01T00:00:00Z (widely published instants, common practice).
        assert_eq!(parse_rfc3339("2001-09-09T01:46:40Z"), Ok(1.0e9));
        assert_eq!(parse_rfc3339("2000-01-01T00:00:00Z"), Ok(946_684_800.0));
        assert_eq!(parse_rfc3339("1970-01-01T00:00:00Z"), Ok(0.0));
        // RFC 3339 §4.2/§5.8: a numeric offset is local time minus UTC.
        assert_eq!(parse_rfc3339("2001-09-09T03:46:40+02:00"), Ok(1.0e9));
        assert_eq!(parse_rfc3339("2001-09-08t20:16:40-05:30"), Ok(1.0e9));
        assert_eq!(parse_rfc3339("2000-01-01T00:00:00.25Z"), Ok(946_684_800.25));
        // Gregorian leap years: 2000 is one, 1900 and 2023 are not.
        assert!(parse_rfc3339("2000-02-29T00:00:00Z").is_ok());
        assert!(parse_rfc3339("2024-02-29T00:00:00Z").is_ok());
        let e = parse_rfc3339("2023-02-29T00:00:00Z").expect_err("not a leap year");
        assert!(e.contains("day 29"), "{e}");
        assert!(parse_rfc3339("1900-02-29T00:00:00Z").is_err());
        assert!(
            parse_rfc3339("2026-13-01T00:00:00Z")
                .expect_err("month")
                .contains("month 13")
        );
        assert!(parse_rfc3339("2026-03-01T24:00:00Z").is_err());
        assert!(
            parse_rfc3339("2026-03-01T10:00:60Z")
                .expect_err("leap")
                .contains("leap")
        );
        assert!(
            parse_rfc3339("2026-03-01T10:00:00")
                .expect_err("zone")
                .contains("offset")
        );
        assert!(parse_rfc3339("2026-03-01").is_err());
        assert!(parse_rfc3339("01/03/2026 10:00").is_err());
    }

    #[test]
    fn rfc3339_round_trips() {
        for t in [
            0.0,
            1.0e9,
            946_684_800.0,
            1_772_359_200.0,
            -86_400.0,
            1.0e9 + 0.5,
        ] {
            let s = format_rfc3339(t);
            assert_eq!(parse_rfc3339(&s), Ok(t), "{s}");
        }
        assert_eq!(format_rfc3339(1.0e9), "2001-09-09T01:46:40Z");
        assert_eq!(format_rfc3339(1.0e9 + 0.5), "2001-09-09T01:46:40.5Z");
        // Every day of four centuries maps back to itself.
        for z in -80_000..80_000 {
            let (y, m, d) = civil_from_days(z);
            assert_eq!(days_from_civil(y, m, d), z);
        }
    }

    #[test]
    fn csv_reads_epochs_in_metres() {
        let s = csv("epoch,time,id,x,y,sigma_x,sigma_y,temperature_c\n\
                     S0,2026-03-01T10:00:00Z,A,0,0,0.5,0.5,10\n\
                     S1,2026-09-01T10:00:00Z,A,1,2,0.5,0.5,\n\
                     S0,2026-03-01T10:00:00Z,B,1000,0,0.5,0.5,10\n")
        .expect("reads");
        let EpochSeries::Plane(e) = s else {
            panic!("2D")
        };
        assert_eq!(e.len(), 2);
        assert_eq!(e[0].points.len(), 2);
        assert_eq!(e[0].points[1].x, [1.0, 0.0]);
        assert_eq!(e[0].points[1].sigma, Some([0.0005, 0.0005]));
        assert_eq!(e[0].temperature_c, Some(10.0));
        assert_eq!(e[1].temperature_c, None);
    }

    #[test]
    fn csv_errors_name_line_and_column() {
        let h = "epoch,time,id,x,y,temperature_c\n";
        let e = csv(&format!(
            "{h}S0,2026-03-01T10:00:00Z,A,0,0,10\nS0,2026-03-01T10:00:00Z,B,1,0,11\n"
        ))
        .expect_err("temperature");
        assert!(
            e.to_string()
                .starts_with("e.csv:3:6 (column temperature_c): epoch `S0` has temperature 11"),
            "{e}"
        );
        let e = csv(&format!("{h}S0,2026-02-30T10:00:00Z,A,0,0,10\n")).expect_err("time");
        assert!(e.to_string().starts_with("e.csv:2:2 (column time):"), "{e}");
        let e = csv(&format!(
            "{h}S1,2026-09-01T10:00:00Z,A,0,0,10\nS0,2026-03-01T10:00:00Z,A,0,0,10\n"
        ))
        .expect_err("order");
        assert!(e.to_string().starts_with("e.csv:3:2 (column time):"), "{e}");
        assert!(e.to_string().contains("not sorted"), "{e}");
        let e = csv(&format!("{h}S0,2026-03-01T10:00:00Z,A,NaN,0,10\n")).expect_err("nan");
        assert!(e.to_string().starts_with("e.csv:2:4 (column x):"), "{e}");
        let e = csv(&format!(
            "{h}S0,2026-03-01T10:00:00Z,A,0,0,10\nS0,2026-03-01T10:00:00Z,A,1,0,10\n"
        ))
        .expect_err("dup");
        assert!(e.to_string().starts_with("e.csv:3: duplicate point"), "{e}");
        let e = csv("epoch,time,id,x,y,sigma_x\n").expect_err("sigma");
        assert!(
            e.to_string().contains("sigma_x and sigma_y together"),
            "{e}"
        );
    }

    #[test]
    fn json_reads_and_checks() {
        let ok = br#"{"length_unit": "mm", "epochs": [
            {"label": "S0", "time": "2026-03-01T10:00:00Z", "temperature_c": 8,
             "points": [{"id": "A", "x": 0, "y": 0, "z": 0}, {"id": "B", "x": 1000, "y": 0, "z": 5}]},
            {"label": "S1", "time": "2026-03-02T11:00:00+01:00",
             "points": [{"id": "A", "x": 0, "y": 1, "z": 0}]}]}"#;
        let s = parse_json(ok, "e.json", LengthUnit::Millimetre).expect("reads");
        let EpochSeries::Space(e) = s else {
            panic!("3D")
        };
        assert_eq!(e[0].points[1].x, [1.0, 0.0, 0.005]);
        assert_eq!(e[1].time_s - e[0].time_s, 86_400.0);
        let bad = br#"{"epochs": [
            {"label": "S0", "time": "2026-03-05T10:00:00Z", "points": [{"id": "A", "x": 0, "y": 0}]},
            {"label": "S1", "time": "2026-03-01T10:00:00Z", "points": [{"id": "A", "x": 0, "y": 0}]}]}"#;
        let e = parse_json(bad, "e.json", LengthUnit::Metre).expect_err("order");
        assert!(e.to_string().starts_with("e.json:3:"), "{e}");
        assert!(e.to_string().contains("not sorted"), "{e}");
    }
}
