//! The pure evaluation of a structure's alert rules against one finished analysis
//! ([`evaluate`], of type [`crate::store::Evaluator`]): per rule and region in scope,
//! the value of the watched quantity, the level it reaches under hysteresis and
//! significance, the state to store and the events to record.
//!
//! Levels: `0` is below every level, `k` the rule's `k`-th level (thresholds
//! `T_1 < … < T_n`, hysteresis `h`). With current level `L` and magnitude `m`:
//! `up = max{k : m ≥ T_k}`; if `up > L` the region is raised to `up` (when the
//! significance test, if the rule has one, passes); otherwise it goes to
//! `max{k ≤ L : m ≥ T_k − h}` (0 if none), which clears it when that is below `L`.
//! A value hovering at a threshold therefore does not flap.
//!
//! Significance: a level is raised only if `|value| > z_{1−α/2}·sd` (two-sided test
//! of "no strain" on the quantity at level α). A crossing that fails it, or has no
//! standard deviation, raises nothing and records one `not_significant` event when
//! that condition starts (the state keeps a `suppressed` flag until it ends).
//!
//! Kinematic estimates, not a structural assessment; the thresholds are the user's.

use std::collections::{HashMap, HashSet};

use kinema_core::significance::chi2_critical;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use time::OffsetDateTime;
use uuid::Uuid;

use super::quantity::{Measured, Region, ResultView, convert};
use super::rule::{Quantity, RegionScope, RuleDefinition};
use kinema_core::timeseries::SECONDS_PER_DAY;

use crate::model::{
    AlertEventKind, AlertRuleRecord, AlertState, Analysis, AnalysisKind, AnalysisStatus,
    Evaluation, NewAlertEvent, Structure, rfc3339,
};
use crate::units::StrainUnit;

/// The two-sided standard-normal critical value `z_{1−α/2}`, from the χ² critical
/// value with one degree of freedom: `Z² ~ χ²(1)`, so `P(|Z| > z) = P(χ²(1) > z²)`.
/// `None` for `alpha` outside (0, 1).
pub fn z_two_sided(alpha: f64) -> Option<f64> {
    chi2_critical(alpha, 1.0).ok().map(f64::sqrt)
}

/// The quantity's value at one epoch, kept to form a rate at the next (dimensionless
/// strain).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Basis {
    /// Which quantity it is (`rate_of`, with the axis for an axial one).
    pub of: String,
    /// The value, dimensionless strain.
    pub value: f64,
    /// Its standard deviation, dimensionless strain.
    pub sd: Option<f64>,
    /// The epoch, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339")]
    pub epoch: OffsetDateTime,
    /// What the value is measured from: the analysis's baseline epoch, RFC 3339 UTC, or
    /// `null` for the reference coordinates. Two values form a rate only when they are
    /// measured from the same thing, or when the later one is the change since the
    /// earlier one's epoch.
    #[serde(default, with = "time::serde::rfc3339::option")]
    pub from: Option<OffsetDateTime>,
}

/// What a region's state keeps between evaluations ([`AlertState::data`]).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(default)]
pub struct StateData {
    /// The last evaluated value, in `unit`; `None` when there was none (a rate at the
    /// first evaluation).
    pub value: Option<f64>,
    /// Its standard deviation, in `unit`.
    pub sd: Option<f64>,
    /// Unit of `value` and `sd`: `strain`, `microstrain`, or either `_per_day`.
    pub unit: Option<String>,
    /// The epoch evaluated, RFC 3339 UTC.
    #[serde(with = "time::serde::rfc3339::option")]
    pub epoch: Option<OffsetDateTime>,
    /// The analysis evaluated.
    pub analysis_id: Option<Uuid>,
    /// Whether a crossing is being held back as not significant (its one
    /// `not_significant` event is recorded).
    pub suppressed: bool,
    /// `strain_rate` rules: the watched quantity at the last epoch evaluated.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub basis: Option<Basis>,
    /// `strain_rate` rules: the basis of the epoch before, which a re-analysis of the
    /// same epoch forms its rate from.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub previous_basis: Option<Basis>,
}

impl StateData {
    /// The data of a stored state (defaults for anything it lacks).
    pub fn of(s: &AlertState) -> Self {
        serde_json::from_value(s.data.clone()).unwrap_or_default()
    }

    fn to_json(&self) -> Value {
        serde_json::to_value(self).unwrap_or(Value::Null)
    }
}

/// A rule ready to be applied.
struct Prepared<'r> {
    id: Uuid,
    def: &'r RuleDefinition,
    axis: Option<[f64; 3]>,
    /// Identifies the quantity a rate is formed of (see [`Basis::of`]).
    basis_of: String,
    z: Option<f64>,
    elements: HashSet<&'r str>,
    groups: HashSet<&'r str>,
    points: HashSet<&'r str>,
    everything: bool,
}

fn prepare<'r>(record: &AlertRuleRecord, def: &'r RuleDefinition, dim: u8) -> Option<Prepared<'r>> {
    if !def.enabled || !def.validate(dim, &|_| true).is_empty() {
        return None;
    }
    let axis = def.axis_unit();
    let base = def.base_quantity();
    let basis_of = match (base, axis) {
        (Quantity::Axial, Some(n)) => format!("axial:{},{},{}", n[0], n[1], n[2]),
        (q, _) => q.as_str().to_owned(),
    };
    let z = match &def.significance {
        Some(s) => Some(z_two_sided(s.alpha)?),
        None => None,
    };
    let set = |v: &'r [String]| v.iter().map(String::as_str).collect::<HashSet<_>>();
    let (elements, groups, points) = match &def.scope {
        Some(s) => (set(&s.elements), set(&s.groups), set(&s.points)),
        None => (HashSet::new(), HashSet::new(), HashSet::new()),
    };
    Some(Prepared {
        id: record.id,
        def,
        axis,
        basis_of,
        z,
        elements,
        groups,
        points,
        everything: def.scope.as_ref().is_none_or(RegionScope::is_everything),
    })
}

impl Prepared<'_> {
    /// Whether `r` is in the rule's scope (see [`RegionScope`]).
    fn watches(&self, r: &Region<'_>) -> bool {
        self.everything
            || (r.section == "elements" && self.elements.contains(r.label.as_str()))
            || (r.section == "groups" && self.groups.contains(r.label.as_str()))
            || (matches!(r.section, "neighbourhoods" | "network")
                && self.points.contains(r.label.as_str()))
            || r.members.iter().any(|m| self.points.contains(m.as_str()))
    }

    /// `v` in unit `from` as a value in the rule's unit.
    fn in_unit(&self, v: f64, from: StrainUnit) -> f64 {
        convert(v, from, self.def.unit)
    }
}

/// How a rate was formed, for the evidence.
enum RateFrom {
    /// From the previous evaluated value.
    Previous {
        from_epoch: OffsetDateTime,
        dt_days: f64,
    },
    /// From a series' `rates` section.
    Series,
}

/// Apply `rules` of `structure` (with the current `states`) to `analysis` at time
/// `now`: the states to write and the events to record, in rule then region order.
///
/// Nothing is evaluated for an analysis without a result (failed), for disabled rules
/// and for definitions that do not parse or no longer fit the structure. An epoch
/// analysis is evaluated at `analysis.epoch` on the rows of its main section; a series
/// at `series_last` on the rows of `cumulative` at that epoch (and, for rates, its
/// `rates` section: the least-squares slope per day). A region whose stored state is of
/// a later epoch is skipped: a late result changes nothing.
pub fn evaluate(
    structure: &Structure,
    rules: &[AlertRuleRecord],
    states: &[AlertState],
    analysis: &Analysis,
    now: OffsetDateTime,
) -> Evaluation {
    let mut out = Evaluation::default();
    // Nothing to read the result for (the store calls this inside its transaction).
    if rules.is_empty() || analysis.status != AnalysisStatus::Succeeded {
        return out;
    }
    let Some(doc) = analysis.result.as_ref() else {
        return out;
    };
    let Some(view) = ResultView::of(analysis, doc, usize::from(structure.dimension)) else {
        return out;
    };
    let current: HashMap<(Uuid, &str), &AlertState> = states
        .iter()
        .map(|s| ((s.rule_id, s.region.as_str()), s))
        .collect();
    let defs: Vec<(&AlertRuleRecord, RuleDefinition)> = rules
        .iter()
        .filter_map(|r| Some((r, RuleDefinition::of_record(r)?)))
        .collect();
    for (record, def) in &defs {
        let Some(rule) = prepare(record, def, structure.dimension) else {
            continue;
        };
        let mut seen = HashSet::new();
        for region in &view.regions {
            if !rule.watches(region) || !seen.insert(region.label.as_str()) {
                continue;
            }
            let state = current.get(&(rule.id, region.label.as_str())).copied();
            if let Some((s, e)) = step(&rule, region, state, &view, analysis, now) {
                out.states.push(s);
                out.events.extend(e);
            }
        }
    }
    out
}

/// One rule on one region: the new state and its events; `None` when the region is
/// skipped (stale, or no value at all).
fn step(
    rule: &Prepared<'_>,
    region: &Region<'_>,
    state: Option<&AlertState>,
    view: &ResultView<'_>,
    analysis: &Analysis,
    now: OffsetDateTime,
) -> Option<(AlertState, Vec<NewAlertEvent>)> {
    let prev = state.map(StateData::of).unwrap_or_default();
    if prev.epoch.is_some_and(|e| e > view.epoch) {
        return None;
    }
    let def = rule.def;
    let base = region.row.measure(def.base_quantity(), rule.axis);
    let mut data = StateData {
        unit: Some(def.value_unit()),
        epoch: Some(view.epoch),
        analysis_id: Some(analysis.id),
        ..StateData::default()
    };
    let (measured, rate_from) = if def.is_rate() {
        let to_strain = |v: f64| convert(v, view.unit, StrainUnit::Strain);
        let basis = base.map(|b| Basis {
            of: rule.basis_of.clone(),
            value: to_strain(b.value),
            sd: b.sd.map(to_strain),
            epoch: view.epoch,
            from: analysis.baseline_epoch,
        });
        let mine = |b: &Option<Basis>| b.clone().filter(|b| b.of == rule.basis_of);
        // A re-analysis of the same epoch forms its rate from the epoch before.
        let (earlier, previous_basis) = match mine(&prev.basis) {
            Some(b) if b.epoch == view.epoch => {
                (mine(&prev.previous_basis), mine(&prev.previous_basis))
            }
            Some(b) => (Some(b.clone()), Some(b)),
            None => (None, None),
        };
        data.previous_basis = previous_basis;
        // A series gives its rate from its own `rates` section only (its cumulative
        // values are relative to its baseline, not to the previous analysis).
        let rate = if analysis.kind == AnalysisKind::Series {
            view.series_rate(region, def.base_quantity(), rule.axis)
                .map(|m| (m, view.unit, RateFrom::Series))
        } else {
            match (&basis, earlier) {
                (Some(now_b), Some(then)) if then.epoch < now_b.epoch => {
                    let dt_days = (now_b.epoch - then.epoch).as_seconds_f64() / SECONDS_PER_DAY;
                    // Measured from the same thing: the rate is the difference over the
                    // time; the later value being the change since the earlier epoch
                    // (a `previous_epoch` baseline): it is the increment itself.
                    let change = if now_b.from == then.from {
                        let sd = match (now_b.sd, then.sd) {
                            (Some(a), Some(b)) => Some(a.hypot(b)),
                            _ => None,
                        };
                        Some((now_b.value - then.value, sd))
                    } else if now_b.from == Some(then.epoch) {
                        Some((now_b.value, now_b.sd))
                    } else {
                        None
                    };
                    change.map(|(dv, sd)| {
                        (
                            Measured {
                                value: dv / dt_days,
                                sd: sd.map(|s| s / dt_days),
                                sd_approximation: base.is_some_and(|b| b.sd_approximation),
                            },
                            StrainUnit::Strain,
                            RateFrom::Previous {
                                from_epoch: then.epoch,
                                dt_days,
                            },
                        )
                    })
                }
                _ => None,
            }
        };
        if basis.is_none() && rate.is_none() {
            return None;
        }
        data.basis = basis.or_else(|| mine(&prev.basis));
        match rate {
            Some((m, unit, f)) => (Some((m, unit)), Some(f)),
            None => (None, None),
        }
    } else {
        (Some((base?, view.unit)), None)
    };
    let prev_level = state.map_or(0, |s| s.level);
    let mut events = Vec::new();
    let level = match measured {
        None => prev_level,
        Some((m, unit)) => {
            let value = rule.in_unit(m.value, unit);
            let sd = m.sd.map(|s| rule.in_unit(s, unit));
            data.value = Some(value);
            data.sd = sd;
            let t = Transition::decide(def, prev_level, prev.suppressed, value, sd, rule.z);
            data.suppressed = t.suppressed;
            if let Some(kind) = t.event {
                let ctx = Evidence {
                    rule,
                    region,
                    analysis,
                    epoch: view.epoch,
                    value,
                    sd,
                    sd_approximation: m.sd_approximation,
                    rate_from: rate_from.as_ref(),
                };
                events.push(NewAlertEvent {
                    id: Uuid::new_v4(),
                    rule_id: rule.id,
                    region: region.label.clone(),
                    kind,
                    from_level: prev_level,
                    to_level: t.level,
                    evidence: ctx.json(kind, prev_level, t.level, t.crossed_up_to, t.significant),
                });
            }
            t.level
        }
    };
    Some((
        AlertState {
            rule_id: rule.id,
            region: region.label.clone(),
            level,
            data: data.to_json(),
            updated_at: now,
        },
        events,
    ))
}

/// What one value does to a region's level.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Transition {
    /// The level after.
    level: u32,
    /// The event to record, if any.
    event: Option<AlertEventKind>,
    /// The state's `suppressed` flag after.
    suppressed: bool,
    /// The highest level whose threshold the magnitude reaches (`up`).
    crossed_up_to: u32,
    /// The outcome of the significance test of a crossing, when one was made.
    significant: Option<bool>,
}

impl Transition {
    /// The hysteresis and significance rules of the module notes. `value` and `sd` are
    /// in the rule's unit; `z` is the critical value when the rule tests significance.
    fn decide(
        def: &RuleDefinition,
        prev_level: u32,
        suppressed: bool,
        value: f64,
        sd: Option<f64>,
        z: Option<f64>,
    ) -> Self {
        let n = u32::try_from(def.levels.len()).unwrap_or(u32::MAX);
        let current = prev_level.min(n);
        let m = def.sense().magnitude(value);
        let threshold = |k: u32| def.levels[(k - 1) as usize].threshold;
        let up = (1..=n).rev().find(|&k| m >= threshold(k)).unwrap_or(0);
        if up > current {
            let significant = z.map(|z| sd.is_some_and(|sd| value.abs() > z * sd));
            if significant == Some(false) {
                return Self {
                    level: prev_level,
                    event: (!suppressed).then_some(AlertEventKind::NotSignificant),
                    suppressed: true,
                    crossed_up_to: up,
                    significant,
                };
            }
            return Self {
                level: up,
                event: Some(AlertEventKind::Raised),
                suppressed: false,
                crossed_up_to: up,
                significant,
            };
        }
        let h = def.hysteresis;
        let held = (1..=current)
            .rev()
            .find(|&k| m >= threshold(k) - h)
            .unwrap_or(0);
        Self {
            level: held,
            event: (held < prev_level).then_some(AlertEventKind::Cleared),
            suppressed: false,
            crossed_up_to: up,
            significant: None,
        }
    }
}

/// What an event's evidence is made of.
struct Evidence<'a> {
    rule: &'a Prepared<'a>,
    region: &'a Region<'a>,
    analysis: &'a Analysis,
    epoch: OffsetDateTime,
    value: f64,
    sd: Option<f64>,
    sd_approximation: bool,
    rate_from: Option<&'a RateFrom>,
}

impl Evidence<'_> {
    fn json(
        &self,
        kind: AlertEventKind,
        from: u32,
        to: u32,
        up: u32,
        significant: Option<bool>,
    ) -> Value {
        let def = self.rule.def;
        let name = |k: u32| -> Value {
            match k {
                0 => Value::Null,
                k => def
                    .levels
                    .get((k - 1) as usize)
                    .map_or(Value::Null, |l| Value::String(l.name.clone())),
            }
        };
        let level = |k: u32, clear: bool| {
            let l = &def.levels[(k - 1) as usize];
            if clear {
                json!({"level": k, "name": l.name, "threshold": l.threshold,
                       "clears_below": l.threshold - def.hysteresis})
            } else {
                json!({"level": k, "name": l.name, "threshold": l.threshold})
            }
        };
        let n = u32::try_from(def.levels.len()).unwrap_or(u32::MAX);
        let thresholds: Vec<Value> = match kind {
            AlertEventKind::Raised => (from.min(n) + 1..=to).map(|k| level(k, false)).collect(),
            AlertEventKind::NotSignificant => {
                (from.min(n) + 1..=up).map(|k| level(k, false)).collect()
            }
            AlertEventKind::Cleared => (to + 1..=from.min(n)).map(|k| level(k, true)).collect(),
        };
        let significance = match (&def.significance, self.rule.z) {
            (Some(s), Some(z)) => json!({
                "alpha": s.alpha,
                "z": z,
                "test": "two-sided: |value| > z * sd",
                "significant": significant,
            }),
            _ => Value::Null,
        };
        let rate = match self.rate_from {
            Some(RateFrom::Previous {
                from_epoch,
                dt_days,
            }) => json!({
                "from": "the previous evaluated value: (v - v_prev) / dt_days, sd = sqrt(sd^2 + sd_prev^2) / dt_days",
                "from_epoch": rfc3339(*from_epoch),
                "dt_days": dt_days,
            }),
            Some(RateFrom::Series) => json!({
                "from": "the series' rates section: least-squares slope per day of the strain components",
            }),
            None => Value::Null,
        };
        json!({
            "rule": def.name,
            "rule_id": self.rule.id,
            "region": self.region.label,
            "section": self.region.section,
            "quantity": def.quantity,
            "rate_of": def.rate_of,
            "axis": def.axis.as_ref().map(|a| json!({
                "name": a.name,
                "direction": self.rule.axis.map(|n| n[..self.region.row.dim()].to_vec()),
            })),
            "sense": def.sense(),
            "unit": def.value_unit(),
            "value": self.value,
            "sd": self.sd,
            "sd_approximation": self.sd_approximation.then_some(
                "propagated from the strain components' standard deviations ignoring their correlations"
            ),
            "magnitude": def.sense().magnitude(self.value),
            "thresholds": thresholds,
            "from_level": from,
            "from_level_name": name(from),
            "to_level": to,
            "to_level_name": name(to),
            "hysteresis": def.hysteresis,
            "significance": significance,
            "rate": rate,
            "epoch": rfc3339(self.epoch),
            "analysis_id": self.analysis.id,
            "analysis_kind": self.analysis.kind.as_str(),
            "method": self.analysis.method,
            "caution": super::CAUTION,
        })
    }
}

#[cfg(test)]
mod tests {
    use serde_json::json;

    use super::*;
    use crate::alerts::fixtures::{
        T0, analysis_with, apply, day, one, real_epoch2, real_series2, row, rule, structure,
        tensile,
    };
    use crate::units::StrainUnit;

    fn kinds(e: &Evaluation) -> Vec<(AlertEventKind, u32, u32)> {
        e.events
            .iter()
            .map(|x| (x.kind, x.from_level, x.to_level))
            .collect()
    }

    fn level(states: &[AlertState], region: &str) -> u32 {
        states
            .iter()
            .find(|s| s.region == region)
            .map(|s| s.level)
            .expect("a state of the region")
    }

    #[test]
    fn z_is_the_standard_normal_quantile() {
        // scipy.stats.norm.ppf(0.975) = 1.959963984540054, norm.ppf(0.995) =
        // 2.5758293035489004 (from memory).
        let z = z_two_sided(0.05).expect("valid alpha");
        assert!((z - 1.959_963_984_540_054).abs() < 1e-9, "{z}");
        let z = z_two_sided(0.01).expect("valid alpha");
        assert!((z - 2.575_829_303_548_900_4).abs() < 1e-9, "{z}");
        assert!(z_two_sided(0.0).is_none());
    }

    #[test]
    fn hovering_at_a_threshold_does_not_flap_and_clears_only_below_t_minus_h() {
        let s = structure(2);
        let rules = [tensile(json!({}))];
        let mut st = Vec::new();
        let steps = [
            (100.0, vec![(AlertEventKind::Raised, 0, 1)], 1),
            (95.0, vec![], 1),
            (100.0, vec![], 1),
            (99.9, vec![], 1),
            (90.0, vec![], 1),
            (89.9, vec![(AlertEventKind::Cleared, 1, 0)], 0),
            (95.0, vec![], 0),
        ];
        for (i, (v, want, lvl)) in steps.into_iter().enumerate() {
            let e = apply(&s, &rules, &mut st, &one(v, None, day(i as f64)));
            assert_eq!(kinds(&e), want, "step {i}: value {v}");
            assert_eq!(e.states.len(), 1, "every evaluated region gets its state");
            assert_eq!(level(&st, "E1"), lvl, "step {i}");
        }
    }

    #[test]
    fn a_rise_through_two_levels_is_one_event_and_a_fall_clears_step_by_step() {
        let s = structure(2);
        let rules = [tensile(json!({}))];
        let mut st = Vec::new();
        let e = apply(&s, &rules, &mut st, &one(250.0, None, day(0.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 2)]);
        let ev = &e.events[0].evidence;
        assert_eq!(ev["thresholds"].as_array().map(Vec::len), Some(2));
        assert_eq!(ev["from_level_name"], Value::Null);
        assert_eq!(ev["to_level_name"], "alarm");
        assert_eq!(ev["value"], 250.0);
        assert_eq!(ev["magnitude"], 250.0);
        assert_eq!(ev["unit"], "microstrain");
        assert_eq!(ev["quantity"], "principal_tensile");
        assert_eq!(ev["sense"], "positive");
        assert_eq!(ev["hysteresis"], 10.0);
        assert_eq!(ev["method"], "elements");
        assert_eq!(ev["epoch"], "2026-03-01T06:00:00Z");
        // 2 → 1: below 200 − 10 but not below 100 − 10.
        let e = apply(&s, &rules, &mut st, &one(191.0, None, day(1.0)));
        assert!(e.events.is_empty());
        let e = apply(&s, &rules, &mut st, &one(185.0, None, day(2.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Cleared, 2, 1)]);
        assert_eq!(e.events[0].evidence["thresholds"][0]["clears_below"], 190.0);
        assert_eq!(e.events[0].evidence["to_level_name"], "watch");
        // Far below both: straight to 0.
        let e = apply(&s, &rules, &mut st, &one(250.0, None, day(3.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 1, 2)]);
        let e = apply(&s, &rules, &mut st, &one(-40.0, None, day(4.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Cleared, 2, 0)]);
        assert_eq!(
            e.events[0].evidence["thresholds"].as_array().map(Vec::len),
            Some(2)
        );
    }

    #[test]
    fn a_crossing_inside_the_noise_raises_nothing_and_is_reported_once() {
        let s = structure(2);
        let rules = [tensile(json!({"significance": {"alpha": 0.05}}))];
        let mut st = Vec::new();
        // 150 ± 100: 150 < 1.96·100, not significant.
        let e = apply(&s, &rules, &mut st, &one(150.0, Some(100.0), day(0.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::NotSignificant, 0, 0)]);
        let sig = &e.events[0].evidence["significance"];
        assert_eq!(sig["significant"], false);
        assert_eq!(sig["alpha"], 0.05);
        assert!((sig["z"].as_f64().expect("z") - 1.959_963_984_540_054).abs() < 1e-9);
        assert_eq!(level(&st, "E1"), 0);
        assert_eq!(st[0].data["suppressed"], true);
        // Still inside the noise: no second event.
        let e = apply(&s, &rules, &mut st, &one(160.0, Some(100.0), day(1.0)));
        assert!(e.events.is_empty(), "{:?}", e.events);
        // Clearly significant: raised.
        let e = apply(&s, &rules, &mut st, &one(160.0, Some(10.0), day(2.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 1)]);
        assert_eq!(e.events[0].evidence["significance"]["significant"], true);
        assert_eq!(st[0].data["suppressed"], false);
    }

    #[test]
    fn without_a_standard_deviation_a_significance_rule_raises_nothing() {
        let s = structure(2);
        let rules = [tensile(json!({"significance": {}}))];
        let mut st = Vec::new();
        let e = apply(&s, &rules, &mut st, &one(500.0, None, day(0.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::NotSignificant, 0, 0)]);
        assert_eq!(e.events[0].evidence["sd"], Value::Null);
        // The condition ends below the thresholds, and a new crossing is reported again.
        let e = apply(&s, &rules, &mut st, &one(50.0, None, day(1.0)));
        assert!(e.events.is_empty());
        let e = apply(&s, &rules, &mut st, &one(500.0, None, day(2.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::NotSignificant, 0, 0)]);
        // Without the test the same value raises.
        let plain = [tensile(json!({}))];
        let e = apply(&s, &plain, &mut Vec::new(), &one(500.0, None, day(2.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 2)]);
    }

    #[test]
    fn scopes_pick_elements_groups_and_points_and_leave_the_rest_alone() {
        let s = structure(2);
        let elements = analysis_with(
            "elements",
            vec![
                row("E1", &["A", "B", "C"], 150.0, None),
                row("E2", &["B", "D", "C"], 150.0, None),
                row("E3", &["D", "F", "G"], 150.0, None),
            ],
            day(0.0),
        );
        let regions = |scope: Value, a: &Analysis| -> Vec<String> {
            let r = [tensile(json!({ "scope": scope }))];
            evaluate(&s, &r, &[], a, T0)
                .states
                .into_iter()
                .map(|x| x.region)
                .collect()
        };
        assert_eq!(regions(json!({}), &elements), ["E1", "E2", "E3"]);
        assert_eq!(regions(json!({"elements": ["E2"]}), &elements), ["E2"]);
        // Group names do not match element rows.
        assert!(regions(json!({"groups": ["E2"]}), &elements).is_empty());
        // Points: by membership.
        assert_eq!(regions(json!({"points": ["D"]}), &elements), ["E2", "E3"]);
        assert_eq!(
            regions(json!({"elements": ["E1"], "points": ["G"]}), &elements),
            ["E1", "E3"]
        );
        let groups = analysis_with(
            "groups",
            vec![
                row("north", &["A", "B", "C", "D"], 150.0, None),
                row("south", &["F", "G", "H"], 150.0, None),
            ],
            day(0.0),
        );
        assert_eq!(regions(json!({"groups": ["south"]}), &groups), ["south"]);
        assert!(regions(json!({"elements": ["south"]}), &groups).is_empty());
        // Neighbourhood rows are labelled with their centre point.
        let hoods = analysis_with(
            "neighbourhoods",
            vec![
                row("P1", &["P1", "P2", "P3", "P4"], 150.0, None),
                row("P9", &["P9", "P8", "P7", "P6"], 150.0, None),
            ],
            day(0.0),
        );
        assert_eq!(regions(json!({"points": ["P9"]}), &hoods), ["P9"]);
        assert_eq!(regions(json!({"points": ["P3"]}), &hoods), ["P1"]);
        // Out-of-scope regions keep their states: none is written for them.
        let mut st = Vec::new();
        let all = [tensile(json!({}))];
        apply(&s, &all, &mut st, &one(250.0, None, day(0.0)));
        let only_e2 = [AlertRuleRecord {
            definition: tensile(json!({"scope": {"elements": ["E2"]}})).definition,
            ..all[0].clone()
        }];
        let e = apply(&s, &only_e2, &mut st, &one(0.0, None, day(1.0)));
        assert!(e.states.is_empty() && e.events.is_empty());
        assert_eq!(level(&st, "E1"), 2);
    }

    #[test]
    fn a_strain_rate_needs_two_analyses() {
        let s = structure(2);
        let rules = [rule(json!({
            "name": "tension rate",
            "quantity": "strain_rate",
            "rate_of": "principal_tensile",
            "unit": "microstrain",
            "levels": [{"name": "fast", "threshold": 20}]
        }))];
        let mut st = Vec::new();
        let e = apply(&s, &rules, &mut st, &one(100.0, Some(4.0), day(0.0)));
        assert!(e.events.is_empty(), "the first evaluation has no rate");
        assert_eq!(e.states.len(), 1);
        assert_eq!(e.states[0].data["value"], Value::Null);
        assert_eq!(e.states[0].data["unit"], "microstrain_per_day");
        // (160 − 100) / 2 days = 30 µε/day; sd = sqrt(4² + 3²) / 2 = 2.5.
        let e = apply(&s, &rules, &mut st, &one(160.0, Some(3.0), day(2.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 1)]);
        let ev = &e.events[0].evidence;
        assert!(
            (ev["value"].as_f64().expect("rate") - 30.0).abs() < 1e-9,
            "{ev}"
        );
        assert!((ev["sd"].as_f64().expect("sd") - 2.5).abs() < 1e-9, "{ev}");
        assert_eq!(ev["unit"], "microstrain_per_day");
        assert!((ev["rate"]["dt_days"].as_f64().expect("dt") - 2.0).abs() < 1e-12);
        assert_eq!(ev["rate"]["from_epoch"], "2026-03-01T06:00:00Z");
        // A re-analysis of the same epoch forms its rate from the epoch before again:
        // (120 − 100) / 2 = 10 µε/day, below 20 − 0: cleared.
        let e = apply(&s, &rules, &mut st, &one(120.0, Some(3.0), day(2.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Cleared, 1, 0)]);
        assert!((e.events[0].evidence["value"].as_f64().expect("rate") - 10.0).abs() < 1e-9);
    }

    #[test]
    fn a_rate_is_formed_only_from_values_measured_from_the_same_thing() {
        let s = structure(2);
        let rules = [rule(json!({
            "name": "tension rate",
            "quantity": "strain_rate",
            "rate_of": "principal_tensile",
            "unit": "microstrain",
            "levels": [{"name": "fast", "threshold": 20}]
        }))];
        let from = |mut a: Analysis, b: Option<f64>| {
            a.baseline_epoch = b.map(day);
            a
        };
        // Increments (`previous_epoch`): each value is the change since the epoch
        // before, so the rate is the value over the time, not a difference of values:
        // 50 µε in 2 days = 25 µε/day (a difference would give (50 − 40)/2 = 5).
        let mut st = Vec::new();
        apply(
            &s,
            &rules,
            &mut st,
            &from(one(40.0, Some(2.0), day(2.0)), Some(0.0)),
        );
        let e = apply(
            &s,
            &rules,
            &mut st,
            &from(one(50.0, Some(2.0), day(4.0)), Some(2.0)),
        );
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 1)]);
        let ev = &e.events[0].evidence;
        assert!(
            (ev["value"].as_f64().expect("rate") - 25.0).abs() < 1e-9,
            "{ev}"
        );
        assert!((ev["sd"].as_f64().expect("sd") - 1.0).abs() < 1e-9, "{ev}");
        // Measured from different things (the reference coordinates, then a baseline
        // epoch that is not the previous one): no rate, and no change of level.
        let mut st = Vec::new();
        apply(
            &s,
            &rules,
            &mut st,
            &from(one(100.0, Some(2.0), day(0.0)), None),
        );
        let e = apply(
            &s,
            &rules,
            &mut st,
            &from(one(300.0, Some(2.0), day(2.0)), Some(-5.0)),
        );
        assert!(e.events.is_empty(), "{:?}", e.events);
        assert_eq!(e.states[0].data["value"], Value::Null);
        // … but the next one measured like the last forms its rate again:
        // (340 − 300) / 1 day = 40 µε/day.
        let e = apply(
            &s,
            &rules,
            &mut st,
            &from(one(340.0, Some(2.0), day(3.0)), Some(-5.0)),
        );
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 1)]);
        assert!((e.events[0].evidence["value"].as_f64().expect("rate") - 40.0).abs() < 1e-9);
    }

    #[test]
    fn a_series_gives_its_rate_from_the_rates_section() {
        let s = structure(2);
        // exx grows by 8 µε/day; eyy, exy stay 0: e1 = exx, axial at 45° = exx/2.
        let a = real_series2([[8e-6, 0.0], [0.0, 0.0]], &[0.0, 1.0, 2.0, 4.0]);
        let rate = |extra: Value| {
            let mut d = json!({
                "name": "rate",
                "quantity": "strain_rate",
                "unit": "microstrain",
                "levels": [{"name": "fast", "threshold": 1}]
            });
            for (k, v) in extra.as_object().expect("object") {
                d[k] = v.clone();
            }
            rule(d)
        };
        let rules = [
            rate(json!({"rate_of": "principal_tensile"})),
            rate(json!({"rate_of": "axial", "axis": {"name": "diagonal", "direction": [1, 1]}})),
        ];
        let e = evaluate(&s, &rules, &[], &a, T0);
        assert_eq!(e.states.len(), 4, "two rules, two elements");
        for st in &e.states {
            let v = st.data["value"].as_f64().expect("a rate");
            let want = if st.rule_id == rules[0].id { 8.0 } else { 4.0 };
            assert!((v - want).abs() < 1e-6, "{v} vs {want}");
            assert_eq!(st.data["epoch"], "2026-03-05T06:00:00Z", "series_last");
        }
        assert_eq!(kinds(&e).len(), 4);
        assert_eq!(
            e.events[0].evidence["analysis_kind"], "series",
            "{}",
            e.events[0].evidence
        );
        // A level on the cumulative value at the last epoch: 32 µε at day 4.
        let cum = [rule(json!({
            "name": "cumulative",
            "quantity": "axial",
            "axis": {"name": "x", "direction": [1, 0]},
            "unit": "microstrain",
            "levels": [{"name": "watch", "threshold": 30}, {"name": "alarm", "threshold": 33}]
        }))];
        let e = evaluate(&s, &cum, &[], &a, T0);
        assert_eq!(kinds(&e), [(AlertEventKind::Raised, 0, 1); 2]);
        let v = e.events[0].evidence["value"].as_f64().expect("value");
        assert!((v - 32.0).abs() < 1e-6, "{v}");
    }

    #[test]
    fn a_late_result_of_an_earlier_epoch_changes_nothing() {
        let s = structure(2);
        let rules = [tensile(json!({}))];
        let mut st = Vec::new();
        apply(&s, &rules, &mut st, &one(250.0, None, day(5.0)));
        let e = apply(&s, &rules, &mut st, &one(0.0, None, day(3.0)));
        assert!(e.states.is_empty() && e.events.is_empty());
        assert_eq!(level(&st, "E1"), 2);
        // The same epoch again is not stale.
        let e = apply(&s, &rules, &mut st, &one(0.0, None, day(5.0)));
        assert_eq!(kinds(&e), [(AlertEventKind::Cleared, 2, 0)]);
    }

    #[test]
    fn disabled_broken_rules_and_failed_analyses_are_skipped() {
        let s = structure(2);
        let rules = [
            tensile(json!({"enabled": false})),
            rule(json!({"name": "not a rule"})),
            rule(json!({
                "name": "wrong dimension",
                "quantity": "axial",
                "axis": {"name": "z", "direction": [0, 0, 1]},
                "unit": "strain",
                "levels": [{"name": "l", "threshold": 0.0001}]
            })),
        ];
        let e = evaluate(&s, &rules, &[], &one(250.0, None, day(0.0)), T0);
        assert_eq!(e, Evaluation::default());
        let mut failed = one(250.0, None, day(0.0));
        failed.status = AnalysisStatus::Failed;
        failed.result = None;
        let e = evaluate(&s, &[tensile(json!({}))], &[], &failed, T0);
        assert_eq!(e, Evaluation::default());
    }

    #[test]
    fn real_results_give_the_textbook_values_in_the_rule_unit() {
        // exx = 300, eyy = −100, exy = 50 µε: e1,2 = 100 ± sqrt(200² + 50²) µε
        // (Gere & Goodno, Mechanics of Materials).
        let s = structure(2);
        let a = real_epoch2(
            [[300e-6, 50e-6], [50e-6, -100e-6]],
            Some(0.0005),
            StrainUnit::Microstrain,
            day(0.0),
        );
        let r = 42500f64.sqrt();
        let rules = [
            rule(
                json!({"name": "t", "quantity": "principal_tensile", "unit": "strain",
                "levels": [{"name": "l", "threshold": 0.0003}]}),
            ),
            rule(
                json!({"name": "c", "quantity": "principal_compressive", "unit": "microstrain",
                "levels": [{"name": "l", "threshold": 100}]}),
            ),
            rule(
                json!({"name": "s", "quantity": "max_shear", "unit": "microstrain",
                "levels": [{"name": "l", "threshold": 400}]}),
            ),
            rule(
                json!({"name": "v", "quantity": "volumetric", "unit": "microstrain",
                "levels": [{"name": "l", "threshold": 150}]}),
            ),
            rule(
                json!({"name": "a", "quantity": "axial", "unit": "microstrain",
                "axis": {"name": "diagonal", "direction": [1, 1]},
                "levels": [{"name": "l", "threshold": 149}]}),
            ),
        ];
        let e = evaluate(&s, &rules, &[], &a, T0);
        let value = |rule: usize| {
            let st = e
                .states
                .iter()
                .find(|x| x.rule_id == rules[rule].id && x.region == "E1")
                .expect("state");
            st.data["value"].as_f64().expect("value")
        };
        assert!((value(0) - (100.0 + r) * 1e-6).abs() < 1e-15);
        assert!((value(1) - (100.0 - r)).abs() < 1e-9);
        assert!((value(2) - 2.0 * r).abs() < 1e-9);
        assert!((value(3) - 200.0).abs() < 1e-9);
        assert!((value(4) - 150.0).abs() < 1e-9);
        // Each crosses its first level on both elements (homogeneous field), the
        // compressive one by its negative sense.
        assert_eq!(e.events.len(), 10);
        assert!(e.events.iter().all(|x| x.kind == AlertEventKind::Raised));
        let compressive = e
            .events
            .iter()
            .find(|x| x.rule_id == rules[1].id)
            .expect("event");
        assert_eq!(compressive.evidence["sense"], "negative");
        assert!(
            (compressive.evidence["magnitude"].as_f64().expect("m") - (r - 100.0)).abs() < 1e-9
        );
        // The axial one says how its sd was formed.
        let axial = e
            .events
            .iter()
            .find(|x| x.rule_id == rules[4].id)
            .expect("event");
        assert!(axial.evidence["sd"].as_f64().is_some());
        assert!(axial.evidence["sd_approximation"].as_str().is_some());
    }
}
