//! The typed error of the input layer: every message starts with `file:line:column`
//! (or `file:line` / `file` where no finer position exists).

use std::io;

use kinema_core::CoreError;
use thiserror::Error;

/// Everything that can be wrong with a points, elements or groups file.
///
/// `line` is 1-based and counts physical lines of the file; `column` is the 1-based
/// field number for CSV and the 1-based character column reported by the JSON
/// parser for JSON. For JSON errors found after a value was read (a duplicate ID,
/// a point of the wrong dimension) the position is just past that value.
#[derive(Debug, Error)]
pub enum InputError {
    /// The file could not be opened or read.
    #[error("{path}: cannot read: {source}")]
    Io {
        /// File as given by the user.
        path: String,
        /// Underlying error.
        #[source]
        source: io::Error,
    },
    /// The file holds no bytes (or only white space).
    #[error("{path}: the file is empty")]
    Empty {
        /// File as given by the user.
        path: String,
    },
    /// The file has a header but no data rows (or an empty list).
    #[error("{path}: no {what} after the header")]
    NoRows {
        /// File as given by the user.
        path: String,
        /// What was expected: `points`, `elements`, `groups`.
        what: &'static str,
    },
    /// The CSV reader itself failed (bad UTF-8, broken quoting).
    #[error("{path}:{line}: {message}")]
    Csv {
        /// File as given by the user.
        path: String,
        /// Line of the record.
        line: u64,
        /// The reader's message.
        message: String,
    },
    /// A header names a column this file kind does not know.
    #[error("{path}:1:{column}: unknown column `{name}`; expected {expected}")]
    UnknownColumn {
        /// File as given by the user.
        path: String,
        /// Field number in the header.
        column: usize,
        /// Name found.
        name: String,
        /// The accepted names.
        expected: &'static str,
    },
    /// A header names one column twice.
    #[error("{path}:1:{column}: column `{name}` appears twice")]
    DuplicateColumn {
        /// File as given by the user.
        path: String,
        /// Field number of the second occurrence.
        column: usize,
        /// Column name.
        name: String,
    },
    /// The set of header columns is incomplete or mixes two forms.
    #[error("{path}:1: {reason}")]
    BadHeader {
        /// File as given by the user.
        path: String,
        /// What is missing or mixed, in plain words.
        reason: String,
    },
    /// A row has a different number of fields from the header.
    #[error("{path}:{line}: {got} fields, but the header has {expected}{hint}")]
    FieldCount {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Number of header fields.
        expected: usize,
        /// Number of fields in this row.
        got: usize,
        /// Extra hint (e.g. a 2D/3D mix), starting with "; " or empty.
        hint: &'static str,
    },
    /// A field that must be a number is not one.
    #[error("{path}:{line}:{column} (column {name}): `{text}` is not a number")]
    NotANumber {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Field number.
        column: usize,
        /// Column name.
        name: String,
        /// The text found (possibly truncated).
        text: String,
    },
    /// A number is NaN or infinite (written as `nan`, `inf`, or out of `f64` range).
    #[error("{path}:{line}:{column} (column {name}): `{text}` is not a finite number")]
    NonFinite {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Field number.
        column: usize,
        /// Column name.
        name: String,
        /// The text found.
        text: String,
    },
    /// A standard deviation is zero or negative.
    #[error(
        "{path}:{line}:{column} (column {name}): standard deviation must be positive, got {value}"
    )]
    NonPositiveSigma {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Field number.
        column: usize,
        /// Column name.
        name: String,
        /// The value in the declared unit.
        value: f64,
    },
    /// An identifier breaks the ID rule (1–64 chars of `A-Za-z0-9._-`) or is empty.
    #[error("{path}:{line}:{column}: {source}")]
    InvalidId {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Field number (CSV) or character column (JSON).
        column: usize,
        /// The core's description of the problem.
        #[source]
        source: CoreError,
    },
    /// The same point, element or group member appears twice.
    #[error("{path}:{line}: duplicate {what} `{id}` (first on line {first_line})")]
    Duplicate {
        /// File as given by the user.
        path: String,
        /// Line of the second occurrence.
        line: u64,
        /// Line of the first occurrence.
        first_line: u64,
        /// What is duplicated: `point id`, `element id`, `point in group G`.
        what: String,
        /// The identifier.
        id: String,
    },
    /// A JSON document is malformed or has the wrong shape; the message comes from
    /// the JSON parser or from the shape checks done while parsing.
    #[error("{path}:{line}:{column}: {message}")]
    Json {
        /// File as given by the user.
        path: String,
        /// Line reported by the parser.
        line: usize,
        /// Column reported by the parser.
        column: usize,
        /// What is wrong.
        message: String,
    },
    /// The file declares a length unit that differs from `--length-unit`.
    #[error(
        "{path}:{line}:{column}: the file declares length_unit `{declared}` but --length-unit is `{flag}`; make them agree"
    )]
    UnitMismatch {
        /// File as given by the user.
        path: String,
        /// Line of the declaration.
        line: usize,
        /// Column just past the declaration.
        column: usize,
        /// Unit written in the file.
        declared: String,
        /// Unit given on the command line.
        flag: &'static str,
    },
    /// Validation by the core failed for a reason not caught above.
    #[error("{path}: {source}")]
    Core {
        /// File as given by the user.
        path: String,
        /// The core's error.
        #[source]
        source: CoreError,
    },
    /// A value the core rejects, at a known position: e.g. a latitude outside
    /// [−90°, 90°] (`CoreError::LatitudeOutOfRange`).
    #[error("{path}:{line}:{column} (column {name}): {source}")]
    CoreAt {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Field number.
        column: usize,
        /// Column name.
        name: &'static str,
        /// The core's error, naming the value (boxed to keep the enum small).
        #[source]
        source: Box<CoreError>,
    },
    /// A field holds a value of the right kind that is not acceptable here: a
    /// malformed time, or a value that disagrees with another row of the same epoch.
    #[error("{path}:{line}:{column} (column {name}): {message}")]
    BadField {
        /// File as given by the user.
        path: String,
        /// Line of the row.
        line: u64,
        /// Field number.
        column: usize,
        /// Column name.
        name: String,
        /// What is wrong, naming the value.
        message: String,
    },
}

impl InputError {
    /// True when the failure is in the file's content (bad input), false when the
    /// file could not be read at all (an I/O failure).
    pub fn is_bad_input(&self) -> bool {
        !matches!(self, Self::Io { .. })
    }
}

/// The one mapping of a csv-crate error: an I/O failure stays an I/O error (exit 1),
/// anything else is malformed content at a line (exit 2).
pub(crate) fn csv_error(path: &str, e: &csv::Error) -> InputError {
    if let csv::ErrorKind::Io(io) = e.kind() {
        return InputError::Io {
            path: path.to_owned(),
            source: std::io::Error::new(io.kind(), io.to_string()),
        };
    }
    InputError::Csv {
        path: path.to_owned(),
        line: e.position().map(csv::Position::line).unwrap_or(0),
        message: e.to_string(),
    }
}

/// A field's text as a finite number; otherwise `NotANumber` or `NonFinite` naming the
/// file, line, 1-based column and column name.
pub(crate) fn finite_field(
    s: &str,
    path: &str,
    line: u64,
    column: usize,
    name: &str,
) -> Result<f64, InputError> {
    match s.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(InputError::NonFinite {
            path: path.to_owned(),
            line,
            column,
            name: name.to_owned(),
            text: excerpt(s),
        }),
        Err(_) => Err(InputError::NotANumber {
            path: path.to_owned(),
            line,
            column,
            name: name.to_owned(),
            text: excerpt(s),
        }),
    }
}

/// Shorten a field shown in a message to at most 40 characters.
pub(crate) fn excerpt(text: &str) -> String {
    const MAX: usize = 40;
    if text.chars().count() <= MAX {
        text.to_owned()
    } else {
        text.chars().take(MAX).collect::<String>() + "…"
    }
}
