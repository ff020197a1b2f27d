//! The typed definition of an alert rule (the API body, stored as JSON in
//! [`AlertRuleRecord::definition`]) and its validation.
//!
//! Threshold values are always the user's configuration: Kinema ships none.
//!
//! Conventions: strains are extension positive, compression negative; shear is the
//! engineering maximum shear `e1 − e_min`; a direction is given in the structure's
//! frame (`x`, `y`, and `z` in 3D) and normalised before use.

use std::collections::HashSet;

use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

use crate::api::problem::FieldError;
use crate::model::{AlertRuleRecord, id_problem};
use crate::units::StrainUnit;

/// Longest rule name, characters.
pub const MAX_NAME: usize = 200;
/// Longest level or axis name, characters.
pub const MAX_LEVEL_NAME: usize = 100;
/// Most levels of a rule.
pub const MAX_LEVELS: usize = 8;
/// Most entries in each list of a scope.
pub const MAX_SCOPE_ENTRIES: usize = 10_000;
/// Significance level used when `significance` is given without `alpha`.
pub const DEFAULT_ALPHA: f64 = 0.05;

/// What a rule watches, per region of a result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Quantity {
    /// Major principal strain `e1` (extension positive).
    PrincipalTensile,
    /// Minor principal strain: `e2` in 2D, `e3` in 3D (compression is negative strain).
    PrincipalCompressive,
    /// Engineering maximum shear strain `e1 − e_min` (`e2` in 2D, `e3` in 3D).
    MaxShear,
    /// Volumetric strain: the trace (`exx + eyy` in 2D, `exx + eyy + ezz` in 3D).
    Volumetric,
    /// Normal strain along the rule's `axis`: `ε_n = n·ε·n` with `n` the normalised
    /// direction.
    Axial,
    /// Rate of change per day of the quantity named by `rate_of`.
    StrainRate,
}

impl Quantity {
    /// The snake_case name.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::PrincipalTensile => "principal_tensile",
            Self::PrincipalCompressive => "principal_compressive",
            Self::MaxShear => "max_shear",
            Self::Volumetric => "volumetric",
            Self::Axial => "axial",
            Self::StrainRate => "strain_rate",
        }
    }
}

/// How the signed value becomes the magnitude compared with the thresholds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Sense {
    /// The value itself: only extension (positive values) can reach a level.
    Positive,
    /// The negated value: only compression (negative values) can reach a level.
    Negative,
    /// The absolute value: either sign.
    Absolute,
}

impl Sense {
    /// The snake_case name.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Positive => "positive",
            Self::Negative => "negative",
            Self::Absolute => "absolute",
        }
    }

    /// The magnitude of a signed value under this sense.
    pub fn magnitude(self, value: f64) -> f64 {
        match self {
            Self::Positive => value,
            Self::Negative => -value,
            Self::Absolute => value.abs(),
        }
    }

    /// The default sense of a quantity: positive for `principal_tensile` and
    /// `max_shear`, negative for `principal_compressive`, absolute for `volumetric`,
    /// `axial` and `strain_rate`.
    pub fn default_for(q: Quantity) -> Self {
        match q {
            Quantity::PrincipalTensile | Quantity::MaxShear => Self::Positive,
            Quantity::PrincipalCompressive => Self::Negative,
            Quantity::Volumetric | Quantity::Axial | Quantity::StrainRate => Self::Absolute,
        }
    }
}

/// A named direction in the structure's frame.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct Axis {
    /// A name for people, e.g. "deck longitudinal" (1–100 characters).
    pub name: String,
    /// The direction `[x, y]` (2D) or `[x, y, z]` (3D) in the structure's frame, any
    /// non-zero length (normalised before use).
    pub direction: Vec<f64>,
}

/// One alert level of a rule.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct Level {
    /// The level's name, e.g. "review" (1–100 characters, unique in the rule).
    pub name: String,
    /// The magnitude at or above which the level is reached, in the rule's `unit`
    /// (per day for `strain_rate`), positive; levels are strictly increasing.
    pub threshold: f64,
}

/// Which regions of a result a rule watches. Absent, or every list empty: every
/// region of the result's main section.
///
/// - `elements`: rows of section `elements` (and series over elements) by label,
///   the element ID;
/// - `groups`: rows of section `groups` (and series over groups) by label, the
///   group name;
/// - `points`: rows labelled with the point ID (sections `neighbourhoods` and
///   `network`) or whose `members` include the point (any section; in a series the
///   members are the region's vertices or point IDs).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RegionScope {
    /// Element IDs.
    #[serde(default)]
    pub elements: Vec<String>,
    /// Group names.
    #[serde(default)]
    pub groups: Vec<String>,
    /// Point IDs of the structure.
    #[serde(default)]
    pub points: Vec<String>,
}

impl RegionScope {
    /// Whether no list names anything (the scope is every region).
    pub fn is_everything(&self) -> bool {
        self.elements.is_empty() && self.groups.is_empty() && self.points.is_empty()
    }
}

/// The statistical test a crossing must pass before a level is raised.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct Significance {
    /// Level of the two-sided test of "no strain" on the watched quantity,
    /// 0 < alpha < 0.5 (default 0.05): a level is raised only when
    /// `|value| > z_{1−alpha/2} · sd`.
    #[serde(default = "default_alpha")]
    pub alpha: f64,
}

fn default_alpha() -> f64 {
    DEFAULT_ALPHA
}

fn yes() -> bool {
    true
}

/// An alert rule as the API takes it and the store keeps it.
///
/// Thresholds are the user's configuration (Kinema ships no limit values); set them
/// from the design, the assessment and local codes with the responsible engineer.
/// Results are kinematic estimates, not a structural assessment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RuleDefinition {
    /// A name for people (1–200 characters).
    pub name: String,
    /// Whether the rule is evaluated (default true).
    #[serde(default = "yes")]
    pub enabled: bool,
    /// What is watched: `principal_tensile`, `principal_compressive`, `max_shear`,
    /// `volumetric`, `axial` (needs `axis`) or `strain_rate` (needs `rate_of`).
    pub quantity: Quantity,
    /// For `strain_rate`: the quantity whose rate per day is watched (any but
    /// `strain_rate`). From one analysis of an epoch to the next, the rate is
    /// `(v − v_prev)/Δt_days` with standard deviation `sqrt(sd² + sd_prev²)/Δt_days`
    /// (the first evaluation has no rate); a series gives it from its `rates` section.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub rate_of: Option<Quantity>,
    /// For `axial` (or `strain_rate` of `axial`): the direction of the normal strain.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub axis: Option<Axis>,
    /// How the signed value becomes the compared magnitude: `positive`, `negative`
    /// or `absolute`. Default: positive for `principal_tensile` and `max_shear`,
    /// negative for `principal_compressive`, absolute otherwise. Stored rules state it.
    #[serde(default)]
    pub sense: Option<Sense>,
    /// Unit of the thresholds and the hysteresis: `strain` or `microstrain`
    /// (for `strain_rate`, that unit per day).
    pub unit: StrainUnit,
    /// The levels, 1 to 8, thresholds strictly increasing.
    pub levels: Vec<Level>,
    /// How far below a level's threshold the magnitude must fall before the level
    /// clears, in `unit`, ≥ 0 (default 0); smaller than the first threshold and than
    /// every gap between thresholds.
    #[serde(default)]
    pub hysteresis: f64,
    /// Which regions are watched; absent = every region.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scope: Option<RegionScope>,
    /// Raise a level only when the value is statistically significant; absent = no
    /// test.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub significance: Option<Significance>,
}

impl RuleDefinition {
    /// The sense in force (the given one or the quantity's default).
    pub fn sense(&self) -> Sense {
        self.sense
            .unwrap_or_else(|| Sense::default_for(self.quantity))
    }

    /// The quantity whose value is taken from the result: `rate_of` for
    /// `strain_rate`, else `quantity`.
    pub fn base_quantity(&self) -> Quantity {
        match (self.quantity, self.rate_of) {
            (Quantity::StrainRate, Some(q)) => q,
            (q, _) => q,
        }
    }

    /// Whether the rule watches a rate (values per day).
    pub fn is_rate(&self) -> bool {
        self.quantity == Quantity::StrainRate
    }

    /// Label of the unit of its values: `strain`, `microstrain`, or either with
    /// `_per_day` for `strain_rate`.
    pub fn value_unit(&self) -> String {
        if self.is_rate() {
            format!("{}_per_day", self.unit.label())
        } else {
            self.unit.label().to_owned()
        }
    }

    /// The definition with its defaults stated (the sense), as it is stored.
    pub fn normalised(mut self) -> Self {
        self.sense = Some(self.sense());
        if self.scope.as_ref().is_some_and(RegionScope::is_everything) {
            self.scope = None;
        }
        self
    }

    /// The definition as JSON for [`AlertRuleRecord::definition`].
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::to_value(self).unwrap_or(serde_json::Value::Null)
    }

    /// The definition of a stored rule; `None` when it does not parse (such a rule is
    /// skipped by the evaluation).
    pub fn of_record(r: &AlertRuleRecord) -> Option<Self> {
        serde_json::from_value(r.definition.clone()).ok()
    }

    /// The unit vector of the axis, 3 components (the third 0 in 2D); `None` without
    /// an axis or with a direction of zero or non-finite length.
    pub fn axis_unit(&self) -> Option<[f64; 3]> {
        unit_vector(&self.axis.as_ref()?.direction)
    }

    /// Every bad field, each with its JSON pointer (RFC 6901) in the body. `dimension`
    /// is the structure's (2 or 3); `is_point` tells whether a point ID belongs to the
    /// structure.
    pub fn validate(&self, dimension: u8, is_point: &dyn Fn(&str) -> bool) -> Vec<FieldError> {
        let mut errs = Vec::new();
        text_field(&self.name, "/name", MAX_NAME, &mut errs);
        self.validate_quantity(dimension, &mut errs);
        self.validate_levels(&mut errs);
        if let Some(scope) = &self.scope {
            validate_scope(scope, is_point, &mut errs);
        }
        if let Some(s) = &self.significance
            && !(s.alpha > 0.0 && s.alpha < 0.5)
        {
            errs.push(FieldError::new(
                "/significance/alpha",
                format!(
                    "alpha must be greater than 0 and less than 0.5, not {}",
                    s.alpha
                ),
            ));
        }
        errs
    }

    fn validate_quantity(&self, dimension: u8, errs: &mut Vec<FieldError>) {
        match (self.quantity, self.rate_of) {
            (Quantity::StrainRate, None) => errs.push(FieldError::new(
                "/rate_of",
                "strain_rate needs rate_of: the quantity whose rate per day is watched",
            )),
            (Quantity::StrainRate, Some(Quantity::StrainRate)) => errs.push(FieldError::new(
                "/rate_of",
                "rate_of names another quantity, not strain_rate",
            )),
            (Quantity::StrainRate, Some(_)) => {}
            (q, Some(_)) => errs.push(FieldError::new(
                "/rate_of",
                format!(
                    "rate_of is used only with quantity strain_rate, not {}",
                    q.as_str()
                ),
            )),
            (_, None) => {}
        }
        let wants_axis = self.base_quantity() == Quantity::Axial;
        match (&self.axis, wants_axis) {
            (None, true) => errs.push(FieldError::new(
                "/axis",
                "an axial quantity needs axis: {name, direction} in the structure's frame",
            )),
            (Some(_), false) => errs.push(FieldError::new(
                "/axis",
                "axis is used only with the axial quantity",
            )),
            (Some(a), true) => {
                text_field(&a.name, "/axis/name", MAX_LEVEL_NAME, errs);
                if a.direction.len() != usize::from(dimension) {
                    errs.push(FieldError::new(
                        "/axis/direction",
                        format!(
                            "the structure is {dimension}D: give {dimension} components, not {}",
                            a.direction.len()
                        ),
                    ));
                } else if unit_vector(&a.direction).is_none() {
                    errs.push(FieldError::new(
                        "/axis/direction",
                        "the direction must have a non-zero, finite length",
                    ));
                }
            }
            (None, false) => {}
        }
    }

    fn validate_levels(&self, errs: &mut Vec<FieldError>) {
        let n = self.levels.len();
        if n == 0 || n > MAX_LEVELS {
            errs.push(FieldError::new(
                "/levels",
                format!("give 1 to {MAX_LEVELS} levels, not {n}"),
            ));
        }
        let mut names = HashSet::new();
        let mut thresholds_ok = true;
        for (i, l) in self.levels.iter().enumerate() {
            text_field(&l.name, &format!("/levels/{i}/name"), MAX_LEVEL_NAME, errs);
            if !names.insert(l.name.as_str()) {
                errs.push(FieldError::new(
                    format!("/levels/{i}/name"),
                    format!("level names are unique; {:?} is used before", l.name),
                ));
            }
            let at = format!("/levels/{i}/threshold");
            if !(l.threshold.is_finite() && l.threshold > 0.0) {
                thresholds_ok = false;
                errs.push(FieldError::new(
                    at,
                    format!("a threshold is a positive magnitude, not {}", l.threshold),
                ));
            } else if i > 0 && l.threshold <= self.levels[i - 1].threshold {
                thresholds_ok = false;
                errs.push(FieldError::new(
                    at,
                    format!(
                        "thresholds increase strictly: {} is not above level {}'s {}",
                        l.threshold,
                        i - 1,
                        self.levels[i - 1].threshold
                    ),
                ));
            }
        }
        let h = self.hysteresis;
        if !(h.is_finite() && h >= 0.0) {
            errs.push(FieldError::new(
                "/hysteresis",
                format!("the hysteresis is 0 or more, not {h}"),
            ));
        } else if thresholds_ok && n > 0 {
            let mut smallest = self.levels[0].threshold;
            for w in self.levels.windows(2) {
                smallest = smallest.min(w[1].threshold - w[0].threshold);
            }
            if h >= smallest {
                errs.push(FieldError::new(
                    "/hysteresis",
                    format!(
                        "the hysteresis must be smaller than the first threshold and every gap \
                         between thresholds (here below {smallest}), not {h}"
                    ),
                ));
            }
        }
    }
}

/// `v` normalised to length 1, padded to 3 components; `None` for a zero or
/// non-finite length.
pub fn unit_vector(v: &[f64]) -> Option<[f64; 3]> {
    if v.is_empty() || v.len() > 3 || v.iter().any(|x| !x.is_finite()) {
        return None;
    }
    // Scaled by the largest component first, so that no square overflows or underflows.
    let scale = v.iter().fold(0.0_f64, |m, x| m.max(x.abs()));
    if scale == 0.0 {
        return None;
    }
    let len = v.iter().map(|x| (x / scale).powi(2)).sum::<f64>().sqrt();
    let mut out = [0.0; 3];
    for (o, x) in out.iter_mut().zip(v) {
        *o = x / scale / len;
    }
    Some(out)
}

fn text_field(s: &str, at: &str, max: usize, errs: &mut Vec<FieldError>) {
    let n = s.chars().count();
    if s.trim().is_empty() {
        errs.push(FieldError::new(at, "must not be empty"));
    } else if n > max {
        errs.push(FieldError::new(
            at,
            format!("at most {max} characters, not {n}"),
        ));
    }
}

fn validate_scope(
    scope: &RegionScope,
    is_point: &dyn Fn(&str) -> bool,
    errs: &mut Vec<FieldError>,
) {
    for (name, list) in [
        ("elements", &scope.elements),
        ("groups", &scope.groups),
        ("points", &scope.points),
    ] {
        if list.len() > MAX_SCOPE_ENTRIES {
            errs.push(FieldError::new(
                format!("/scope/{name}"),
                format!("at most {MAX_SCOPE_ENTRIES} entries, not {}", list.len()),
            ));
            continue;
        }
        let at = format!("/scope/{name}");
        for (i, id) in list.iter().enumerate() {
            if let Some(p) = id_problem(id) {
                errs.push(FieldError::new(format!("{at}/{i}"), p));
            }
        }
        if name == "points" {
            crate::analysis::params::unknown_points(list, &at, is_point, errs);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    fn parse(v: serde_json::Value) -> RuleDefinition {
        serde_json::from_value(v).expect("a well-formed definition")
    }

    fn base() -> serde_json::Value {
        json!({
            "name": "deck tension",
            "quantity": "principal_tensile",
            "unit": "microstrain",
            "levels": [{"name": "review", "threshold": 100}, {"name": "act", "threshold": 200}],
            "hysteresis": 10
        })
    }

    fn pointers(e: &[FieldError]) -> Vec<&str> {
        e.iter().map(|f| f.pointer.as_str()).collect()
    }

    #[test]
    fn a_good_rule_passes_and_gets_its_default_sense() {
        let r = parse(base());
        assert!(r.validate(2, &|_| true).is_empty());
        assert!(r.enabled);
        let n = r.normalised();
        assert_eq!(n.sense, Some(Sense::Positive));
        assert_eq!(n.to_json()["sense"], "positive");
        // Round trip through the stored JSON.
        let back: RuleDefinition = serde_json::from_value(n.to_json()).expect("round trip");
        assert_eq!(back, n);
    }

    #[test]
    fn default_senses_follow_the_sign_convention() {
        // Common practice: compression is negative strain, so the compressive quantity
        // is compared negated; shear and tension as they are.
        assert_eq!(
            Sense::default_for(Quantity::PrincipalTensile),
            Sense::Positive
        );
        assert_eq!(Sense::default_for(Quantity::MaxShear), Sense::Positive);
        assert_eq!(
            Sense::default_for(Quantity::PrincipalCompressive),
            Sense::Negative
        );
        for q in [Quantity::Volumetric, Quantity::Axial, Quantity::StrainRate] {
            assert_eq!(Sense::default_for(q), Sense::Absolute);
        }
        assert_eq!(Sense::Negative.magnitude(-150.0), 150.0);
        assert_eq!(Sense::Absolute.magnitude(-150.0), 150.0);
        assert_eq!(Sense::Positive.magnitude(-150.0), -150.0);
    }

    #[test]
    fn every_bad_field_is_named() {
        let mut v = base();
        v["name"] = json!("");
        v["levels"] = json!([
            {"name": "a", "threshold": -5},
            {"name": "a", "threshold": 50},
            {"name": "b", "threshold": 40}
        ]);
        v["significance"] = json!({"alpha": 0.5});
        v["scope"] = json!({"points": ["P1", "NOPE", "bad id"]});
        let r = parse(v);
        let e = r.validate(2, &|p| p == "P1");
        assert_eq!(
            pointers(&e),
            [
                "/name",
                "/levels/0/threshold",
                "/levels/1/name",
                "/levels/2/threshold",
                // The malformed ID first, then the well-formed one that is no point.
                "/scope/points/2",
                "/scope/points/1",
                "/significance/alpha"
            ],
            "{e:?}"
        );
    }

    #[test]
    fn hysteresis_must_stay_below_the_first_threshold_and_every_gap() {
        for (h, ok) in [(0.0, true), (99.0, true), (100.0, false), (-1.0, false)] {
            let mut v = base();
            v["hysteresis"] = json!(h);
            let e = parse(v).validate(2, &|_| true);
            assert_eq!(e.is_empty(), ok, "h = {h}: {e:?}");
        }
        let mut v = base();
        v["levels"] = json!([{"name": "a", "threshold": 100}, {"name": "b", "threshold": 120}]);
        v["hysteresis"] = json!(20);
        assert_eq!(pointers(&parse(v).validate(2, &|_| true)), ["/hysteresis"]);
    }

    #[test]
    fn levels_are_one_to_eight() {
        let mut v = base();
        v["levels"] = json!([]);
        v["hysteresis"] = json!(0);
        assert_eq!(pointers(&parse(v).validate(2, &|_| true)), ["/levels"]);
        let mut v = base();
        v["levels"] = json!(
            (1..=9)
                .map(|i| json!({"name": format!("L{i}"), "threshold": 100 * i}))
                .collect::<Vec<_>>()
        );
        assert_eq!(pointers(&parse(v).validate(2, &|_| true)), ["/levels"]);
    }

    #[test]
    fn axis_and_rate_of_go_with_their_quantities() {
        let mut v = base();
        v["quantity"] = json!("axial");
        assert_eq!(
            pointers(&parse(v.clone()).validate(2, &|_| true)),
            ["/axis"]
        );
        v["axis"] = json!({"name": "deck", "direction": [0, 0]});
        assert_eq!(
            pointers(&parse(v.clone()).validate(2, &|_| true)),
            ["/axis/direction"]
        );
        v["axis"] = json!({"name": "deck", "direction": [1, 1]});
        assert!(parse(v.clone()).validate(2, &|_| true).is_empty());
        assert_eq!(
            pointers(&parse(v.clone()).validate(3, &|_| true)),
            ["/axis/direction"]
        );
        let mut w = base();
        w["axis"] = json!({"name": "deck", "direction": [1, 0]});
        assert_eq!(pointers(&parse(w).validate(2, &|_| true)), ["/axis"]);
        let mut r = base();
        r["quantity"] = json!("strain_rate");
        assert_eq!(
            pointers(&parse(r.clone()).validate(2, &|_| true)),
            ["/rate_of"]
        );
        r["rate_of"] = json!("strain_rate");
        assert_eq!(
            pointers(&parse(r.clone()).validate(2, &|_| true)),
            ["/rate_of"]
        );
        r["rate_of"] = json!("axial");
        assert_eq!(
            pointers(&parse(r.clone()).validate(2, &|_| true)),
            ["/axis"]
        );
        r["axis"] = json!({"name": "deck", "direction": [3, 4]});
        let ok = parse(r);
        assert!(ok.validate(2, &|_| true).is_empty());
        assert_eq!(ok.value_unit(), "microstrain_per_day");
        assert_eq!(ok.base_quantity(), Quantity::Axial);
        let mut t = base();
        t["rate_of"] = json!("volumetric");
        assert_eq!(pointers(&parse(t).validate(2, &|_| true)), ["/rate_of"]);
    }

    #[test]
    fn unknown_fields_and_quantities_do_not_parse() {
        let mut v = base();
        v["quantity"] = json!("von_mises");
        assert!(serde_json::from_value::<RuleDefinition>(v).is_err());
        let mut v = base();
        v["limit"] = json!(5);
        assert!(serde_json::from_value::<RuleDefinition>(v).is_err());
    }

    #[test]
    fn directions_are_normalised() {
        let n = unit_vector(&[3.0, 4.0]).expect("non-zero");
        assert!((n[0] - 0.6).abs() < 1e-15 && (n[1] - 0.8).abs() < 1e-15 && n[2] == 0.0);
        let big = unit_vector(&[1e300, 1e300, 0.0]).expect("no overflow");
        assert!((big[0] - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-15);
        assert!(unit_vector(&[0.0, 0.0]).is_none());
        assert!(unit_vector(&[]).is_none());
    }
}
