//! Sensor batches and readings.

use kinema_server::model::{Reading, now_utc};
use kinema_server::store::{BatchMeta, DynStore, NewReading, StoreError};
use time::OffsetDateTime;
use time::macros::datetime;

use crate::structures::{point, structure};

crate::contract!(
    batch_round_trip_and_readings_in_point_order,
    epochs_are_listed_with_counts_and_bounds,
    dropped_writer_leaves_nothing,
    stored_reading_is_a_conflict_naming_point_and_epoch,
    idempotency_keys_are_unique_per_structure,
    batches_page_by_received_at_and_id,
    delete_structure_removes_batches_and_readings,
    three_d_readings_keep_uz_and_sigma_z,
    epoch_bounds_are_the_first_and_the_latest_before,
);

const T1: OffsetDateTime = datetime!(2026-11-30 06:00:00.000001 UTC);
const T2: OffsetDateTime = datetime!(2026-11-30 12:00:00 UTC);

/// A structure `id` with 2D points P1, P2, P10.
async fn setup(store: &DynStore, id: &str) {
    store
        .put_structure(&structure(id, 2))
        .await
        .expect("structure");
    store
        .put_points(
            id,
            &[
                point("P2", 1.0, 0.0),
                point("P10", 0.0, 1.0),
                point("P1", 0.0, 0.0),
            ],
        )
        .await
        .expect("points");
}

fn meta(key: Option<&str>) -> BatchMeta {
    BatchMeta {
        received_at: now_utc(),
        media_type: "application/json".into(),
        idempotency_key: key.map(str::to_owned),
        body_sha256: "ab".repeat(32),
        jobs: Vec::new(),
    }
}

/// A reading for [`write`]: point, epoch, ux, uy, sigma (metres).
type Row<'a> = (&'a str, OffsetDateTime, f64, f64, Option<[f64; 3]>);

/// Write `rows` as one batch and commit.
async fn write(
    store: &DynStore,
    id: &str,
    rows: &[Row<'_>],
    key: Option<&str>,
) -> Result<kinema_server::model::Batch, StoreError> {
    let mut w = store.begin_batch(id, None).await?;
    let pts = w.points();
    let chunk: Vec<NewReading> = rows
        .iter()
        .map(|&(p, epoch, ux, uy, sigma)| NewReading {
            point_key: pts[p],
            epoch,
            u: [ux, uy, 0.0],
            sigma,
        })
        .collect();
    w.write(&chunk).await?;
    w.commit(meta(key)).await
}

async fn batch_round_trip_and_readings_in_point_order(store: DynStore) {
    setup(&store, "W1").await;
    let b = write(
        &store,
        "W1",
        &[
            ("P2", T1, 0.001, -0.002, Some([0.0005, 0.0006, 0.0])),
            ("P10", T1, 0.25, 0.5, None),
            ("P1", T1, -1.0e-6, 2.5e-6, None),
            ("P1", T2, 0.003, 0.004, None),
        ],
        None,
    )
    .await
    .expect("batch");
    assert_eq!((b.readings, b.points, b.epochs), (4, 3, 2));
    assert_eq!((b.first_epoch, b.last_epoch), (T1, T2));
    assert_eq!(b.structure_id, "W1");
    assert_eq!(
        store.get_batch("W1", b.id).await.expect("get"),
        Some(b.clone())
    );
    assert_eq!(store.get_batch("other", b.id).await.expect("get"), None);
    let at = store.readings_at("W1", T1).await.expect("readings");
    // Point ID order is byte order: "P1" < "P10" < "P2".
    assert_eq!(
        at,
        vec![
            Reading {
                point_id: "P1".into(),
                epoch: T1,
                u: vec![-1.0e-6, 2.5e-6],
                sigma: None
            },
            Reading {
                point_id: "P10".into(),
                epoch: T1,
                u: vec![0.25, 0.5],
                sigma: None
            },
            Reading {
                point_id: "P2".into(),
                epoch: T1,
                u: vec![0.001, -0.002],
                sigma: Some(vec![0.0005, 0.0006])
            },
        ]
    );
    assert!(
        store
            .readings_at("W1", datetime!(2020-01-01 0:00 UTC))
            .await
            .expect("none")
            .is_empty()
    );
}

async fn epochs_are_listed_with_counts_and_bounds(store: DynStore) {
    setup(&store, "W2").await;
    write(
        &store,
        "W2",
        &[
            ("P1", T2, 0.0, 0.0, None),
            ("P2", T2, 0.0, 0.0, None),
            ("P1", T1, 0.0, 0.0, None),
        ],
        None,
    )
    .await
    .expect("batch");
    let e = store.list_epochs("W2", None, None).await.expect("epochs");
    assert_eq!(
        e.iter().map(|e| (e.epoch, e.readings)).collect::<Vec<_>>(),
        [(T1, 1), (T2, 2)]
    );
    let e = store.list_epochs("W2", Some(T2), None).await.expect("from");
    assert_eq!(e.len(), 1);
    let e = store
        .list_epochs("W2", None, Some(T1))
        .await
        .expect("to (inclusive)");
    assert_eq!(e.iter().map(|e| e.epoch).collect::<Vec<_>>(), [T1]);
    assert!(
        store
            .list_epochs("nope", None, None)
            .await
            .expect("unknown")
            .is_empty()
    );
}

async fn dropped_writer_leaves_nothing(store: DynStore) {
    setup(&store, "W3").await;
    let mut w = store.begin_batch("W3", None).await.expect("begin");
    let k = w.points()["P1"];
    w.write(&[NewReading {
        point_key: k,
        epoch: T1,
        u: [1.0, 2.0, 0.0],
        sigma: None,
    }])
    .await
    .expect("write");
    drop(w);
    assert!(
        store
            .list_epochs("W3", None, None)
            .await
            .expect("epochs")
            .is_empty()
    );
    assert!(
        store
            .list_batches("W3", None, 10)
            .await
            .expect("batches")
            .is_empty()
    );
    // The structure is writable again afterwards.
    write(&store, "W3", &[("P1", T1, 0.0, 0.0, None)], None)
        .await
        .expect("batch after rollback");
    let empty = store.begin_batch("W3", None).await.expect("begin");
    assert!(matches!(
        empty.commit(meta(None)).await,
        Err(StoreError::Invalid(_))
    ));
    assert!(matches!(
        store.begin_batch("nope", None).await.err(),
        Some(StoreError::NotFound(_))
    ));
}

async fn stored_reading_is_a_conflict_naming_point_and_epoch(store: DynStore) {
    setup(&store, "W4").await;
    write(&store, "W4", &[("P2", T1, 0.0, 0.0, None)], None)
        .await
        .expect("first");
    let e = write(
        &store,
        "W4",
        &[("P1", T1, 0.0, 0.0, None), ("P2", T1, 1.0, 1.0, None)],
        None,
    )
    .await
    .expect_err("same point and epoch again");
    let StoreError::Conflict(m) = e else {
        panic!("not a conflict: {e:?}")
    };
    assert!(
        m.contains("P2") && m.contains("2026-11-30T06:00:00.000001Z"),
        "{m}"
    );
    assert_eq!(
        store.list_epochs("W4", None, None).await.expect("epochs")[0].readings,
        1
    );
}

async fn idempotency_keys_are_unique_per_structure(store: DynStore) {
    setup(&store, "W5").await;
    setup(&store, "W6").await;
    let b = write(
        &store,
        "W5",
        &[("P1", T1, 0.0, 0.0, None)],
        Some("logger-7:0001"),
    )
    .await
    .expect("first");
    let found = store
        .batch_by_idempotency_key("W5", "logger-7:0001")
        .await
        .expect("lookup")
        .expect("found");
    assert_eq!(found.batch, b);
    assert_eq!(found.body_sha256, "ab".repeat(32));
    assert_eq!(found.response, serde_json::to_value(&b).expect("json"));
    let e = write(
        &store,
        "W5",
        &[("P1", T2, 0.0, 0.0, None)],
        Some("logger-7:0001"),
    )
    .await
    .expect_err("taken");
    assert!(matches!(e, StoreError::Conflict(_)), "{e:?}");
    assert_eq!(
        store
            .list_epochs("W5", None, None)
            .await
            .expect("epochs")
            .len(),
        1,
        "nothing of the loser stays"
    );
    write(
        &store,
        "W6",
        &[("P1", T1, 0.0, 0.0, None)],
        Some("logger-7:0001"),
    )
    .await
    .expect("other structure");
    assert!(
        store
            .batch_by_idempotency_key("W5", "other")
            .await
            .expect("lookup")
            .is_none()
    );
}

async fn batches_page_by_received_at_and_id(store: DynStore) {
    setup(&store, "W7").await;
    let mut ids = Vec::new();
    for (i, t) in [T1, T2, datetime!(2026-12-01 0:00 UTC)]
        .into_iter()
        .enumerate()
    {
        let b = write(&store, "W7", &[("P1", t, i as f64, 0.0, None)], None)
            .await
            .expect("batch");
        ids.push(b.id);
    }
    let first = store.list_batches("W7", None, 2).await.expect("page 1");
    assert_eq!(first.iter().map(|b| b.id).collect::<Vec<_>>(), ids[..2]);
    let last = &first[1];
    let rest = store
        .list_batches("W7", Some((last.received_at, last.id)), 2)
        .await
        .expect("page 2");
    assert_eq!(rest.iter().map(|b| b.id).collect::<Vec<_>>(), ids[2..]);
}

async fn delete_structure_removes_batches_and_readings(store: DynStore) {
    setup(&store, "W8").await;
    let b = write(&store, "W8", &[("P1", T1, 0.0, 0.0, None)], Some("k"))
        .await
        .expect("batch");
    assert!(store.delete_structure("W8").await.expect("delete"));
    setup(&store, "W8").await;
    assert!(
        store
            .list_epochs("W8", None, None)
            .await
            .expect("epochs")
            .is_empty(),
        "no orphaned readings"
    );
    assert_eq!(store.get_batch("W8", b.id).await.expect("get"), None);
    assert!(
        store
            .batch_by_idempotency_key("W8", "k")
            .await
            .expect("lookup")
            .is_none()
    );
    write(&store, "W8", &[("P1", T1, 0.0, 0.0, None)], Some("k"))
        .await
        .expect("same reading again after delete");
}

async fn three_d_readings_keep_uz_and_sigma_z(store: DynStore) {
    store
        .put_structure(&structure("D3", 3))
        .await
        .expect("structure");
    store
        .put_points(
            "D3",
            &[kinema_server::model::StoredPoint {
                id: "A".into(),
                x: vec![0.0, 0.0, 0.0],
                sigma: None,
            }],
        )
        .await
        .expect("points");
    let mut w = store.begin_batch("D3", None).await.expect("begin");
    assert_eq!(w.dimension(), 3);
    let k = w.points()["A"];
    w.write(&[NewReading {
        point_key: k,
        epoch: T1,
        u: [0.1, 0.2, -0.3],
        sigma: Some([0.001, 0.002, 0.003]),
    }])
    .await
    .expect("write");
    w.commit(meta(None)).await.expect("commit");
    let r = store.readings_at("D3", T1).await.expect("readings");
    assert_eq!(r[0].u, [0.1, 0.2, -0.3]);
    assert_eq!(r[0].sigma.as_deref(), Some(&[0.001, 0.002, 0.003][..]));
}

async fn epoch_bounds_are_the_first_and_the_latest_before(store: DynStore) {
    setup(&store, "W9").await;
    let t3 = datetime!(2026-12-01 00:00:00 UTC);
    assert_eq!(store.first_epoch("W9").await.expect("empty"), None);
    assert_eq!(store.epoch_before("W9", t3).await.expect("empty"), None);
    write(
        &store,
        "W9",
        &[
            ("P1", T2, 0.0, 0.0, None),
            ("P1", T1, 0.0, 0.0, None),
            ("P2", t3, 0.0, 0.0, None),
        ],
        None,
    )
    .await
    .expect("batch");
    assert_eq!(store.first_epoch("W9").await.expect("first"), Some(T1));
    let before = |t| store.epoch_before("W9", t);
    assert_eq!(before(t3).await.expect("t3"), Some(T2));
    assert_eq!(before(T2).await.expect("T2"), Some(T1));
    assert_eq!(before(T1).await.expect("T1"), None, "strictly before");
    assert_eq!(store.first_epoch("NOPE").await.expect("unknown"), None);
    assert_eq!(store.epoch_before("NOPE", t3).await.expect("unknown"), None);
}
