//! Opening an input file: progress bar for large files and choosing CSV or JSON by content.

use std::fs::File;
use std::io::{BufRead, BufReader, IsTerminal, Read};
use std::path::Path;

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressFinish, ProgressStyle};

use super::error::InputError;

/// Files at least this large (bytes) get a progress bar: about 10^5 rows of the
/// wide round-trip format `gen_field.py` writes (~90 bytes a row), or more rows of
/// a narrower file.
pub(crate) const PROGRESS_MIN_BYTES: u64 = 8 * 1024 * 1024;

/// Buffer used for reading; large enough that system calls do not dominate.
const BUF_BYTES: usize = 1 << 16;

/// An opened input, classified by its first non-blank byte.
pub(crate) enum Source {
    /// The whole file, for the JSON parser.
    Json(Vec<u8>),
    /// A buffered reader positioned at the start, and the file length in bytes.
    Csv(Box<dyn BufRead>, u64),
    /// Nothing but white space (or nothing at all).
    Blank,
}

/// Open `path`, wrap it in a progress bar when asked and worthwhile, and classify it.
pub(crate) fn open(path: &Path, display: &str, progress: bool) -> Result<Source, InputError> {
    let io_err = |source| InputError::Io {
        path: display.to_owned(),
        source,
    };
    let file = File::open(path).map_err(io_err)?;
    let len = file.metadata().map_err(io_err)?.len();
    let reader: Box<dyn Read> = match progress_bar(len, progress) {
        Some(bar) => Box::new(bar.wrap_read(file)),
        None => Box::new(file),
    };
    let mut reader = BufReader::with_capacity(BUF_BYTES, reader);
    // Look at the first buffer without consuming it, so that the CSV reader gets the
    // file from its start and its line numbers stay right.
    let first = first_significant(reader.fill_buf().map_err(io_err)?);
    match first {
        Some(b'{') => {
            let mut bytes = Vec::with_capacity(usize::try_from(len).unwrap_or(0));
            reader.read_to_end(&mut bytes).map_err(io_err)?;
            Ok(Source::Json(bytes))
        }
        Some(_) => Ok(Source::Csv(Box::new(reader), len)),
        None => {
            // The first buffer is blank (or the file is empty): read the rest to decide.
            let mut all = Vec::new();
            reader.read_to_end(&mut all).map_err(io_err)?;
            Ok(classify_bytes(all))
        }
    }
}

/// First byte that is neither ASCII white space nor part of a UTF-8 byte-order mark.
fn first_significant(buf: &[u8]) -> Option<u8> {
    let buf = buf.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(buf);
    buf.iter().copied().find(|b| !b.is_ascii_whitespace())
}

/// Classify bytes already in memory (the rare path where a file starts with a
/// long run of white space).
fn classify_bytes(all: Vec<u8>) -> Source {
    let len = all.len() as u64;
    match first_significant(&all) {
        None => Source::Blank,
        Some(b'{') => Source::Json(all),
        Some(_) => Source::Csv(Box::new(std::io::Cursor::new(all)), len),
    }
}

/// A progress bar on stderr counting bytes read, or `None` when not wanted: progress
/// off, a small file, or stderr not a terminal.
fn progress_bar(len: u64, progress: bool) -> Option<ProgressBar> {
    if !progress || len < PROGRESS_MIN_BYTES || !std::io::stderr().is_terminal() {
        return None;
    }
    let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr())
        .with_finish(ProgressFinish::AndClear);
    if let Ok(style) = ProgressStyle::with_template(
        "reading {bar:40} {binary_bytes}/{binary_total_bytes} ({eta} left)",
    ) {
        bar.set_style(style);
    }
    Some(bar)
}

/// A CSV reader over `reader` (flexible rows, fields trimmed) and the names of its header
/// columns, trimmed and without a byte-order mark. An empty header is
/// [`InputError::Empty`]: the one way every reader opens a CSV file.
pub(crate) fn open_csv<R: Read>(
    reader: R,
    path: &str,
) -> Result<(csv::Reader<R>, Vec<String>), InputError> {
    let mut rdr = csv::ReaderBuilder::new()
        .flexible(true)
        .trim(csv::Trim::All)
        .from_reader(reader);
    let header = rdr
        .byte_headers()
        .map_err(|e| super::error::csv_error(path, &e))?;
    if header.is_empty() || (header.len() == 1 && header[0].is_empty()) {
        return Err(InputError::Empty {
            path: path.to_owned(),
        });
    }
    let names = header
        .iter()
        .map(|raw| {
            String::from_utf8_lossy(raw)
                .trim_start_matches('\u{feff}')
                .trim()
                .to_owned()
        })
        .collect();
    Ok((rdr, names))
}
