//! TEMPORARY (lead's branch only, replaced by the alerts module at merge).
use time::OffsetDateTime;

use crate::model::{AlertRuleRecord, AlertState, Analysis, Evaluation, Structure};

/// Placeholder until the alerts module lands.
pub fn evaluate(
    _s: &Structure,
    _r: &[AlertRuleRecord],
    _st: &[AlertState],
    _a: &Analysis,
    _now: OffsetDateTime,
) -> Evaluation {
    Evaluation::default()
}
