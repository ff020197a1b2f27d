//! Webhook subscriptions, the outbox of events and deliveries that `complete_job`
//! writes, and the dispatcher's claims, attempts and replays.

use kinema_server::model::{
    Delivery, DeliveryAttempt, DeliveryNext, DeliveryQuery, DeliveryStatus, EventType,
};
use kinema_server::store::{DynStore, StoreError};
use serde_json::json;
use uuid::Uuid;

use crate::alerts::{doc, rule, threshold_evaluator};
use crate::jobs::{at, no_alerts, run_job, setup, subscription};

crate::contract!(
    subscriptions_round_trip_with_their_secret_list_and_delete,
    deliveries_go_only_to_matching_subscriptions,
    claim_dispatch_gives_pending_deliveries_in_seq_order_to_one_dispatcher,
    a_head_that_is_not_due_holds_the_subscription_back,
    record_attempt_needs_the_claim_and_moves_the_delivery_on,
    replay_adds_a_delivery_with_the_same_event,
    deleting_a_subscription_removes_its_deliveries_and_their_log,
);

fn all(limit: usize) -> DeliveryQuery {
    DeliveryQuery {
        limit,
        ..DeliveryQuery::default()
    }
}

async fn deliveries(store: &DynStore, subscription: Uuid) -> Vec<Delivery> {
    store
        .list_deliveries(subscription, &all(100))
        .await
        .expect("deliveries")
}

/// One attempt of `delivery` by `worker` at `T0 + m` minutes.
fn attempt(
    delivery: Uuid,
    n: u32,
    worker: &str,
    m: i64,
    status_code: Option<u16>,
    error: Option<&str>,
) -> DeliveryAttempt {
    DeliveryAttempt {
        delivery_id: delivery,
        attempt: n,
        at: at(m),
        worker: worker.into(),
        status_code,
        error: error.map(str::to_owned),
        duration_ms: 42,
    }
}

async fn subscriptions_round_trip_with_their_secret_list_and_delete(store: DynStore) {
    assert!(matches!(
        store
            .insert_subscription(&subscription(Some("NOPE"), &EventType::ALL, 0))
            .await,
        Err(StoreError::NotFound(_))
    ));
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    let global = subscription(None, &[EventType::AlertRaised, EventType::AlertCleared], 0);
    let own = subscription(Some("W1"), &[EventType::AnalysisFinished], 1);
    let other = subscription(Some("W2"), &EventType::ALL, 2);
    for s in [&own, &global, &other] {
        store.insert_subscription(s).await.expect("insert");
    }
    let back = store
        .get_subscription(global.id)
        .await
        .expect("get")
        .expect("stored");
    assert_eq!(back, global);
    assert_eq!(back.secret, global.secret, "the secret is kept");
    assert_eq!(
        store.get_subscription(own.id).await.expect("get"),
        Some(own.clone())
    );
    assert_eq!(
        store.get_subscription(Uuid::new_v4()).await.expect("get"),
        None
    );
    assert!(matches!(
        store.insert_subscription(&own).await,
        Err(StoreError::Conflict(_))
    ));
    let mut no_events = subscription(None, &[], 3);
    no_events.events.clear();
    assert!(matches!(
        store.insert_subscription(&no_events).await,
        Err(StoreError::Invalid(_))
    ));
    let listed = store.list_subscriptions(None).await.expect("list");
    assert_eq!(
        listed.iter().map(|s| s.id).collect::<Vec<_>>(),
        [global.id, own.id, other.id],
        "oldest first"
    );
    let of_w1 = store.list_subscriptions(Some("W1")).await.expect("list");
    assert_eq!(
        of_w1,
        vec![own.clone()],
        "a structure's own, not the global ones"
    );
    assert!(store.delete_subscription(own.id).await.expect("delete"));
    assert!(!store.delete_subscription(own.id).await.expect("again"));
    assert!(
        store
            .list_subscriptions(Some("W1"))
            .await
            .expect("list")
            .is_empty()
    );
    assert_eq!(store.list_subscriptions(None).await.expect("list").len(), 2);
}

async fn deliveries_go_only_to_matching_subscriptions(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    store.put_alert_rule(&rule("W1", 0)).await.expect("rule");
    let global = subscription(None, &EventType::ALL, 0);
    let finished = subscription(Some("W1"), &[EventType::AnalysisFinished], 1);
    let cleared = subscription(Some("W1"), &[EventType::AlertCleared], 2);
    let other = subscription(Some("W2"), &EventType::ALL, 3);
    for s in [&global, &finished, &cleared, &other] {
        store.insert_subscription(s).await.expect("insert");
    }
    let (_, done) = run_job(
        &store,
        "W1",
        at(1),
        doc(&[("E1", 900.0)]),
        &threshold_evaluator,
    )
    .await;
    // analysis.finished → global, finished; alert.raised → global.
    assert_eq!(done.deliveries, 3);
    let types = |d: Vec<Delivery>| d.into_iter().map(|d| d.event_type).collect::<Vec<_>>();
    assert_eq!(
        types(deliveries(&store, global.id).await),
        [EventType::AnalysisFinished, EventType::AlertRaised]
    );
    assert_eq!(
        types(deliveries(&store, finished.id).await),
        [EventType::AnalysisFinished]
    );
    assert!(
        deliveries(&store, cleared.id).await.is_empty(),
        "another event type"
    );
    assert!(
        deliveries(&store, other.id).await.is_empty(),
        "another structure"
    );
    let d = &deliveries(&store, finished.id).await[0];
    assert_eq!(d.status, DeliveryStatus::Pending);
    assert_eq!(
        (d.attempts, d.next_attempt_at, d.created_at),
        (0, at(1), at(1))
    );
    assert_eq!((d.last_error.as_deref(), d.delivered_at), (None, None));
    let g = &deliveries(&store, global.id).await[0];
    assert_eq!(
        g.event_id, d.event_id,
        "one event, a delivery per subscription"
    );
    assert_ne!(g.id, d.id);

    let (_, done) = run_job(&store, "W2", at(2), json!({"elements": []}), &no_alerts).await;
    assert_eq!(
        done.deliveries, 2,
        "W2's analysis.finished → global and W2's own"
    );
    assert_eq!(deliveries(&store, other.id).await.len(), 1);
    assert_eq!(deliveries(&store, finished.id).await.len(), 1);
}

/// Three analyses of W1 at T0 + 1, 2, 3 minutes (three `analysis.finished` events).
async fn three_events(store: &DynStore) {
    for m in 1..=3 {
        run_job(store, "W1", at(m), json!({"n": m}), &no_alerts).await;
    }
}

async fn claim_dispatch_gives_pending_deliveries_in_seq_order_to_one_dispatcher(store: DynStore) {
    setup(&store, "W1").await;
    let first = subscription(Some("W1"), &[EventType::AnalysisFinished], 0);
    let second = subscription(None, &[EventType::AnalysisFinished], 1);
    store.insert_subscription(&first).await.expect("insert");
    store.insert_subscription(&second).await.expect("insert");
    assert!(
        store
            .claim_dispatch("d1", at(0), at(1), 10)
            .await
            .expect("claim")
            .is_none(),
        "nothing to send yet"
    );
    three_events(&store).await;
    let now = at(3);
    let b1 = store
        .claim_dispatch("d1", now, at(4), 10)
        .await
        .expect("claim")
        .expect("due");
    assert_eq!(
        b1.subscription.id, first.id,
        "the oldest waiting delivery first"
    );
    assert_eq!(b1.subscription.secret, first.secret);
    let seqs: Vec<_> = b1.items.iter().map(|(d, _)| d.seq).collect();
    assert_eq!(seqs.len(), 3);
    assert!(seqs.windows(2).all(|w| w[0] < w[1]), "seq order");
    for ((d, e), m) in b1.items.iter().zip(1..) {
        assert_eq!(d.subscription_id, first.id);
        assert_eq!(
            (e.id, e.event_type),
            (d.event_id, EventType::AnalysisFinished)
        );
        assert_eq!(e.structure_id, "W1");
        assert_eq!(e.occurred_at, at(m));
        assert_eq!(e.body["id"], json!(e.id));
        assert_eq!(e.body["type"], "analysis.finished");
        assert_eq!(e.body["structure_id"], "W1");
        assert!(
            e.body["caution"].is_string(),
            "the envelope carries the caution"
        );
    }
    let b2 = store
        .claim_dispatch("d2", now, at(4), 2)
        .await
        .expect("claim")
        .expect("the other subscription");
    assert_eq!(b2.subscription.id, second.id);
    assert_eq!(b2.items.len(), 2, "at most max");
    assert!(
        store
            .claim_dispatch("d3", now, at(4), 10)
            .await
            .expect("claim")
            .is_none(),
        "both subscriptions are held"
    );
    store
        .release_dispatch("d2", first.id)
        .await
        .expect("not held by d2: no error");
    assert!(
        store
            .claim_dispatch("d3", now, at(4), 10)
            .await
            .expect("claim")
            .is_none(),
        "a release by a non-holder changes nothing"
    );
    store
        .release_dispatch("d1", first.id)
        .await
        .expect("release");
    let b3 = store
        .claim_dispatch("d3", now, at(10), 10)
        .await
        .expect("claim")
        .expect("released");
    assert_eq!(b3.subscription.id, first.id);
    assert_eq!(
        b3.items, b1.items,
        "nothing was sent: the same deliveries again"
    );
    // d2's claim on the second subscription expires at T0+4min.
    let b4 = store
        .claim_dispatch("d4", at(5), at(6), 10)
        .await
        .expect("claim")
        .expect("an expired claim");
    assert_eq!(b4.subscription.id, second.id);
    assert!(
        matches!(
            store
                .record_attempt(
                    "d2",
                    &attempt(b2.items[0].0.id, 1, "d2", 5, Some(200), None),
                    DeliveryNext::Delivered
                )
                .await,
            Err(StoreError::Conflict(_))
        ),
        "the dispatcher that lost its claim cannot record"
    );
}

async fn a_head_that_is_not_due_holds_the_subscription_back(store: DynStore) {
    setup(&store, "W1").await;
    let s = subscription(None, &EventType::ALL, 0);
    store.insert_subscription(&s).await.expect("insert");
    three_events(&store).await;
    let b = store
        .claim_dispatch("d1", at(3), at(4), 10)
        .await
        .expect("claim")
        .expect("due");
    let head = b.items[0].0.clone();
    store
        .record_attempt(
            "d1",
            &attempt(head.id, 1, "d1", 3, Some(503), None),
            DeliveryNext::RetryAt(at(30)),
        )
        .await
        .expect("record");
    store.release_dispatch("d1", s.id).await.expect("release");
    assert!(
        store
            .claim_dispatch("d2", at(10), at(11), 10)
            .await
            .expect("claim")
            .is_none(),
        "the head waits until T0+30min and the later ones wait behind it"
    );
    let b = store
        .claim_dispatch("d2", at(30), at(31), 10)
        .await
        .expect("claim")
        .expect("due again");
    assert_eq!(b.items[0].0.id, head.id, "order is kept");
    assert_eq!(b.items[0].0.attempts, 1);
    assert_eq!(b.items.len(), 3);
}

async fn record_attempt_needs_the_claim_and_moves_the_delivery_on(store: DynStore) {
    setup(&store, "W1").await;
    let s = subscription(None, &EventType::ALL, 0);
    store.insert_subscription(&s).await.expect("insert");
    three_events(&store).await;
    let ids: Vec<Uuid> = deliveries(&store, s.id)
        .await
        .iter()
        .map(|d| d.id)
        .collect();
    assert!(
        matches!(
            store
                .record_attempt(
                    "d1",
                    &attempt(ids[0], 1, "d1", 3, Some(200), None),
                    DeliveryNext::Delivered
                )
                .await,
            Err(StoreError::Conflict(_))
        ),
        "nobody holds the subscription yet"
    );
    store
        .claim_dispatch("d1", at(3), at(10), 10)
        .await
        .expect("claim")
        .expect("due");
    assert!(
        matches!(
            store
                .record_attempt(
                    "d2",
                    &attempt(ids[0], 1, "d2", 3, Some(200), None),
                    DeliveryNext::Delivered
                )
                .await,
            Err(StoreError::Conflict(_))
        ),
        "a non-holder"
    );
    assert!(matches!(
        store
            .record_attempt(
                "d1",
                &attempt(Uuid::new_v4(), 1, "d1", 3, None, None),
                DeliveryNext::GiveUp
            )
            .await,
        Err(StoreError::NotFound(_))
    ));
    let (d, log) = store
        .get_delivery(s.id, ids[0])
        .await
        .expect("get")
        .expect("delivery");
    assert!(log.is_empty(), "refused attempts are not logged");
    assert_eq!((d.status, d.attempts), (DeliveryStatus::Pending, 0));

    // Retry: HTTP 503, again at T0+4min.
    let a1 = attempt(ids[0], 1, "d1", 3, Some(503), None);
    store
        .record_attempt("d1", &a1, DeliveryNext::RetryAt(at(4)))
        .await
        .expect("retry");
    let (d, log) = store
        .get_delivery(s.id, ids[0])
        .await
        .expect("get")
        .expect("delivery");
    assert_eq!(d.status, DeliveryStatus::Pending);
    assert_eq!((d.attempts, d.next_attempt_at), (1, at(4)));
    assert_eq!(d.last_error.as_deref(), Some("HTTP 503"));
    assert_eq!(log, vec![a1.clone()]);
    assert!(
        matches!(
            store
                .record_attempt("d1", &a1, DeliveryNext::RetryAt(at(5)))
                .await,
            Err(StoreError::Conflict(_))
        ),
        "an attempt is logged once"
    );

    // Delivered on the second attempt.
    let a2 = attempt(ids[0], 2, "d1", 4, Some(204), None);
    store
        .record_attempt("d1", &a2, DeliveryNext::Delivered)
        .await
        .expect("delivered");
    let (d, log) = store
        .get_delivery(s.id, ids[0])
        .await
        .expect("get")
        .expect("delivery");
    assert_eq!(d.status, DeliveryStatus::Delivered);
    assert_eq!(
        (d.attempts, d.delivered_at, d.last_error.as_deref()),
        (2, Some(at(4)), None)
    );
    assert_eq!(log, vec![a1, a2]);
    assert!(
        matches!(
            store
                .record_attempt(
                    "d1",
                    &attempt(ids[0], 3, "d1", 5, Some(200), None),
                    DeliveryNext::Delivered
                )
                .await,
            Err(StoreError::Conflict(_))
        ),
        "a delivered delivery takes no more attempts"
    );

    // Given up: a connection error.
    let a = attempt(ids[1], 1, "d1", 5, None, Some("connection refused"));
    store
        .record_attempt("d1", &a, DeliveryNext::GiveUp)
        .await
        .expect("give up");
    let (d, _) = store
        .get_delivery(s.id, ids[1])
        .await
        .expect("get")
        .expect("delivery");
    assert_eq!(d.status, DeliveryStatus::Failed);
    assert_eq!(d.last_error.as_deref(), Some("connection refused"));
    assert_eq!(d.delivered_at, None);

    let ids_of = |v: Vec<Delivery>| v.into_iter().map(|d| d.id).collect::<Vec<_>>();
    for (st, want) in [
        (DeliveryStatus::Delivered, ids[0]),
        (DeliveryStatus::Failed, ids[1]),
        (DeliveryStatus::Pending, ids[2]),
    ] {
        let q = DeliveryQuery {
            status: Some(st),
            ..all(10)
        };
        let listed = store.list_deliveries(s.id, &q).await.expect("list");
        assert_eq!(ids_of(listed), [want], "deliveries {st:?}");
    }
    let after = store
        .list_deliveries(
            s.id,
            &DeliveryQuery {
                after_seq: Some(deliveries(&store, s.id).await[0].seq),
                limit: 1,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("page");
    assert_eq!(ids_of(after), [ids[1]]);
    assert_eq!(
        store
            .get_delivery(Uuid::new_v4(), ids[0])
            .await
            .expect("get"),
        None
    );
}

async fn replay_adds_a_delivery_with_the_same_event(store: DynStore) {
    setup(&store, "W1").await;
    let s = subscription(None, &EventType::ALL, 0);
    // Gets no deliveries here (no alerts): only to ask for another's delivery.
    let other = subscription(None, &[EventType::AlertRaised], 1);
    store.insert_subscription(&s).await.expect("insert");
    store.insert_subscription(&other).await.expect("insert");
    run_job(&store, "W1", at(1), json!({}), &no_alerts).await;
    let b = store
        .claim_dispatch("d1", at(1), at(2), 10)
        .await
        .expect("claim")
        .expect("due");
    assert_eq!(b.subscription.id, s.id);
    let (original, event) = b.items[0].clone();
    store
        .record_attempt(
            "d1",
            &attempt(original.id, 1, "d1", 1, Some(500), None),
            DeliveryNext::GiveUp,
        )
        .await
        .expect("give up");
    store.release_dispatch("d1", s.id).await.expect("release");
    assert_eq!(
        store
            .replay_delivery(other.id, original.id, at(9))
            .await
            .expect("replay"),
        None,
        "not a delivery of that subscription"
    );
    assert_eq!(
        store
            .replay_delivery(s.id, Uuid::new_v4(), at(9))
            .await
            .expect("replay"),
        None
    );
    let replayed = store
        .replay_delivery(s.id, original.id, at(9))
        .await
        .expect("replay")
        .expect("a new delivery");
    assert_ne!(replayed.id, original.id);
    assert!(replayed.seq > original.seq, "at the end of the order");
    assert_eq!(replayed.event_id, original.event_id);
    assert_eq!(replayed.status, DeliveryStatus::Pending);
    assert_eq!((replayed.attempts, replayed.next_attempt_at), (0, at(9)));
    let (back, log) = store
        .get_delivery(s.id, replayed.id)
        .await
        .expect("get")
        .expect("stored");
    assert_eq!(back, replayed);
    assert!(log.is_empty());
    let (kept, _) = store
        .get_delivery(s.id, original.id)
        .await
        .expect("get")
        .expect("stored");
    assert_eq!(
        kept.status,
        DeliveryStatus::Failed,
        "the original stays as it was"
    );
    let b = store
        .claim_dispatch("d2", at(9), at(10), 10)
        .await
        .expect("claim")
        .expect("the replay is due");
    assert_eq!(b.subscription.id, s.id);
    assert_eq!(b.items.len(), 1);
    assert_eq!(b.items[0].0.id, replayed.id);
    assert_eq!(b.items[0].1, event, "the same event ID and body");
}

async fn deleting_a_subscription_removes_its_deliveries_and_their_log(store: DynStore) {
    setup(&store, "W1").await;
    let s = subscription(None, &EventType::ALL, 0);
    let kept = subscription(None, &EventType::ALL, 1);
    store.insert_subscription(&s).await.expect("insert");
    store.insert_subscription(&kept).await.expect("insert");
    run_job(&store, "W1", at(1), json!({}), &no_alerts).await;
    let b = store
        .claim_dispatch("d1", at(1), at(2), 10)
        .await
        .expect("claim")
        .expect("due");
    let id = b.items[0].0.id;
    store
        .record_attempt(
            "d1",
            &attempt(id, 1, "d1", 1, Some(500), None),
            DeliveryNext::RetryAt(at(2)),
        )
        .await
        .expect("record");
    assert!(store.delete_subscription(s.id).await.expect("delete"));
    assert_eq!(store.get_delivery(s.id, id).await.expect("get"), None);
    assert!(deliveries(&store, s.id).await.is_empty());
    assert_eq!(
        deliveries(&store, kept.id).await.len(),
        1,
        "the event stays for the other subscription"
    );
    let b = store
        .claim_dispatch("d1", at(3), at(4), 10)
        .await
        .expect("claim")
        .expect("the other subscription");
    assert_eq!(b.subscription.id, kept.id);
    assert_eq!(b.items[0].1.occurred_at, at(1));
}
