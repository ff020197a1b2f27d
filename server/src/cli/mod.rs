//! Command-line subcommands of `kinema` and their error type.
//!
//! Exit codes: 0 success; 2 bad input (unreadable content, bad flag combination,
//! data the estimators reject; clap also uses 2 for usage errors); 1 any other
//! failure (a file that cannot be opened or written, an internal error).

pub mod analyze;
pub mod service;

use std::io;

use kinema_core::CoreError;
use thiserror::Error;

use crate::input::InputError;

/// Exit code for bad input.
pub const EXIT_BAD_INPUT: u8 = 2;
/// Exit code for other failures.
pub const EXIT_FAILURE: u8 = 1;

/// Why a subcommand failed. The message is printed to stderr as it is.
#[derive(Debug, Error)]
pub enum CliError {
    /// A flag value or a combination of flags is not allowed.
    #[error("{0}")]
    Usage(String),
    /// An input file is malformed or cannot be read.
    #[error(transparent)]
    Input(#[from] InputError),
    /// The core rejected the data or a parameter (bad input).
    #[error(transparent)]
    Core(#[from] CoreError),
    /// The output could not be written.
    #[error("{target}: cannot write: {source}")]
    Output {
        /// Output file as given, or `stdout`.
        target: String,
        /// Underlying error.
        #[source]
        source: io::Error,
    },
}

impl CliError {
    /// Process exit code: [`EXIT_BAD_INPUT`] (2) for bad input, [`EXIT_FAILURE`] (1) otherwise.
    pub fn exit_code(&self) -> u8 {
        match self {
            Self::Usage(_) | Self::Core(_) => EXIT_BAD_INPUT,
            Self::Input(e) if e.is_bad_input() => EXIT_BAD_INPUT,
            Self::Input(_) | Self::Output { .. } => EXIT_FAILURE,
        }
    }
}
