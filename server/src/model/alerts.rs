//! Alert rules, the current alert state of each region and the alert events, as the
//! storage trait keeps them. A rule's definition (quantity, scope, levels, thresholds,
//! hysteresis, significance) is typed and validated in [`crate::alerts`]; the store
//! keeps it as a JSON document and never interprets it.
//!
//! Threshold values are always the user's configuration: Kinema ships none.

use serde::{Deserialize, Serialize};
use time::OffsetDateTime;
use utoipa::ToSchema;
use uuid::Uuid;

/// A stored alert rule of a structure.
#[derive(Debug, Clone, PartialEq)]
pub struct AlertRuleRecord {
    /// The rule's ID.
    pub id: Uuid,
    /// The structure's asset ID.
    pub structure_id: String,
    /// The definition as validated by [`crate::alerts`] (a JSON object).
    pub definition: serde_json::Value,
    /// When it was created, UTC.
    pub created_at: OffsetDateTime,
    /// When it was last replaced, UTC.
    pub updated_at: OffsetDateTime,
}

/// The alert state of one region (element, group, point …) under one rule: the level
/// it is at and the evidence of the last evaluation.
#[derive(Debug, Clone, PartialEq)]
pub struct AlertState {
    /// The rule.
    pub rule_id: Uuid,
    /// The region's label in the result (element ID, group name, point ID).
    pub region: String,
    /// The level index: 0 = below every level, 1 = the rule's first level, …
    pub level: u32,
    /// What [`crate::alerts`] keeps between evaluations (last value, its standard
    /// deviation and epoch, the analysis), as a JSON object.
    pub data: serde_json::Value,
    /// When this state was last written, UTC.
    pub updated_at: OffsetDateTime,
}

/// What an alert event records.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum AlertEventKind {
    /// The region went up to a higher level.
    Raised,
    /// The region went down to a lower level (or below every level).
    Cleared,
    /// The value crossed a threshold but was not statistically significant (or had no
    /// standard deviation to test it with) under a rule that requires significance:
    /// no level was raised.
    NotSignificant,
}

impl AlertEventKind {
    /// `raised`, `cleared` or `not_significant`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Raised => "raised",
            Self::Cleared => "cleared",
            Self::NotSignificant => "not_significant",
        }
    }

    /// Parse [`AlertEventKind::as_str`].
    pub fn parse(s: &str) -> Option<Self> {
        match s {
            "raised" => Some(Self::Raised),
            "cleared" => Some(Self::Cleared),
            "not_significant" => Some(Self::NotSignificant),
            _ => None,
        }
    }
}

/// A stored alert event: a change of level of one region under one rule (or a crossing
/// that was not significant), with its evidence.
#[derive(Debug, Clone, PartialEq, Serialize, ToSchema)]
pub struct AlertEvent {
    /// The event's ID (also the ID of the webhook event it caused, if any).
    pub id: Uuid,
    /// Position in the structure's event log (increasing, gaps possible).
    pub seq: i64,
    /// The structure's asset ID.
    pub structure_id: String,
    /// The rule.
    pub rule_id: Uuid,
    /// The region's label.
    pub region: String,
    /// What happened.
    pub kind: AlertEventKind,
    /// Level index before (0 = below every level).
    pub from_level: u32,
    /// Level index after.
    pub to_level: u32,
    /// The analysis evaluated.
    pub analysis_id: Uuid,
    /// Evidence: value, standard deviation, threshold, level names, strain unit,
    /// epoch (a JSON object written by [`crate::alerts`]).
    #[schema(value_type = Object)]
    pub evidence: serde_json::Value,
    /// When it was recorded, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub created_at: OffsetDateTime,
}

/// A new alert event (the store gives it its `seq`).
#[derive(Debug, Clone, PartialEq)]
pub struct NewAlertEvent {
    /// Its ID (UUID v4).
    pub id: Uuid,
    /// The rule.
    pub rule_id: Uuid,
    /// The region's label.
    pub region: String,
    /// What happened.
    pub kind: AlertEventKind,
    /// Level index before.
    pub from_level: u32,
    /// Level index after.
    pub to_level: u32,
    /// Evidence (see [`AlertEvent::evidence`]).
    pub evidence: serde_json::Value,
}

/// What evaluating one analysis against a structure's rules changes: the states to
/// write (insert or replace by `(rule_id, region)`) and the events to record. Made by
/// [`crate::alerts::evaluate`]; the store writes it in the transaction that stores the
/// analysis.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Evaluation {
    /// States to insert or replace.
    pub states: Vec<AlertState>,
    /// Events to record, in order.
    pub events: Vec<NewAlertEvent>,
}

/// Which alert events of a structure to list: oldest first by `seq`.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct AlertEventQuery {
    /// Only events of this rule.
    pub rule_id: Option<Uuid>,
    /// Only events of this region.
    pub region: Option<String>,
    /// Only events with `seq` greater than this (the last of the previous page).
    pub after_seq: Option<i64>,
    /// At most this many.
    pub limit: usize,
}
