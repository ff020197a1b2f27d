//! Analyses for the service: the API's description of an estimator run
//! ([`params`]), the run itself through the offline pipeline ([`field`]), the
//! closed-form report of one displacement gradient ([`gradient`]), displacements of a
//! stored epoch turned into points ([`epoch`]), stored epochs turned into a
//! strain series ([`series`]) and the exports of a stored result
//! ([`export`]).
//!
//! Nothing here re-derives a formula: every strain state comes from
//! `kinema_core::kinematics` through [`crate::pipeline`], whose JSON result document
//! is what the API returns and stores.
//!
//! Results are kinematic estimates from measured displacements, not a structural
//! assessment; defer to local codes and licensed practice.

pub mod epoch;
pub mod export;
pub mod field;
pub mod gradient;
pub mod params;
pub mod series;

use thiserror::Error;

use crate::api::problem::{ApiError, FieldError};
use crate::cli::CliError;

/// Why an analysis could not be run.
#[derive(Debug, Error)]
pub enum AnalysisError {
    /// The request's parameters or data are not valid (each bad field with a pointer).
    #[error("invalid request: {0:?}")]
    Invalid(Vec<FieldError>),
    /// The parameters are valid but do not fit the data (e.g. `use_precision` without
    /// stated precision); the message says why.
    #[error("{0}")]
    Parameters(String),
    /// The estimator could not compute on the data (e.g. all points collinear); the
    /// message is the core's reason.
    #[error("{0}")]
    NotComputable(String),
    /// A bug (the result document could not be written or read back).
    #[error("{0}")]
    Internal(String),
}

impl From<CliError> for AnalysisError {
    fn from(e: CliError) -> Self {
        match e {
            CliError::Core(c) => Self::NotComputable(c.to_string()),
            CliError::Usage(m) => Self::Parameters(m),
            CliError::Input(i) => Self::Parameters(i.to_string()),
            CliError::Output { source, .. } => Self::Internal(source.to_string()),
        }
    }
}

impl From<AnalysisError> for ApiError {
    fn from(e: AnalysisError) -> Self {
        match e {
            AnalysisError::Invalid(errs) => ApiError::fields(errs),
            AnalysisError::Parameters(m) => ApiError::Invalid {
                detail: m,
                errors: Vec::new(),
            },
            AnalysisError::NotComputable(m) => ApiError::Unprocessable(m),
            AnalysisError::Internal(m) => ApiError::Internal(m),
        }
    }
}
