//! The JSON body of a sensor batch, parsed as a stream:
//! `{"length_unit": "mm"?, "readings": [{"point_id", "epoch", "u", "sigma"?}, …]}`.
//!
//! The `readings` array is walked element by element (a serde visitor), so the body is
//! never held whole. `length_unit` should come before `readings`; when it comes after,
//! it must name the unit the readings were already read in.

use std::fmt;
use std::io::Read;

use serde::Deserialize;
use serde::de::{self, DeserializeSeed, IgnoredAny, MapAccess, SeqAccess, Visitor};
use serde_json::error::Category;

use super::body::BodyReader;
use super::validate::{Field, Locate, RawReading, Validator};
use super::{Context, IngestError, Outcome, Sink};
use crate::api::extract::pointer_of;
use crate::api::problem::FieldError;
use crate::units::LengthUnit;

/// One element of `readings` as sent.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct ReadingIn {
    point_id: String,
    epoch: String,
    u: Vec<f64>,
    #[serde(default)]
    sigma: Option<Vec<f64>>,
}

/// Pointers of a JSON batch: `/readings/<index>/<field>`.
struct JsonPlaces;

impl Locate for JsonPlaces {
    fn at(&self, row: u64, field: Field) -> String {
        match field {
            Field::Row => format!("/readings/{row}"),
            Field::PointId => format!("/readings/{row}/point_id"),
            Field::Epoch => format!("/readings/{row}/epoch"),
            Field::U => format!("/readings/{row}/u"),
            Field::Ui(i) => format!("/readings/{row}/u/{i}"),
            Field::Sigma => format!("/readings/{row}/sigma"),
            Field::SigmaI(i) => format!("/readings/{row}/sigma/{i}"),
        }
    }
}

/// Where the parser is, and what it found.
struct State<'v> {
    v: Validator<'v>,
    /// Pointer of what is being read, for a type error serde reports.
    pointer: String,
    /// Whether `readings` has been read.
    readings_seen: bool,
    /// An error that is not serde's (limit, stopped writer), to report as it is.
    stop: Option<IngestError>,
}

/// Parse a JSON batch from `reader` (counted and hashed), sending readings into `sink`.
pub fn parse<R: Read>(
    reader: &mut BodyReader<R>,
    ctx: Context,
    sink: Sink,
) -> Result<Outcome, IngestError> {
    let places = JsonPlaces;
    let mut st = State {
        v: Validator::new(ctx, &places, sink),
        pointer: String::new(),
        readings_seen: false,
        stop: None,
    };
    let buffered = std::io::BufReader::with_capacity(1 << 16, &mut *reader);
    let mut de = serde_json::Deserializer::from_reader(buffered);
    let parsed = Top { st: &mut st }
        .deserialize(&mut de)
        .and_then(|()| de.end());
    drop(de);
    if let Some(stop) = st.stop.take() {
        return Err(stop);
    }
    if let Err(e) = parsed {
        return Err(serde_error(&e, reader, st));
    }
    if !st.readings_seen {
        return Err(IngestError::Invalid(vec![FieldError::new(
            "/readings",
            "the field readings is missing",
        )]));
    }
    let readings = st.v.finish("/readings")?;
    let (body_sha256, bytes) = reader
        .finish()
        .map_err(|e| IngestError::Read(e.to_string()))?;
    Ok(Outcome {
        readings,
        body_sha256,
        bytes,
    })
}

/// The error for what serde_json reported.
fn serde_error<R: Read>(
    e: &serde_json::Error,
    reader: &BodyReader<R>,
    st: State<'_>,
) -> IngestError {
    match e.classify() {
        Category::Io if reader.over_limit() => too_large(reader),
        Category::Io => IngestError::Read(e.to_string()),
        Category::Syntax | Category::Eof => IngestError::Malformed(format!(
            "the body is not valid JSON: {e} (JSON has no NaN or Infinity; send finite numbers)"
        )),
        Category::Data => {
            let msg = e.to_string();
            let msg = msg
                .rsplit_once(" at line ")
                .map_or(msg.as_str(), |(m, _)| m)
                .to_owned();
            let pointer = if st.pointer.is_empty() {
                "/".to_owned()
            } else {
                st.pointer
            };
            let mut errors = st.v.into_errors();
            errors.push(FieldError::new(pointer, msg));
            IngestError::Invalid(errors)
        }
    }
}

/// The 413 for a body over `KINEMA_MAX_BATCH_BYTES`.
pub fn too_large<R>(reader: &BodyReader<R>) -> IngestError {
    IngestError::TooLarge(format!(
        "the batch body is over the size limit after {} bytes (KINEMA_MAX_BATCH_BYTES); split it",
        reader.read_so_far()
    ))
}

/// The top-level object.
struct Top<'a, 'v> {
    st: &'a mut State<'v>,
}

impl<'de> DeserializeSeed<'de> for Top<'_, '_> {
    type Value = ();
    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de> Visitor<'de> for Top<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an object with readings")
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
        while let Some(key) = map.next_key::<String>()? {
            match key.as_str() {
                "length_unit" => {
                    self.st.pointer = "/length_unit".into();
                    let unit: LengthUnit = map.next_value()?;
                    let ctx = self.st.v.ctx();
                    let (current, from_query) = (ctx.unit, ctx.unit_from_query);
                    if unit != current && (from_query || self.st.readings_seen) {
                        let why = if from_query {
                            format!(
                                "length_unit {} contradicts ?length_unit={}",
                                unit.label(),
                                current.label()
                            )
                        } else {
                            format!(
                                "length_unit {} comes after the readings, which were read in {}; \
                                 put length_unit before readings (the body is streamed) or use \
                                 ?length_unit=",
                                unit.label(),
                                current.label()
                            )
                        };
                        self.st.v.bad("/length_unit".into(), why);
                    } else {
                        self.st.v.set_unit(unit);
                    }
                }
                "readings" => {
                    if self.st.readings_seen {
                        return Err(de::Error::duplicate_field("readings"));
                    }
                    self.st.readings_seen = true;
                    self.st.pointer = "/readings".into();
                    map.next_value_seed(Readings { st: &mut *self.st })?;
                }
                other => {
                    self.st.pointer = format!("/{}", other.replace('~', "~0").replace('/', "~1"));
                    map.next_value::<IgnoredAny>()?;
                    return Err(de::Error::unknown_field(
                        other,
                        &["length_unit", "readings"],
                    ));
                }
            }
        }
        self.st.pointer.clear();
        Ok(())
    }
}

/// The `readings` array.
struct Readings<'a, 'v> {
    st: &'a mut State<'v>,
}

impl<'de> DeserializeSeed<'de> for Readings<'_, '_> {
    type Value = ();
    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> Result<(), D::Error> {
        d.deserialize_seq(self)
    }
}

impl<'de> Visitor<'de> for Readings<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an array of readings")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut seq: A) -> Result<(), A::Error> {
        let mut i: u64 = 0;
        loop {
            self.st.pointer = format!("/readings/{i}");
            let Some(r) = seq.next_element_seed(Element {
                index: i,
                pointer: &mut self.st.pointer,
            })?
            else {
                break;
            };
            let counted = self.st.v.count_one().and_then(|()| {
                self.st.v.reading(
                    i,
                    RawReading {
                        point_id: &r.point_id,
                        epoch: &r.epoch,
                        u: &r.u,
                        sigma: r.sigma.as_deref(),
                    },
                )
            });
            if let Err(e) = counted {
                self.st.stop = Some(e);
                return Err(de::Error::custom("stopped"));
            }
            if self.st.v.full() {
                self.st.stop = Some(IngestError::Invalid(self.st.v.take_errors()));
                return Err(de::Error::custom("stopped"));
            }
            i += 1;
        }
        Ok(())
    }
}

/// One element of `readings`; on a type error, the pointer names the field.
struct Element<'p> {
    index: u64,
    pointer: &'p mut String,
}

impl<'de> DeserializeSeed<'de> for Element<'_> {
    type Value = ReadingIn;
    fn deserialize<D: de::Deserializer<'de>>(self, d: D) -> Result<ReadingIn, D::Error> {
        let mut track = serde_path_to_error::Track::new();
        let r = ReadingIn::deserialize(serde_path_to_error::Deserializer::new(d, &mut track));
        if r.is_err() {
            *self.pointer = format!("/readings/{}{}", self.index, pointer_of(&track.path()));
        }
        r
    }
}
