//! Shared pieces for the JSON inputs: identifiers that may be numbers, a checked
//! list that reports problems at the parser's position, and the top-level object.

use std::fmt;
use std::marker::PhantomData;

use serde::Deserialize;
use serde::de::{self, DeserializeSeed, Deserializer, MapAccess, SeqAccess, Visitor};

use super::error::InputError;
use crate::units::LengthUnit;

/// An identifier written as a JSON string or an integer (`gen_field.py` writes numbers).
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct JsonId(pub(crate) String);

impl<'de> Deserialize<'de> for JsonId {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = JsonId;
            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("an identifier (a string or an integer)")
            }
            fn visit_str<E: de::Error>(self, v: &str) -> Result<JsonId, E> {
                Ok(JsonId(v.to_owned()))
            }
            fn visit_string<E: de::Error>(self, v: String) -> Result<JsonId, E> {
                Ok(JsonId(v))
            }
            fn visit_u64<E: de::Error>(self, v: u64) -> Result<JsonId, E> {
                Ok(JsonId(v.to_string()))
            }
            fn visit_i64<E: de::Error>(self, v: i64) -> Result<JsonId, E> {
                Ok(JsonId(v.to_string()))
            }
        }
        d.deserialize_any(V)
    }
}

/// A JSON array of `T` where each element is handed to `check` as it is read; a
/// problem returned by `check` becomes a parser error at the current position.
pub(crate) struct CheckedSeq<T, F> {
    check: F,
    item: PhantomData<fn() -> T>,
}

impl<T, F> CheckedSeq<T, F> {
    pub(crate) fn new(check: F) -> Self {
        Self {
            check,
            item: PhantomData,
        }
    }
}

impl<'de, T, F> DeserializeSeed<'de> for CheckedSeq<T, F>
where
    T: Deserialize<'de>,
    F: FnMut(usize, T) -> Result<(), String>,
{
    /// Number of elements read.
    type Value = usize;

    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<usize, D::Error> {
        d.deserialize_seq(self)
    }
}

impl<'de, T, F> Visitor<'de> for CheckedSeq<T, F>
where
    T: Deserialize<'de>,
    F: FnMut(usize, T) -> Result<(), String>,
{
    type Value = usize;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        f.write_str("an array")
    }

    fn visit_seq<A: SeqAccess<'de>>(mut self, mut seq: A) -> Result<usize, A::Error> {
        let mut n = 0;
        while let Some(item) = seq.next_element::<T>()? {
            (self.check)(n, item).map_err(de::Error::custom)?;
            n += 1;
        }
        Ok(n)
    }
}

/// The top-level object `{"length_unit"?: "m"|"mm", "<list_key>": [...]}`.
///
/// `unit` is the unit given on the command line; when `Some`, a `length_unit` member
/// is accepted and must agree with it (`mismatch` then records the declared text).
/// Without `unit`, a `length_unit` member is an unknown field.
pub(crate) struct Document<'a, S> {
    pub(crate) list_key: &'static str,
    pub(crate) unit: Option<LengthUnit>,
    pub(crate) mismatch: &'a mut Option<String>,
    pub(crate) list: S,
}

impl<'de, S> DeserializeSeed<'de> for Document<'_, S>
where
    S: DeserializeSeed<'de, Value = usize>,
{
    /// Number of list elements read.
    type Value = usize;

    fn deserialize<D: Deserializer<'de>>(self, d: D) -> Result<usize, D::Error> {
        d.deserialize_map(self)
    }
}

impl<'de, S> Visitor<'de> for Document<'_, S>
where
    S: DeserializeSeed<'de, Value = usize>,
{
    type Value = usize;

    fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
        write!(f, "an object with a `{}` array", self.list_key)
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<usize, A::Error> {
        let Document {
            list_key,
            unit,
            mismatch,
            list,
        } = self;
        let mut list = Some(list);
        let mut count = None;
        let mut unit_seen = false;
        while let Some(key) = map.next_key::<String>()? {
            if key == list_key {
                let seed = list
                    .take()
                    .ok_or_else(|| de::Error::duplicate_field(list_key))?;
                count = Some(map.next_value_seed(seed)?);
            } else if key == "length_unit"
                && let Some(flag) = unit
            {
                if unit_seen {
                    return Err(de::Error::duplicate_field("length_unit"));
                }
                unit_seen = true;
                let text: String = map.next_value()?;
                match LengthUnit::from_label(&text) {
                    None => {
                        return Err(de::Error::custom(format!(
                            "length_unit must be `m` or `mm`, got `{text}`"
                        )));
                    }
                    Some(declared) if declared != flag => {
                        *mismatch = Some(text);
                        return Err(de::Error::custom(
                            "length_unit disagrees with --length-unit",
                        ));
                    }
                    Some(_) => {}
                }
            } else {
                let expected = if unit.is_some() {
                    format!("`length_unit` or `{list_key}`")
                } else {
                    format!("`{list_key}`")
                };
                return Err(de::Error::custom(format!(
                    "unknown member `{key}`, expected {expected}"
                )));
            }
        }
        count.ok_or_else(|| de::Error::missing_field(list_key))
    }
}

/// Parse `bytes` as a [`Document`]; a declared unit that disagrees with the flag
/// becomes [`InputError::UnitMismatch`], anything else [`InputError::Json`].
pub(crate) fn parse_document<S>(
    bytes: &[u8],
    path: &str,
    list_key: &'static str,
    unit: Option<LengthUnit>,
    list: S,
) -> Result<usize, InputError>
where
    S: for<'de> DeserializeSeed<'de, Value = usize>,
{
    let mut mismatch = None;
    let mut de = serde_json::Deserializer::from_slice(bytes);
    let doc = Document {
        list_key,
        unit,
        mismatch: &mut mismatch,
        list,
    };
    let result = doc.deserialize(&mut de).and_then(|n| de.end().map(|()| n));
    match result {
        Ok(n) => Ok(n),
        Err(e) => Err(match (mismatch, unit) {
            (Some(declared), Some(flag)) => InputError::UnitMismatch {
                path: path.to_owned(),
                line: e.line(),
                column: e.column().max(1),
                declared,
                flag: flag.label(),
            },
            _ => InputError::Json {
                path: path.to_owned(),
                line: e.line(),
                column: e.column().max(1),
                message: strip_position(&e),
            },
        }),
    }
}

/// serde_json's message without its trailing " at line L column C" (we print our own).
fn strip_position(e: &serde_json::Error) -> String {
    let s = e.to_string();
    match s.rfind(" at line ") {
        Some(i) => s[..i].to_owned(),
        None => s,
    }
}
