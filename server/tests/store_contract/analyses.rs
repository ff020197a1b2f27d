//! Analyses.

use kinema_server::model::{
    Analysis, AnalysisKind, AnalysisQuery, AnalysisStatus, Frame, Structure, now_utc,
};
use kinema_server::store::{DynStore, StoreError};
use kinema_server::units::LengthUnit;
use serde_json::json;
use time::Duration;
use uuid::Uuid;

crate::contract!(
    analyses_round_trip_and_list_newest_first_with_filters,
    analyses_need_their_structure_and_go_with_it,
    series_analyses_keep_their_epoch_range
);

async fn structure(store: &DynStore, id: &str) {
    let now = now_utc();
    store
        .put_structure(&Structure {
            id: id.into(),
            name: "wall".into(),
            dimension: 2,
            frame: Frame::Local,
            length_unit: LengthUnit::Metre,
            material: None,
            metadata: json!({}),
            created_at: now,
            updated_at: now,
        })
        .await
        .expect("structure");
}

fn analysis(structure: &str, status: AnalysisStatus, minutes: i64) -> Analysis {
    let t = now_utc() - Duration::hours(1) + Duration::minutes(minutes);
    Analysis {
        id: Uuid::new_v4(),
        structure_id: structure.into(),
        kind: AnalysisKind::Epoch,
        status,
        method: "delaunay".into(),
        epoch: Some(t),
        baseline_epoch: None,
        series_first: None,
        series_last: None,
        parameters: json!({"method": {"kind": "delaunay"}}),
        inputs: json!({"points_used": 4}),
        software_version: "0.1.0".into(),
        result: (status == AnalysisStatus::Succeeded).then(|| json!({"summary": {"accepted": 2}})),
        error: (status == AnalysisStatus::Failed).then(|| "collinear".to_owned()),
        created_at: t,
        duration_ms: 3,
    }
}

async fn analyses_round_trip_and_list_newest_first_with_filters(store: DynStore) {
    structure(&store, "W1").await;
    structure(&store, "W2").await;
    let a = analysis("W1", AnalysisStatus::Succeeded, 1);
    let b = analysis("W1", AnalysisStatus::Failed, 2);
    let c = analysis("W1", AnalysisStatus::Succeeded, 3);
    for x in [&a, &b, &c] {
        store.insert_analysis(x).await.expect("insert");
    }
    assert_eq!(
        store.get_analysis("W1", a.id).await.expect("get"),
        Some(a.clone())
    );
    assert_eq!(store.get_analysis("W2", a.id).await.expect("get"), None);
    let q = |status, after, limit| AnalysisQuery {
        status,
        after,
        limit,
        ..AnalysisQuery::default()
    };
    let all = store
        .list_analyses("W1", &q(None, None, 10))
        .await
        .expect("list");
    assert_eq!(
        all.iter().map(|x| x.id).collect::<Vec<_>>(),
        [c.id, b.id, a.id]
    );
    assert!(
        all.iter().all(|x| x.result.is_none()),
        "lists leave results out"
    );
    let ok = store
        .list_analyses("W1", &q(Some(AnalysisStatus::Succeeded), None, 10))
        .await
        .expect("list");
    assert_eq!(ok.iter().map(|x| x.id).collect::<Vec<_>>(), [c.id, a.id]);
    let page = store
        .list_analyses("W1", &q(None, Some((c.created_at, c.id)), 1))
        .await
        .expect("list");
    assert_eq!(page.iter().map(|x| x.id).collect::<Vec<_>>(), [b.id]);
    let window = store
        .list_analyses(
            "W1",
            &AnalysisQuery {
                from: Some(b.created_at),
                to: Some(c.created_at),
                limit: 10,
                ..AnalysisQuery::default()
            },
        )
        .await
        .expect("list");
    assert_eq!(window.iter().map(|x| x.id).collect::<Vec<_>>(), [b.id]);
    assert!(
        store
            .list_analyses("W2", &q(None, None, 10))
            .await
            .expect("list")
            .is_empty()
    );
}

async fn analyses_need_their_structure_and_go_with_it(store: DynStore) {
    let a = analysis("NOPE", AnalysisStatus::Succeeded, 0);
    assert!(matches!(
        store.insert_analysis(&a).await,
        Err(StoreError::NotFound(_))
    ));
    structure(&store, "W1").await;
    let mut bad = analysis("W1", AnalysisStatus::Failed, 0);
    bad.error = None;
    assert!(matches!(
        store.insert_analysis(&bad).await,
        Err(StoreError::Invalid(_))
    ));
    let a = analysis("W1", AnalysisStatus::Succeeded, 0);
    store.insert_analysis(&a).await.expect("insert");
    assert!(matches!(
        store.insert_analysis(&a).await,
        Err(StoreError::Conflict(_))
    ));
    assert!(store.delete_structure("W1").await.expect("delete"));
    structure(&store, "W1").await;
    assert_eq!(store.get_analysis("W1", a.id).await.expect("get"), None);
}

async fn series_analyses_keep_their_epoch_range(store: DynStore) {
    structure(&store, "W1").await;
    let mut s = analysis("W1", AnalysisStatus::Succeeded, 5);
    let first = s.created_at - Duration::days(30);
    s.kind = AnalysisKind::Series;
    s.method = "groups".into();
    s.epoch = None;
    s.baseline_epoch = Some(first);
    s.series_first = Some(first);
    s.series_last = Some(first + Duration::days(20));
    store.insert_analysis(&s).await.expect("insert");
    let back = store.get_analysis("W1", s.id).await.expect("get");
    assert_eq!(back, Some(s.clone()));
    let listed = store
        .list_analyses(
            "W1",
            &AnalysisQuery {
                limit: 10,
                ..AnalysisQuery::default()
            },
        )
        .await
        .expect("list");
    assert_eq!(listed.len(), 1);
    assert_eq!(listed[0].kind, AnalysisKind::Series);
    assert_eq!(listed[0].series_first, s.series_first);
    assert_eq!(listed[0].series_last, s.series_last);
}
