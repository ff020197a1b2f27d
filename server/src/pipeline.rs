//! The computation step of `kinema analyze`, between the prepared [`Request`] and the
//! output sink.
//!
//! INTEGRATION POINT. In branch `wt-cli` this file holds only the signature: the
//! estimators of kinema-core are merged separately, and the integrator replaces the
//! body of [`run`] with the dispatch on `request.method` (estimate, kinematics, rows).
//! It is not meant to ship in this form.

use crate::cli::CliError;
use crate::cli::analyze::Request;
use crate::output::RowSink;

/// Compute the estimates for `request` and stream them into `sink`; `target` names
/// the output (file or `stdout`) for I/O error messages.
pub fn run(request: &Request, sink: &mut dyn RowSink, target: &str) -> Result<(), CliError> {
    let _ = (sink, target);
    Err(CliError::Usage(format!(
        "--method {}: the estimators are not linked into this build yet",
        request.method.name()
    )))
}
