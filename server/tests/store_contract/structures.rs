//! Structures and monitoring points.

use kinema_server::model::{Frame, StoredPoint, Structure, WgsOrigin, now_utc};
use kinema_server::store::{DynStore, StoreError, Written};
use kinema_server::units::LengthUnit;

crate::contract!(
    put_creates_then_replaces_and_keeps_created_at,
    list_pages_in_id_order_and_filters,
    dimension_cannot_change_under_points,
    points_upsert_in_one_transaction,
    delete_removes_structure_and_points,
    points_of_unknown_structure_are_not_found,
    frame_cannot_change_under_points,
    concurrent_creates_of_one_structure_all_succeed,
);

/// A structure for the contract cases.
pub fn structure(id: &str, dimension: u8) -> Structure {
    let t = now_utc();
    Structure {
        id: id.to_owned(),
        name: format!("Test structure {id}"),
        dimension,
        frame: Frame::Enu {
            origin: WgsOrigin {
                lat_deg: 47.5,
                lon_deg: 8.25,
                h_m: 410.0,
            },
        },
        length_unit: LengthUnit::Millimetre,
        material: None,
        metadata: serde_json::json!({"asset_system_ref": "AS-77", "tags": ["wall"]}),
        created_at: t,
        updated_at: t,
    }
}

/// A 2D point.
pub fn point(id: &str, x: f64, y: f64) -> StoredPoint {
    StoredPoint {
        id: id.to_owned(),
        x: vec![x, y],
        sigma: Some(vec![0.001, 0.002]),
    }
}

async fn put_creates_then_replaces_and_keeps_created_at(store: DynStore) {
    let s = structure("ALRW-01", 2);
    let (w, stored) = store.put_structure(&s).await.expect("create");
    assert_eq!(w, Written::Created);
    assert_eq!(
        stored, s,
        "what is stored is what was put (times to the microsecond)"
    );
    let mut s2 = structure("ALRW-01", 2);
    s2.name = "Renamed".into();
    s2.frame = Frame::Local;
    s2.updated_at = now_utc();
    let (w, stored) = store.put_structure(&s2).await.expect("replace");
    assert_eq!(w, Written::Updated);
    assert_eq!(stored.name, "Renamed");
    assert_eq!(stored.frame, Frame::Local);
    assert_eq!(stored.created_at, s.created_at, "creation time is kept");
    assert_eq!(
        store.get_structure("ALRW-01").await.expect("get"),
        Some(stored)
    );
    assert_eq!(store.get_structure("nope").await.expect("get"), None);
}

async fn list_pages_in_id_order_and_filters(store: DynStore) {
    for id in ["c", "a", "b", "d"] {
        store.put_structure(&structure(id, 2)).await.expect("put");
    }
    let ids = |v: Vec<Structure>| v.into_iter().map(|s| s.id).collect::<Vec<_>>();
    assert_eq!(
        ids(store.list_structures(None, 3, None).await.expect("list")),
        ["a", "b", "c"]
    );
    assert_eq!(
        ids(store
            .list_structures(Some("b"), 10, None)
            .await
            .expect("list")),
        ["c", "d"]
    );
    let only = vec!["d".to_owned(), "a".to_owned(), "zz".to_owned()];
    assert_eq!(
        ids(store
            .list_structures(None, 10, Some(&only))
            .await
            .expect("list")),
        ["a", "d"]
    );
    assert!(
        store
            .list_structures(None, 10, Some(&[]))
            .await
            .expect("list")
            .is_empty()
    );
}

async fn dimension_cannot_change_under_points(store: DynStore) {
    store.put_structure(&structure("S", 2)).await.expect("put");
    // No points yet: the dimension may change.
    store
        .put_structure(&structure("S", 3))
        .await
        .expect("to 3D");
    store
        .put_structure(&structure("S", 2))
        .await
        .expect("back to 2D");
    store
        .put_points("S", &[point("P1", 0.0, 0.0)])
        .await
        .expect("points");
    let err = store
        .put_structure(&structure("S", 3))
        .await
        .expect_err("refused");
    assert!(matches!(err, StoreError::Conflict(_)), "{err:?}");
    assert_eq!(
        store
            .get_structure("S")
            .await
            .expect("get")
            .map(|s| s.dimension),
        Some(2)
    );
}

async fn points_upsert_in_one_transaction(store: DynStore) {
    store.put_structure(&structure("S", 2)).await.expect("put");
    let w = store
        .put_points("S", &[point("B", 1.0, 2.0), point("A", 3.0, 4.0)])
        .await
        .expect("points");
    assert_eq!((w.created, w.updated), (2, 0));
    let mut moved = point("A", 5.0, 6.0);
    moved.sigma = None;
    let w = store
        .put_points("S", &[moved.clone(), point("C", 7.0, 8.0)])
        .await
        .expect("points");
    assert_eq!((w.created, w.updated), (1, 1));
    let got = store.list_points("S").await.expect("list");
    assert_eq!(got, vec![moved, point("B", 1.0, 2.0), point("C", 7.0, 8.0)]);
    // A write that fails part-way (the second point does not fit a 2D structure)
    // leaves nothing, not even the first point.
    let bad = StoredPoint {
        id: "D".into(),
        x: vec![1.0],
        sigma: None,
    };
    assert!(
        store
            .put_points("S", &[point("E", 0.0, 0.0), bad])
            .await
            .is_err()
    );
    let ids: Vec<String> = store
        .list_points("S")
        .await
        .expect("list")
        .into_iter()
        .map(|p| p.id)
        .collect();
    assert_eq!(ids, ["A", "B", "C"], "the failed write left nothing behind");
}

async fn delete_removes_structure_and_points(store: DynStore) {
    store.put_structure(&structure("S", 2)).await.expect("put");
    store
        .put_points("S", &[point("P", 0.0, 0.0)])
        .await
        .expect("points");
    assert!(store.delete_structure("S").await.expect("delete"));
    assert!(!store.delete_structure("S").await.expect("delete again"));
    assert_eq!(store.get_structure("S").await.expect("get"), None);
    // Recreating it starts empty.
    store.put_structure(&structure("S", 2)).await.expect("put");
    assert!(store.list_points("S").await.expect("list").is_empty());
}

async fn points_of_unknown_structure_are_not_found(store: DynStore) {
    let e = store
        .put_points("nope", &[point("P", 0.0, 0.0)])
        .await
        .expect_err("refused");
    assert!(matches!(e, StoreError::NotFound(_)), "{e:?}");
    let e = store.list_points("nope").await.expect_err("refused");
    assert!(matches!(e, StoreError::NotFound(_)), "{e:?}");
}

async fn frame_cannot_change_under_points(store: DynStore) {
    store.put_structure(&structure("S", 2)).await.expect("put");
    let mut local = structure("S", 2);
    local.frame = Frame::Local;
    // No points yet: the frame may change.
    store.put_structure(&local).await.expect("to local");
    store
        .put_points("S", &[point("P1", 0.0, 0.0)])
        .await
        .expect("points");
    let e = store
        .put_structure(&structure("S", 2))
        .await
        .expect_err("refused");
    assert!(matches!(e, StoreError::Conflict(_)), "{e:?}");
    assert_eq!(
        store
            .get_structure("S")
            .await
            .expect("get")
            .map(|s| s.frame),
        Some(Frame::Local)
    );
    // The name and metadata may still change.
    let mut renamed = local.clone();
    renamed.name = "Renamed".into();
    store.put_structure(&renamed).await.expect("rename");
}

async fn concurrent_creates_of_one_structure_all_succeed(store: DynStore) {
    let mut tasks = Vec::new();
    for _ in 0..6 {
        let store = store.clone();
        tasks.push(tokio::spawn(async move {
            store.put_structure(&structure("RACE", 2)).await
        }));
    }
    let mut created = 0;
    for t in tasks {
        let (w, _) = t.await.expect("task").expect("every put succeeds");
        created += usize::from(w == Written::Created);
    }
    assert_eq!(created, 1, "exactly one put created the structure");
}
