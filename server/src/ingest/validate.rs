//! Checks on one reading, shared by the JSON and CSV parsers: known point, RFC 3339
//! epoch with at most microsecond digits, one finite displacement component per
//! dimension, positive finite standard deviations, and no second reading of a point
//! at an epoch within the batch.

use std::collections::HashMap;

use time::format_description::well_known::Rfc3339;
use time::{OffsetDateTime, UtcOffset};

use super::{Context, IngestError, MAX_FIELD_ERRORS, Sink};
use crate::api::problem::FieldError;
use crate::model::{id_problem, to_unix_micros};
use crate::store::NewReading;
use crate::units::LengthUnit;

/// A part of a reading, for its pointer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Field {
    /// The reading as a whole.
    Row,
    /// Its point ID.
    PointId,
    /// Its epoch.
    Epoch,
    /// The displacement as a whole (wrong number of components).
    U,
    /// Displacement component `i` (0 = x).
    Ui(usize),
    /// The standard deviations as a whole.
    Sigma,
    /// Standard deviation `i` (0 = x).
    SigmaI(usize),
}

/// How a body format names the place of a reading's field: `row` is the index of the
/// reading (JSON) or its 1-based line (CSV).
pub trait Locate {
    /// The JSON pointer of `field` of reading `row`.
    fn at(&self, row: u64, field: Field) -> String;
}

/// A reading as parsed, before checks; values in the request's length unit.
#[derive(Debug, Clone, Copy)]
pub struct RawReading<'a> {
    /// Point ID as sent.
    pub point_id: &'a str,
    /// Epoch text as sent.
    pub epoch: &'a str,
    /// Displacement components as sent.
    pub u: &'a [f64],
    /// Standard deviations as sent, if any.
    pub sigma: Option<&'a [f64]>,
}

/// Parse an RFC 3339 time with any offset into UTC; more than six fractional digits
/// that are not zero are refused (both databases keep microseconds).
pub fn parse_epoch(text: &str) -> Result<OffsetDateTime, String> {
    let t = OffsetDateTime::parse(text, &Rfc3339).map_err(|e| {
        format!("{text:?} is not an RFC 3339 time such as 2026-11-30T06:00:00Z ({e})")
    })?;
    if t.nanosecond() % 1000 != 0 {
        return Err(format!(
            "{text:?} has sub-microsecond digits; epochs are kept to the microsecond"
        ));
    }
    Ok(t.to_offset(UtcOffset::UTC))
}

/// Checks readings one by one, remembers bad fields, and sends good readings on while
/// no reading was bad.
pub struct Validator<'l> {
    ctx: Context,
    locate: &'l dyn Locate,
    seen: HashMap<(i64, i64), u64>,
    errors: Vec<FieldError>,
    count: u64,
    sink: Sink,
}

impl<'l> Validator<'l> {
    /// A validator for `ctx`, naming places with `locate`, sending into `sink`.
    pub fn new(ctx: Context, locate: &'l dyn Locate, sink: Sink) -> Self {
        Self {
            ctx,
            locate,
            seen: HashMap::new(),
            errors: Vec::new(),
            count: 0,
            sink,
        }
    }

    /// The context.
    pub fn ctx(&self) -> &Context {
        &self.ctx
    }

    /// Read the values from now on in `unit`.
    pub fn set_unit(&mut self, unit: LengthUnit) {
        self.ctx.unit = unit;
    }

    /// Take the bad fields found so far.
    pub fn take_errors(&mut self) -> Vec<FieldError> {
        std::mem::take(&mut self.errors)
    }

    /// Record a bad field found by the parser itself.
    pub fn bad(&mut self, pointer: String, detail: impl Into<String>) {
        if self.errors.len() < MAX_FIELD_ERRORS {
            self.errors.push(FieldError::new(pointer, detail));
        }
    }

    /// Whether so many fields were bad that parsing should stop.
    pub fn full(&self) -> bool {
        self.errors.len() >= MAX_FIELD_ERRORS
    }

    /// Count a reading against the limit; [`IngestError::TooLarge`] once over it.
    pub fn count_one(&mut self) -> Result<(), IngestError> {
        self.count += 1;
        if self.count > self.ctx.max_readings as u64 {
            return Err(IngestError::TooLarge(format!(
                "the batch has more than {} readings, the limit per batch \
                 (KINEMA_MAX_BATCH_READINGS); split it",
                self.ctx.max_readings
            )));
        }
        Ok(())
    }

    /// Check reading `row` (already counted with [`Self::count_one`]) and send it on.
    pub fn reading(&mut self, row: u64, raw: RawReading<'_>) -> Result<(), IngestError> {
        let locate = self.locate;
        let at = |f| locate.at(row, f);
        let dim = usize::from(self.ctx.dimension);
        let point_key = match self.ctx.points.get(raw.point_id) {
            Some(&k) => Some(k),
            None => {
                let why = id_problem(raw.point_id).unwrap_or_else(|| {
                    format!(
                        "the structure has no point {}; PUT it to /points first",
                        raw.point_id
                    )
                });
                self.bad(at(Field::PointId), why);
                None
            }
        };
        let epoch = match parse_epoch(raw.epoch) {
            Ok(t) => Some(t),
            Err(e) => {
                self.bad(at(Field::Epoch), e);
                None
            }
        };
        let mut u = [0.0; 3];
        if raw.u.len() != dim {
            self.bad(
                at(Field::U),
                format!(
                    "the structure is {dim}D: give {dim} displacement components, not {}",
                    raw.u.len()
                ),
            );
        } else {
            for (i, &v) in raw.u.iter().enumerate() {
                if v.is_finite() {
                    u[i] = self.ctx.unit.to_metres(v);
                } else {
                    self.bad(at(Field::Ui(i)), format!("{v} is not a finite number"));
                }
            }
        }
        let mut sigma = None;
        if let Some(sg) = raw.sigma {
            if sg.len() != dim {
                self.bad(
                    at(Field::Sigma),
                    format!("give {dim} standard deviations, not {}", sg.len()),
                );
            } else {
                let mut s = [0.0; 3];
                for (i, &v) in sg.iter().enumerate() {
                    if v.is_finite() && v > 0.0 {
                        s[i] = self.ctx.unit.to_metres(v);
                    } else {
                        self.bad(
                            at(Field::SigmaI(i)),
                            format!("{v}: a standard deviation must be a positive finite number"),
                        );
                    }
                }
                sigma = Some(s);
            }
        }
        if let (Some(point_key), Some(epoch)) = (point_key, epoch) {
            if let Some(first) = self.seen.insert((point_key, to_unix_micros(epoch)), row) {
                self.bad(
                    at(Field::Row),
                    format!(
                        "point {} at epoch {} is already in this batch at {}",
                        raw.point_id,
                        raw.epoch,
                        locate.at(first, Field::Row)
                    ),
                );
            }
            if self.errors.is_empty() {
                self.sink.push(NewReading {
                    point_key,
                    epoch,
                    u,
                    sigma,
                })?;
            }
        }
        Ok(())
    }

    /// After the last reading: every bad field, or an empty batch, is an error;
    /// otherwise the last chunk is sent and the count returned.
    pub fn finish(mut self, empty_pointer: &str) -> Result<u64, IngestError> {
        if !self.errors.is_empty() {
            return Err(IngestError::Invalid(self.errors));
        }
        if self.count == 0 {
            return Err(IngestError::Invalid(vec![FieldError::new(
                empty_pointer,
                "the batch has no readings; send at least one",
            )]));
        }
        self.sink.flush()?;
        Ok(self.count)
    }

    /// The bad fields so far (for a parser that stops early).
    pub fn into_errors(self) -> Vec<FieldError> {
        self.errors
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn epochs_any_offset_to_utc_and_microseconds_only() {
        // RFC 3339 §5.8 example: 1996-12-19T16:39:57-08:00 is 1996-12-20T00:39:57Z.
        let t = parse_epoch("1996-12-19T16:39:57-08:00").expect("valid");
        assert_eq!(t, parse_epoch("1996-12-20T00:39:57Z").expect("valid"));
        assert_eq!(t.offset(), UtcOffset::UTC);
        assert!(parse_epoch("2026-11-30T06:00:00.123456Z").is_ok());
        assert!(parse_epoch("2026-11-30T06:00:00.123456000Z").is_ok());
        assert!(parse_epoch("2026-11-30T06:00:00.1234567Z").is_err());
        assert!(parse_epoch("2026-11-30 06:00").is_err());
        assert!(parse_epoch("2026-13-30T06:00:00Z").is_err());
    }
}
