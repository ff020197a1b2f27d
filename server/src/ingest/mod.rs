//! Sensor-batch ingestion: a body streamed from the client is parsed (JSON or CSV),
//! validated reading by reading and handed on in chunks of [`NewReading`]s, without
//! ever holding the whole body.
//!
//! The parsers are blocking (`serde_json` and `csv` over a [`std::io::Read`]); the API
//! runs them on a blocking thread, reading the request body through a bridge, and
//! receives the chunks over a bounded channel while it writes them into one open
//! transaction. A batch is all or nothing: the first bad reading stops the chunks, and
//! the API drops the transaction.

pub mod body;
pub mod csv;
pub mod json;
pub mod validate;

use std::collections::HashMap;
use std::sync::Arc;

use thiserror::Error;
use tokio::sync::mpsc;

use crate::api::problem::FieldError;
use crate::store::NewReading;
use crate::units::LengthUnit;

/// Readings per chunk sent to the writer.
pub const CHUNK_READINGS: usize = 10_000;

/// Bad fields reported at most; parsing stops after this many.
pub const MAX_FIELD_ERRORS: usize = 100;

/// What a parser needs to know about the structure and the request.
#[derive(Debug, Clone)]
pub struct Context {
    /// The structure's dimension (2 or 3): components per displacement.
    pub dimension: u8,
    /// The structure's points: point ID → internal key.
    pub points: Arc<HashMap<String, i64>>,
    /// Length unit of the values: `?length_unit=` when given, else the structure's.
    pub unit: LengthUnit,
    /// Whether `unit` came from `?length_unit=` (a JSON body's own `length_unit` must
    /// then agree with it).
    pub unit_from_query: bool,
    /// Most readings accepted in one batch.
    pub max_readings: usize,
}

/// Why a body could not be ingested.
#[derive(Debug, Error)]
pub enum IngestError {
    /// Not well-formed JSON or CSV; the message says where (line and column).
    #[error("{0}")]
    Malformed(String),
    /// Readings or fields that are wrong, each with its pointer.
    #[error("{} bad field(s)", .0.len())]
    Invalid(Vec<FieldError>),
    /// Over the body size or readings limit.
    #[error("{0}")]
    TooLarge(String),
    /// The body could not be read (the client went away or sent a broken stream).
    #[error("the request body could not be read: {0}")]
    Read(String),
    /// The receiving side stopped (the write failed); its error is the one to report.
    #[error("the writer stopped")]
    Stopped,
}

/// The body's hash and size after a successful parse.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Outcome {
    /// Readings parsed and sent.
    pub readings: u64,
    /// SHA-256 of the whole body, lowercase hex.
    pub body_sha256: String,
    /// Size of the body, bytes.
    pub bytes: u64,
}

/// Collects validated readings and sends them in chunks of [`CHUNK_READINGS`].
pub struct Sink {
    tx: mpsc::Sender<Vec<NewReading>>,
    buf: Vec<NewReading>,
}

impl Sink {
    /// A sink sending into `tx`.
    pub fn new(tx: mpsc::Sender<Vec<NewReading>>) -> Self {
        Self {
            tx,
            buf: Vec::with_capacity(CHUNK_READINGS),
        }
    }

    /// Add one reading; sends a full chunk (blocking while the channel is full).
    pub fn push(&mut self, r: NewReading) -> Result<(), IngestError> {
        self.buf.push(r);
        if self.buf.len() >= CHUNK_READINGS {
            self.flush()?;
        }
        Ok(())
    }

    /// Send what is buffered.
    pub fn flush(&mut self) -> Result<(), IngestError> {
        if self.buf.is_empty() {
            return Ok(());
        }
        let chunk = std::mem::replace(&mut self.buf, Vec::with_capacity(CHUNK_READINGS));
        self.tx
            .blocking_send(chunk)
            .map_err(|_| IngestError::Stopped)
    }
}
