//! Alert rules, states and events: the store keeps rule definitions without reading
//! them, and writes what an evaluator returns in the transaction of `complete_job`.
//! The evaluator here is the cases' own (one invented threshold per rule, from the
//! rule's definition as a user would configure it), not the service's.

use kinema_server::model::{
    AlertEvent, AlertEventKind, AlertEventQuery, AlertRuleRecord, AlertState, Analysis,
    AnalysisQuery, AnalysisStatus, DeliveryQuery, Evaluation, EventType, JobOutcome, JobStatus,
    NewAlertEvent, Structure,
};
use kinema_server::store::{DynStore, StoreError, Written};
use serde_json::json;
use time::OffsetDateTime;
use uuid::Uuid;

use crate::jobs::{analysis_for, at, claim, new_job, run_job, setup, subscription};

crate::contract!(
    alert_rules_put_get_list_and_delete_with_their_states,
    a_rule_id_of_another_structure_is_a_conflict,
    complete_job_writes_the_evaluators_states_and_events,
    alert_events_are_listed_by_seq_with_filters,
    alert_events_become_webhook_events_with_the_same_id_and_not_significant_none,
    an_evaluation_naming_a_foreign_rule_writes_nothing,
    deleting_a_rule_keeps_its_events,
);

/// A rule of `structure` created at `T0 + created` minutes: raise level 1 when an
/// element's `e1_microstrain` exceeds 500 (an invented user threshold).
pub fn rule(structure: &str, created: i64) -> AlertRuleRecord {
    AlertRuleRecord {
        id: Uuid::new_v4(),
        structure_id: structure.into(),
        definition: json!({"quantity": "e1", "threshold_microstrain": 500.0}),
        created_at: at(created),
        updated_at: at(created),
    }
}

/// A result document with `elements` rows `(label, e1_microstrain)`.
pub fn doc(rows: &[(&str, f64)]) -> serde_json::Value {
    let rows: Vec<_> = rows
        .iter()
        .map(|(label, e1)| json!({"label": label, "members": ["P1", "P2"], "e1_microstrain": e1}))
        .collect();
    json!({"elements": rows})
}

/// The level of `value` under `rule`: 1 above its threshold, else 0.
fn level(rule: &AlertRuleRecord, value: f64) -> u32 {
    let threshold = rule.definition["threshold_microstrain"]
        .as_f64()
        .unwrap_or(f64::INFINITY);
    u32::from(value > threshold)
}

/// The cases' evaluator: for every rule and element, the new level from the threshold,
/// a state per element, and an event when the level changed (`raised` up, `cleared`
/// down). A row marked `"significant": false` above the threshold gives a
/// `not_significant` event and keeps its level.
pub fn threshold_evaluator(
    _: &Structure,
    rules: &[AlertRuleRecord],
    states: &[AlertState],
    a: &Analysis,
    now: OffsetDateTime,
) -> Evaluation {
    let mut out = Evaluation::default();
    let rows = a
        .result
        .as_ref()
        .and_then(|r| r["elements"].as_array().cloned())
        .unwrap_or_default();
    for r in rules {
        for row in &rows {
            let region = row["label"].as_str().unwrap_or_default().to_owned();
            let value = row["e1_microstrain"].as_f64().unwrap_or(0.0);
            let before = states
                .iter()
                .find(|s| s.rule_id == r.id && s.region == region)
                .map_or(0, |s| s.level);
            let mut after = level(r, value);
            let significant = row["significant"].as_bool().unwrap_or(true);
            let kind = if after > before && !significant {
                after = before;
                Some(AlertEventKind::NotSignificant)
            } else if after > before {
                Some(AlertEventKind::Raised)
            } else if after < before {
                Some(AlertEventKind::Cleared)
            } else {
                None
            };
            if let Some(kind) = kind {
                out.events.push(NewAlertEvent {
                    id: Uuid::new_v4(),
                    rule_id: r.id,
                    region: region.clone(),
                    kind,
                    from_level: before,
                    to_level: after,
                    evidence: json!({"value_microstrain": value, "before_states": states.len()}),
                });
            }
            out.states.push(AlertState {
                rule_id: r.id,
                region,
                level: after,
                data: json!({"last_microstrain": value, "analysis_id": a.id}),
                updated_at: now,
            });
        }
    }
    out
}

fn all_events() -> AlertEventQuery {
    AlertEventQuery {
        limit: 100,
        ..AlertEventQuery::default()
    }
}

async fn alert_rules_put_get_list_and_delete_with_their_states(store: DynStore) {
    assert!(matches!(
        store.put_alert_rule(&rule("NOPE", 0)).await,
        Err(StoreError::NotFound(_))
    ));
    setup(&store, "W1").await;
    let first = rule("W1", 0);
    let second = rule("W1", 1);
    assert_eq!(
        store.put_alert_rule(&second).await.expect("put"),
        Written::Created
    );
    assert_eq!(
        store.put_alert_rule(&first).await.expect("put"),
        Written::Created
    );
    assert_eq!(
        store.get_alert_rule("W1", first.id).await.expect("get"),
        Some(first.clone())
    );
    assert_eq!(
        store.get_alert_rule("W2", first.id).await.expect("get"),
        None
    );
    assert_eq!(
        store
            .get_alert_rule("W1", Uuid::new_v4())
            .await
            .expect("get"),
        None
    );
    let mut replaced = first.clone();
    replaced.definition = json!({"quantity": "e1", "threshold_microstrain": 800.0});
    replaced.created_at = at(50);
    replaced.updated_at = at(5);
    assert_eq!(
        store.put_alert_rule(&replaced).await.expect("replace"),
        Written::Updated
    );
    let stored = store
        .get_alert_rule("W1", first.id)
        .await
        .expect("get")
        .expect("rule");
    assert_eq!(stored.definition, replaced.definition);
    assert_eq!(stored.created_at, at(0), "created_at is kept");
    assert_eq!(stored.updated_at, at(5));
    let listed = store.list_alert_rules("W1").await.expect("list");
    assert_eq!(
        listed.iter().map(|r| r.id).collect::<Vec<_>>(),
        [first.id, second.id],
        "oldest first"
    );

    // States of both rules, then the first rule goes with its states.
    run_job(
        &store,
        "W1",
        at(10),
        doc(&[("E1", 900.0)]),
        &threshold_evaluator,
    )
    .await;
    let states = store.list_alert_states("W1").await.expect("states");
    assert_eq!(states.len(), 2);
    assert!(
        store
            .delete_alert_rule("W1", first.id)
            .await
            .expect("delete")
    );
    assert!(
        !store
            .delete_alert_rule("W1", first.id)
            .await
            .expect("again")
    );
    assert!(
        !store
            .delete_alert_rule("W2", second.id)
            .await
            .expect("another structure's"),
        "a rule is deleted through its own structure only"
    );
    let states = store.list_alert_states("W1").await.expect("states");
    assert_eq!(
        states.iter().map(|s| s.rule_id).collect::<Vec<_>>(),
        [second.id],
        "the deleted rule's states are gone"
    );
    assert_eq!(
        store.get_alert_rule("W1", first.id).await.expect("get"),
        None
    );
}

async fn a_rule_id_of_another_structure_is_a_conflict(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    let r = rule("W1", 0);
    store.put_alert_rule(&r).await.expect("put");
    let theirs = AlertRuleRecord {
        structure_id: "W2".into(),
        definition: json!({"threshold_microstrain": 1.0}),
        ..r.clone()
    };
    assert!(matches!(
        store.put_alert_rule(&theirs).await,
        Err(StoreError::Conflict(_))
    ));
    assert_eq!(
        store.get_alert_rule("W1", r.id).await.expect("get"),
        Some(r),
        "the refused put changed nothing"
    );
    assert!(store.list_alert_rules("W2").await.expect("list").is_empty());
}

async fn complete_job_writes_the_evaluators_states_and_events(store: DynStore) {
    setup(&store, "W1").await;
    let r = rule("W1", 0);
    store.put_alert_rule(&r).await.expect("rule");

    // E2 and E10 above 500 µε, E1 below.
    let (a1, done) = run_job(
        &store,
        "W1",
        at(1),
        doc(&[("E2", 650.0), ("E10", 900.0), ("E1", 120.0)]),
        &threshold_evaluator,
    )
    .await;
    let raised: Vec<_> = done
        .alert_events
        .iter()
        .map(|e| (e.region.as_str(), e.kind, e.from_level, e.to_level))
        .collect();
    assert_eq!(
        raised,
        [
            ("E2", AlertEventKind::Raised, 0, 1),
            ("E10", AlertEventKind::Raised, 0, 1)
        ]
    );
    for e in &done.alert_events {
        assert_eq!(
            (e.analysis_id, e.created_at, e.rule_id),
            (a1.id, at(1), r.id)
        );
        assert_eq!(e.structure_id, "W1");
        assert_eq!(e.evidence["before_states"], 0);
    }
    assert!(done.alert_events[0].seq < done.alert_events[1].seq);
    let states = store.list_alert_states("W1").await.expect("states");
    // Regions in byte order: "E1" < "E10" < "E2".
    let summary: Vec<_> = states
        .iter()
        .map(|s| {
            (
                s.region.as_str(),
                s.level,
                s.data["last_microstrain"].as_f64(),
            )
        })
        .collect();
    assert_eq!(
        summary,
        [
            ("E1", 0, Some(120.0)),
            ("E10", 1, Some(900.0)),
            ("E2", 1, Some(650.0))
        ]
    );
    assert!(states.iter().all(|s| s.updated_at == at(1)));
    assert!(states.iter().all(|s| s.data["analysis_id"] == json!(a1.id)));

    // The second evaluation sees the first one's states: E10 drops, E2 stays up.
    let (a2, done) = run_job(
        &store,
        "W1",
        at(2),
        doc(&[("E2", 700.0), ("E10", 100.0), ("E1", 130.0)]),
        &threshold_evaluator,
    )
    .await;
    assert_eq!(done.alert_events.len(), 1);
    let cleared = &done.alert_events[0];
    assert_eq!(
        (
            cleared.region.as_str(),
            cleared.kind,
            cleared.from_level,
            cleared.to_level
        ),
        ("E10", AlertEventKind::Cleared, 1, 0)
    );
    assert_eq!(cleared.evidence["before_states"], 3);
    assert_eq!(cleared.analysis_id, a2.id);
    let states = store.list_alert_states("W1").await.expect("states");
    let levels: Vec<_> = states
        .iter()
        .map(|s| (s.region.as_str(), s.level))
        .collect();
    assert_eq!(levels, [("E1", 0), ("E10", 0), ("E2", 1)]);
    assert!(states.iter().all(|s| s.updated_at == at(2)));
    let logged = store
        .list_alert_events("W1", &all_events())
        .await
        .expect("events");
    assert_eq!(logged.len(), 3);
    assert_eq!(
        logged[2], *cleared,
        "the log holds what complete_job returned"
    );
}

async fn alert_events_are_listed_by_seq_with_filters(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    let r1 = rule("W1", 0);
    let r2 = rule("W1", 1);
    store.put_alert_rule(&r1).await.expect("rule");
    store.put_alert_rule(&r2).await.expect("rule");
    store.put_alert_rule(&rule("W2", 2)).await.expect("rule");
    run_job(
        &store,
        "W1",
        at(1),
        doc(&[("E1", 900.0), ("E2", 900.0)]),
        &threshold_evaluator,
    )
    .await;
    run_job(
        &store,
        "W1",
        at(2),
        doc(&[("E1", 0.0), ("E2", 900.0)]),
        &threshold_evaluator,
    )
    .await;
    run_job(
        &store,
        "W2",
        at(3),
        doc(&[("E1", 900.0)]),
        &threshold_evaluator,
    )
    .await;

    let all = store
        .list_alert_events("W1", &all_events())
        .await
        .expect("events");
    // Two rules × E1, E2 raised, then two rules × E1 cleared.
    assert_eq!(all.len(), 6);
    assert!(
        all.windows(2).all(|w| w[0].seq < w[1].seq),
        "oldest first by seq"
    );
    assert!(all.iter().all(|e| e.structure_id == "W1"));
    let of_rule = store
        .list_alert_events(
            "W1",
            &AlertEventQuery {
                rule_id: Some(r2.id),
                ..all_events()
            },
        )
        .await
        .expect("events");
    assert_eq!(of_rule.len(), 3);
    assert!(of_rule.iter().all(|e| e.rule_id == r2.id));
    let e1_of_r1 = store
        .list_alert_events(
            "W1",
            &AlertEventQuery {
                rule_id: Some(r1.id),
                region: Some("E1".into()),
                ..all_events()
            },
        )
        .await
        .expect("events");
    assert_eq!(
        e1_of_r1.iter().map(|e| e.kind).collect::<Vec<_>>(),
        [AlertEventKind::Raised, AlertEventKind::Cleared]
    );
    let page = store
        .list_alert_events(
            "W1",
            &AlertEventQuery {
                after_seq: Some(all[1].seq),
                limit: 2,
                ..AlertEventQuery::default()
            },
        )
        .await
        .expect("page");
    assert_eq!(page, all[2..4].to_vec());
    let w2 = store
        .list_alert_events("W2", &all_events())
        .await
        .expect("events");
    assert_eq!(w2.len(), 1);
}

async fn alert_events_become_webhook_events_with_the_same_id_and_not_significant_none(
    store: DynStore,
) {
    setup(&store, "W1").await;
    store.put_alert_rule(&rule("W1", 0)).await.expect("rule");
    let alerts = subscription(
        Some("W1"),
        &[EventType::AlertRaised, EventType::AlertCleared],
        0,
    );
    store
        .insert_subscription(&alerts)
        .await
        .expect("subscription");
    let mut document = doc(&[("E1", 900.0), ("E2", 900.0)]);
    document["elements"][1]["significant"] = json!(false);
    let (_, done) = run_job(&store, "W1", at(1), document, &threshold_evaluator).await;
    let kinds: Vec<_> = done.alert_events.iter().map(|e| e.kind).collect();
    assert_eq!(
        kinds,
        [AlertEventKind::Raised, AlertEventKind::NotSignificant]
    );
    assert_eq!(
        done.deliveries, 1,
        "alert.raised only: analysis.finished is not subscribed and not_significant is not sent"
    );
    let raised: &AlertEvent = &done.alert_events[0];
    let deliveries = store
        .list_deliveries(
            alerts.id,
            &DeliveryQuery {
                limit: 10,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("deliveries");
    assert_eq!(deliveries.len(), 1);
    assert_eq!(
        deliveries[0].event_id, raised.id,
        "the webhook event has the alert event's ID"
    );
    assert_eq!(deliveries[0].event_type, EventType::AlertRaised);
    let batch = store
        .claim_dispatch("d1", at(1), at(2), 10)
        .await
        .expect("dispatch")
        .expect("due");
    let (_, event) = &batch.items[0];
    assert_eq!(event.id, raised.id);
    assert_eq!(event.body["id"], json!(raised.id));
    assert_eq!(event.body["type"], "alert.raised");
    assert_eq!(event.body["data"]["region"], "E1");
    assert_eq!(event.body["data"]["rule_id"], json!(raised.rule_id));
    assert_eq!(event.body["data"]["to_level"], 1);
    assert_eq!(event.occurred_at, at(1));

    // Clearing E1 later is sent as alert.cleared.
    let (_, done) = run_job(
        &store,
        "W1",
        at(2),
        doc(&[("E1", 0.0)]),
        &threshold_evaluator,
    )
    .await;
    assert_eq!(done.alert_events[0].kind, AlertEventKind::Cleared);
    assert_eq!(done.deliveries, 1);
    let deliveries = store
        .list_deliveries(
            alerts.id,
            &DeliveryQuery {
                limit: 10,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("deliveries");
    assert_eq!(
        deliveries.iter().map(|d| d.event_type).collect::<Vec<_>>(),
        [EventType::AlertRaised, EventType::AlertCleared]
    );
    assert_eq!(deliveries[1].event_id, done.alert_events[0].id);
}

async fn an_evaluation_naming_a_foreign_rule_writes_nothing(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    let theirs = rule("W2", 0);
    store.put_alert_rule(&theirs).await.expect("rule");
    store.put_alert_rule(&rule("W1", 0)).await.expect("rule");
    let foreign = move |_: &Structure,
                        _: &[AlertRuleRecord],
                        _: &[AlertState],
                        a: &Analysis,
                        now: OffsetDateTime| Evaluation {
        states: vec![AlertState {
            rule_id: theirs.id,
            region: "E1".into(),
            level: 1,
            data: json!({"analysis_id": a.id}),
            updated_at: now,
        }],
        events: Vec::new(),
    };
    store
        .enqueue_job(&new_job("W1", at(0), 3))
        .await
        .expect("enqueue");
    let (job, lease) = claim(&store, "w1", at(0)).await.expect("claim");
    let a = analysis_for(&job, AnalysisStatus::Succeeded, doc(&[("E1", 900.0)]));
    assert!(matches!(
        store
            .complete_job(
                &lease,
                &JobOutcome::Analysis(Box::new(a.clone())),
                &foreign,
                at(1)
            )
            .await,
        Err(StoreError::Invalid(_))
    ));
    let stored = store.get_job(job.id).await.expect("get").expect("job");
    assert_eq!(stored.status, JobStatus::Running, "the job is untouched");
    assert_eq!(stored.analysis_id, None);
    assert_eq!(store.get_analysis("W1", a.id).await.expect("get"), None);
    let analyses = store
        .list_analyses(
            "W1",
            &AnalysisQuery {
                limit: 10,
                ..AnalysisQuery::default()
            },
        )
        .await
        .expect("list");
    assert!(
        analyses.is_empty(),
        "the analysis was rolled back with the rest"
    );
    assert!(
        store
            .list_alert_states("W1")
            .await
            .expect("states")
            .is_empty()
    );
    assert!(
        store
            .list_alert_states("W2")
            .await
            .expect("states")
            .is_empty()
    );
    // The same lease still completes with an evaluation that fits.
    let done = store
        .complete_job(
            &lease,
            &JobOutcome::Analysis(Box::new(a)),
            &threshold_evaluator,
            at(2),
        )
        .await
        .expect("complete");
    assert_eq!(done.alert_events.len(), 1);
}

async fn deleting_a_rule_keeps_its_events(store: DynStore) {
    setup(&store, "W1").await;
    let r = rule("W1", 0);
    store.put_alert_rule(&r).await.expect("rule");
    let (_, done) = run_job(
        &store,
        "W1",
        at(1),
        doc(&[("E1", 900.0)]),
        &threshold_evaluator,
    )
    .await;
    assert!(store.delete_alert_rule("W1", r.id).await.expect("delete"));
    let logged = store
        .list_alert_events("W1", &all_events())
        .await
        .expect("events");
    assert_eq!(logged, done.alert_events, "the log outlives the rule");
    assert!(
        store
            .list_alert_states("W1")
            .await
            .expect("states")
            .is_empty()
    );
    // Without rules, the next analysis evaluates nothing.
    let (_, done) = run_job(
        &store,
        "W1",
        at(2),
        doc(&[("E1", 0.0)]),
        &threshold_evaluator,
    )
    .await;
    assert!(done.alert_events.is_empty());
}
