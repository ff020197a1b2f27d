//! `POST /v1/structures/{id}/batches` and the readings endpoints, in process
//! (`tower::ServiceExt::oneshot` on the real router) over SQLite and PostgreSQL.

use axum::body::{Body, to_bytes};
use axum::http::{Request, StatusCode};
use kinema_server::api::{AppState, Limits, app};
use kinema_server::model::Scope;
use kinema_server::store::{self, DynStore};
use kinema_tests::db::{PgSchema, sqlite_file};
use serde_json::{Value, json};
use tower::ServiceExt;

/// A test service over one database.
struct Svc {
    store: DynStore,
    limits: Limits,
    token: String,
    _sqlite: Option<tempfile::TempDir>,
    pg: Option<PgSchema>,
}

impl Svc {
    async fn new(pg: bool, tag: &str, limits: Limits) -> Self {
        let (url, dir, schema) = if pg {
            let s = PgSchema::create(tag).await;
            (s.url.clone(), None, Some(s))
        } else {
            let (u, d) = sqlite_file();
            (u, Some(d), None)
        };
        let store = store::open(&url).await.expect("open");
        store.migrate().await.expect("migrate");
        let (token, key) = kinema_server::keys::new_key("test", Scope::Admin, None).expect("key");
        store.insert_key(&key).await.expect("insert key");
        let svc = Self {
            store,
            limits,
            token,
            _sqlite: dir,
            pg: schema,
        };
        // A 2D wall in mm with three points.
        let r = svc
            .send("PUT", "/v1/structures/WALL-1", "application/json", json!({
                "name": "Test wall", "dimension": 2, "frame": {"kind": "local"}, "length_unit": "mm"
            }).to_string(), &[])
            .await;
        assert_eq!(r.0, StatusCode::CREATED, "{}", r.1);
        let pts: Vec<Value> = (1..=3)
            .map(|i| json!({"id": format!("P{i}"), "x": [i as f64 * 1000.0, 0.0]}))
            .collect();
        let r = svc
            .send(
                "PUT",
                "/v1/structures/WALL-1/points",
                "application/json",
                json!({"points": pts}).to_string(),
                &[],
            )
            .await;
        assert_eq!(r.0, StatusCode::OK, "{}", r.1);
        svc
    }

    async fn finish(self) {
        if let Some(s) = self.pg {
            s.drop_schema().await;
        }
    }

    /// Send a request; status, body as JSON (or Null) and the response headers.
    async fn send_full(
        &self,
        method: &str,
        uri: &str,
        ct: &str,
        body: impl Into<Body>,
        headers: &[(&str, &str)],
    ) -> (StatusCode, Value, axum::http::HeaderMap) {
        let mut b = Request::builder()
            .method(method)
            .uri(uri)
            .header("authorization", format!("Bearer {}", self.token));
        if !ct.is_empty() {
            b = b.header("content-type", ct);
        }
        for (k, v) in headers {
            b = b.header(*k, *v);
        }
        let req = b.body(body.into()).expect("request");
        let state = AppState::new(self.store.clone(), self.limits.clone());
        let resp = app(state).oneshot(req).await.expect("response");
        let status = resp.status();
        let headers = resp.headers().clone();
        let bytes = to_bytes(resp.into_body(), usize::MAX).await.expect("body");
        let v = serde_json::from_slice(&bytes).unwrap_or(Value::Null);
        (status, v, headers)
    }

    async fn send(
        &self,
        method: &str,
        uri: &str,
        ct: &str,
        body: String,
        h: &[(&str, &str)],
    ) -> (StatusCode, Value) {
        let (s, v, _) = self.send_full(method, uri, ct, body, h).await;
        (s, v)
    }

    async fn post_json(&self, body: Value) -> (StatusCode, Value) {
        self.send("POST", BATCHES, "application/json", body.to_string(), &[])
            .await
    }

    async fn post_csv(&self, query: &str, body: &str) -> (StatusCode, Value) {
        self.send(
            "POST",
            &format!("{BATCHES}{query}"),
            "text/csv",
            body.to_owned(),
            &[],
        )
        .await
    }

    /// Epochs with readings, and batches stored.
    async fn stored(&self) -> (usize, usize) {
        let e = self
            .store
            .list_epochs("WALL-1", None, None)
            .await
            .expect("epochs");
        let b = self
            .store
            .list_batches("WALL-1", None, 100)
            .await
            .expect("batches");
        (e.len(), b.len())
    }

    /// Assert a problem with `status` and a first pointer `pointer`; nothing stored.
    async fn refused(
        &self,
        r: (StatusCode, Value),
        status: StatusCode,
        pointer: Option<&str>,
        before: (usize, usize),
    ) {
        assert_eq!(r.0, status, "{}", r.1);
        assert_eq!(
            r.1["status"],
            status.as_u16(),
            "a problem document: {}",
            r.1
        );
        if let Some(p) = pointer {
            let ptrs: Vec<&str> = r.1["errors"]
                .as_array()
                .map(|a| a.iter().filter_map(|e| e["pointer"].as_str()).collect())
                .unwrap_or_default();
            assert!(ptrs.contains(&p), "pointer {p} in {}", r.1);
        }
        assert_eq!(self.stored().await, before, "nothing is left behind");
    }
}

const BATCHES: &str = "/v1/structures/WALL-1/batches";

fn reading(p: &str, epoch: &str, u: Value) -> Value {
    json!({"point_id": p, "epoch": epoch, "u": u})
}

macro_rules! both {
    ($($case:ident),* $(,)?) => {
        mod sqlite { $( #[tokio::test] async fn $case() { super::$case(false).await; } )* }
        mod postgres { $( #[tokio::test] async fn $case() { super::$case(true).await; } )* }
    };
}

both!(
    json_batch_is_stored_in_metres_and_read_back_in_mm,
    csv_batch_with_unit_override_and_sigma,
    bad_json_readings_are_refused_with_pointers,
    bad_csv_rows_are_refused_with_pointers,
    malformed_bodies_wrong_types_and_limits,
    stored_reading_again_is_a_conflict,
    idempotent_replay_and_mismatch,
    a_streamed_batch_may_exceed_the_json_body_limit,
    lists_and_queries,
    concurrent_requests_with_one_key_store_one_batch,
);

async fn concurrent_requests_with_one_key_store_one_batch(pg: bool) {
    let svc = Svc::new(pg, "api_race", Limits::default()).await;
    let body: String = std::iter::once("point_id,epoch,ux,uy\n".to_owned())
        .chain((0..3000).map(|i| format!("P{},2026-11-30T06:00:00.{:06}Z,1,2\n", i % 3 + 1, i / 3)))
        .collect();
    let key = [("idempotency-key", "race-1")];
    let (a, b) = tokio::join!(
        svc.send_full("POST", BATCHES, "text/csv", body.clone(), &key),
        svc.send_full("POST", BATCHES, "text/csv", body.clone(), &key)
    );
    let fresh = [&a, &b]
        .iter()
        .filter(|r| r.0 == StatusCode::CREATED && r.2.get("idempotent-replayed").is_none())
        .count();
    assert_eq!(
        fresh, 1,
        "exactly one request stores the batch: {} {}",
        a.1, b.1
    );
    // The other one waited for the first to commit and got its answer again.
    for r in [&a, &b] {
        assert_eq!(r.0, StatusCode::CREATED, "{}", r.1);
    }
    assert_eq!(a.1, b.1, "both answers describe the same batch");
    assert_eq!(svc.stored().await, (1000, 1));
    svc.finish().await;
}

async fn json_batch_is_stored_in_metres_and_read_back_in_mm(pg: bool) {
    let svc = Svc::new(pg, "api_json", Limits::default()).await;
    let (s, v, h) = svc
        .send_full("POST", BATCHES, "application/json", json!({
            "readings": [
                reading("P2", "2026-11-30T07:00:00+01:00", json!([1.5, -2.0])),
                {"point_id": "P1", "epoch": "2026-11-30T06:00:00Z", "u": [0.25, 0.5], "sigma": [0.1, 0.2]},
                reading("P1", "2026-11-30T12:00:00Z", json!([3.0, 4.0])),
            ]
        }).to_string(), &[])
        .await;
    assert_eq!(s, StatusCode::CREATED, "{v}");
    assert_eq!(
        (
            v["readings"].as_u64(),
            v["points"].as_u64(),
            v["epochs"].as_u64()
        ),
        (Some(3), Some(2), Some(2))
    );
    assert_eq!(
        v["first_epoch"], "2026-11-30T06:00:00Z",
        "the +01:00 epoch is stored in UTC"
    );
    assert_eq!(v["last_epoch"], "2026-11-30T12:00:00Z");
    let id = v["id"].as_str().expect("id");
    assert_eq!(h["location"], format!("{BATCHES}/{id}").as_str());
    let stored = svc
        .store
        .readings_at("WALL-1", time::macros::datetime!(2026-11-30 06:00 UTC))
        .await
        .expect("readings");
    // 1.5 mm = 0.0015 m (the structure's unit is mm).
    assert_eq!(stored[1].u, [1.5 / 1000.0, -2.0 / 1000.0]);
    let (s, r) = svc
        .send(
            "GET",
            "/v1/structures/WALL-1/readings?epoch=2026-11-30T06:00:00Z",
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{r}");
    assert_eq!(r["length_unit"], "mm");
    assert_eq!(
        r["readings"][0],
        json!({"point_id": "P1", "u": [0.25, 0.5], "sigma": [0.1, 0.2]})
    );
    assert_eq!(r["readings"][1]["point_id"], "P2");
    let (s, g) = svc
        .send("GET", &format!("{BATCHES}/{id}"), "", String::new(), &[])
        .await;
    assert_eq!(s, StatusCode::OK);
    assert_eq!(g, v);
    svc.finish().await;
}

async fn csv_batch_with_unit_override_and_sigma(pg: bool) {
    let svc = Svc::new(pg, "api_csv", Limits::default()).await;
    let body = "\u{feff}point_id, epoch ,ux,uy,sigma_x,sigma_y\nP1,2026-11-30T06:00:00Z,0.001,0.002,0.0001,0.0002\nP2,2026-11-30T06:00:00Z,-0.003,0.004,,\n";
    let r = svc.post_csv("?length_unit=m", body).await;
    assert_eq!(r.0, StatusCode::CREATED, "{}", r.1);
    assert_eq!(r.1["readings"], 2);
    let stored = svc
        .store
        .readings_at("WALL-1", time::macros::datetime!(2026-11-30 06:00 UTC))
        .await
        .expect("readings");
    assert_eq!(stored[0].u, [0.001, 0.002]);
    assert_eq!(stored[0].sigma.as_deref(), Some(&[0.0001, 0.0002][..]));
    assert_eq!(stored[1].sigma, None);
    svc.finish().await;
}

async fn bad_json_readings_are_refused_with_pointers(pg: bool) {
    let svc = Svc::new(pg, "api_badjson", Limits::default()).await;
    let ok = |i: usize| {
        reading(
            "P1",
            &format!("2026-11-30T{:02}:00:00Z", i % 24),
            json!([1.0, 2.0]),
        )
    };
    let with = |bad: Value| {
        let mut rs: Vec<Value> = (0..17).map(ok).collect();
        rs.push(bad);
        json!({"readings": rs})
    };
    let none = (0, 0);
    let cases: Vec<(Value, &str)> = vec![
        (
            with(reading("P1", "2026-12-01T00:00:00Z", json!([1.0]))),
            "/readings/17/u",
        ),
        (
            with(reading(
                "P1",
                "2026-12-01T00:00:00Z",
                json!([1.0, 2.0, 3.0]),
            )),
            "/readings/17/u",
        ),
        (
            with(reading("NOPE", "2026-12-01T00:00:00Z", json!([1.0, 2.0]))),
            "/readings/17/point_id",
        ),
        (
            with(reading("bad id", "2026-12-01T00:00:00Z", json!([1.0, 2.0]))),
            "/readings/17/point_id",
        ),
        (
            with(reading("P1", "2026-12-01 00:00", json!([1.0, 2.0]))),
            "/readings/17/epoch",
        ),
        (
            with(reading(
                "P1",
                "2026-12-01T00:00:00.0000001Z",
                json!([1.0, 2.0]),
            )),
            "/readings/17/epoch",
        ),
        (
            with(reading("P1", "2026-11-30T05:00:00Z", json!([1.0, 2.0]))),
            "/readings/17",
        ),
        (
            with(
                json!({"point_id": "P1", "epoch": "2026-12-01T00:00:00Z", "u": [1.0, 2.0], "sigma": [0.1, 0.0]}),
            ),
            "/readings/17/sigma/1",
        ),
        (
            with(
                json!({"point_id": "P1", "epoch": "2026-12-01T00:00:00Z", "u": [1.0, 2.0], "sigma": [-0.1, 0.1]}),
            ),
            "/readings/17/sigma/0",
        ),
        (
            with(json!({"point_id": "P1", "epoch": "2026-12-01T00:00:00Z", "u": [1.0, "x"]})),
            "/readings/17/u/1",
        ),
        (
            with(
                json!({"point_id": "P1", "epoch": "2026-12-01T00:00:00Z", "u": [1.0, 2.0], "extra": 1}),
            ),
            "/readings/17/extra",
        ),
        (
            with(json!({"point_id": "P1", "u": [1.0, 2.0]})),
            "/readings/17",
        ),
        (json!({"readings": []}), "/readings"),
        (
            json!({"length_unit": "km", "readings": [ok(0)]}),
            "/length_unit",
        ),
        (json!({"points": []}), "/points"),
        (json!({}), "/readings"),
    ];
    for (body, pointer) in cases {
        let r = svc.post_json(body.clone()).await;
        assert_eq!(r.0, StatusCode::UNPROCESSABLE_ENTITY, "{body}: {}", r.1);
        svc.refused(r, StatusCode::UNPROCESSABLE_ENTITY, Some(pointer), none)
            .await;
    }
    // A length_unit after the readings that differs from the unit they were read in
    // (json! sorts keys, so this body is written out).
    let late = r#"{"readings": [{"point_id": "P1", "epoch": "2026-11-30T06:00:00Z", "u": [1, 2]}], "length_unit": "m"}"#;
    let r = svc
        .send("POST", BATCHES, "application/json", late.into(), &[])
        .await;
    svc.refused(
        r,
        StatusCode::UNPROCESSABLE_ENTITY,
        Some("/length_unit"),
        none,
    )
    .await;
    let same = late.replace("\"m\"", "\"mm\"");
    let r = svc
        .send("POST", BATCHES, "application/json", same, &[])
        .await;
    assert_eq!(
        r.0,
        StatusCode::CREATED,
        "a late length_unit that agrees is fine: {}",
        r.1
    );
    // Duplicate inside the batch names the first occurrence.
    let r = svc
        .post_json(with(reading(
            "P1",
            "2026-11-30T05:00:00Z",
            json!([1.0, 2.0]),
        )))
        .await;
    assert!(
        r.1["errors"][0]["detail"]
            .as_str()
            .expect("detail")
            .contains("/readings/5"),
        "{}",
        r.1
    );
    svc.finish().await;
}

async fn bad_csv_rows_are_refused_with_pointers(pg: bool) {
    let svc = Svc::new(pg, "api_badcsv", Limits::default()).await;
    let head = "point_id,epoch,ux,uy\n";
    let good = "P1,2026-11-30T06:00:00Z,1,2\n";
    let cases: Vec<(String, &str)> = vec![
        (
            format!("{head}{good}P2,2026-11-30T06:00:00Z,NaN,2\n"),
            "/rows/3/ux",
        ),
        (
            format!("{head}{good}P2,2026-11-30T06:00:00Z,1,inf\n"),
            "/rows/3/uy",
        ),
        (
            format!("{head}{good}P2,2026-11-30T06:00:00Z,1,-Infinity\n"),
            "/rows/3/uy",
        ),
        (
            format!("{head}{good}P2,2026-11-30T06:00:00Z,1,2,5\n")
                .replace(head, "point_id,epoch,ux,uy,uz\n"),
            "/rows/1/uz",
        ),
        (format!("{head}{good}P2,yesterday,1,2\n"), "/rows/3/epoch"),
        (
            format!("{head}{good}P9,2026-11-30T06:00:00Z,1,2\n"),
            "/rows/3/point_id",
        ),
        (format!("{head}{good}{good}"), "/rows/3"),
        (
            format!("{head}{good}P2,2026-11-30T06:00:00Z,1,1e\n"),
            "/rows/3/uy",
        ),
        (
            "point_id,epoch,ux\nP1,2026-11-30T06:00:00Z,1\n".to_owned(),
            "/rows/1/uy",
        ),
        (
            "point_id,epoch,ux,uy,sigma_x\nP1,2026-11-30T06:00:00Z,1,2,0.1\n".to_owned(),
            "/rows/1/sigma_y",
        ),
        (
            "point_id,epoch,ux,uy,sigma_x,sigma_y\nP1,2026-11-30T06:00:00Z,1,2,0.1,0\n".to_owned(),
            "/rows/2/sigma_y",
        ),
        (
            "point_id,epoch,ux,uy,sigma_x,sigma_y\nP1,2026-11-30T06:00:00Z,1,2,0.1,\n".to_owned(),
            "/rows/2/sigma_y",
        ),
        (
            "point_id,epoch,ux,uy,temp\nP1,2026-11-30T06:00:00Z,1,2,3\n".to_owned(),
            "/rows/1/temp",
        ),
        (head.to_owned(), "/rows"),
        (String::new(), "/rows"),
    ];
    for (body, pointer) in cases {
        let r = svc.post_csv("", &body).await;
        svc.refused(r, StatusCode::UNPROCESSABLE_ENTITY, Some(pointer), (0, 0))
            .await;
    }
    // A row with a different number of fields is malformed CSV, with its line.
    let r = svc
        .post_csv("", &format!("{head}{good}P2,2026-11-30T06:00:00Z,1\n"))
        .await;
    assert!(
        r.1["detail"].as_str().expect("detail").contains("line 3"),
        "{}",
        r.1
    );
    svc.refused(r, StatusCode::BAD_REQUEST, None, (0, 0)).await;
    let r = svc
        .post_csv("?length_unit=km", &format!("{head}{good}"))
        .await;
    svc.refused(
        r,
        StatusCode::UNPROCESSABLE_ENTITY,
        Some("/length_unit"),
        (0, 0),
    )
    .await;
    svc.finish().await;
}

async fn malformed_bodies_wrong_types_and_limits(pg: bool) {
    let limits = Limits {
        max_batch_bytes: 4096,
        max_batch_readings: 5,
        ..Limits::default()
    };
    let svc = Svc::new(pg, "api_malformed", limits).await;
    let one =
        r#"{"readings": [{"point_id": "P1", "epoch": "2026-11-30T06:00:00Z", "u": [NaN, 1]}]}"#;
    let r = svc
        .send("POST", BATCHES, "application/json", one.into(), &[])
        .await;
    assert!(
        r.1["detail"]
            .as_str()
            .expect("detail")
            .contains("line 1 column"),
        "{}",
        r.1
    );
    svc.refused(r, StatusCode::BAD_REQUEST, None, (0, 0)).await;
    let r = svc
        .send(
            "POST",
            BATCHES,
            "application/json",
            "{\"readings\": [".into(),
            &[],
        )
        .await;
    svc.refused(r, StatusCode::BAD_REQUEST, None, (0, 0)).await;
    let r = svc
        .send(
            "POST",
            BATCHES,
            "application/json",
            "{\"readings\": []} x".into(),
            &[],
        )
        .await;
    svc.refused(r, StatusCode::BAD_REQUEST, None, (0, 0)).await;
    let r = svc
        .send("POST", BATCHES, "application/xml", "<r/>".into(), &[])
        .await;
    svc.refused(r, StatusCode::UNSUPPORTED_MEDIA_TYPE, None, (0, 0))
        .await;
    let r = svc.send("POST", BATCHES, "", "x".into(), &[]).await;
    svc.refused(r, StatusCode::UNSUPPORTED_MEDIA_TYPE, None, (0, 0))
        .await;
    let six: Vec<Value> = (0..6)
        .map(|i| reading("P1", &format!("2026-11-30T0{i}:00:00Z"), json!([1, 2])))
        .collect();
    let r = svc.post_json(json!({"readings": six})).await;
    svc.refused(r, StatusCode::PAYLOAD_TOO_LARGE, None, (0, 0))
        .await;
    let big = format!(
        "point_id,epoch,ux,uy\n{}",
        "P1,2026-11-30T06:00:00Z,1,2\n".repeat(200)
    );
    let r = svc.post_csv("", &big).await;
    svc.refused(r, StatusCode::PAYLOAD_TOO_LARGE, None, (0, 0))
        .await;
    let r = svc
        .send(
            "POST",
            "/v1/structures/NOPE/batches",
            "text/csv",
            big.clone(),
            &[],
        )
        .await;
    svc.refused(r, StatusCode::NOT_FOUND, None, (0, 0)).await;
    // A key limited to another structure sees a 404 as well.
    let (tok, key) =
        kinema_server::keys::new_key("other", Scope::Write, Some(vec!["OTHER".into()]))
            .expect("key");
    svc.store.insert_key(&key).await.expect("insert");
    let req = Request::builder()
        .method("POST")
        .uri(BATCHES)
        .header("authorization", format!("Bearer {tok}"))
        .header("content-type", "text/csv")
        .body(Body::from(
            "point_id,epoch,ux,uy\nP1,2026-11-30T06:00:00Z,1,2\n",
        ))
        .expect("req");
    let resp = app(AppState::new(svc.store.clone(), svc.limits.clone()))
        .oneshot(req)
        .await
        .expect("resp");
    assert_eq!(resp.status(), StatusCode::NOT_FOUND);
    let r = svc
        .send(
            "POST",
            BATCHES,
            "text/csv",
            "point_id,epoch,ux,uy\nP1,2026-11-30T06:00:00Z,1,2\n".into(),
            &[("idempotency-key", "")],
        )
        .await;
    svc.refused(r, StatusCode::BAD_REQUEST, None, (0, 0)).await;
    svc.finish().await;
}

async fn stored_reading_again_is_a_conflict(pg: bool) {
    let svc = Svc::new(pg, "api_conflict", Limits::default()).await;
    let r = svc
        .post_csv("", "point_id,epoch,ux,uy\nP2,2026-11-30T06:00:00Z,1,2\n")
        .await;
    assert_eq!(r.0, StatusCode::CREATED);
    let r = svc
        .post_csv(
            "",
            "point_id,epoch,ux,uy\nP1,2026-11-30T06:00:00Z,1,2\nP2,2026-11-30T07:00:00+01:00,1,2\n",
        )
        .await;
    let d = r.1["detail"].as_str().unwrap_or("").to_owned();
    assert!(
        d.contains("P2") && d.contains("2026-11-30T06:00:00Z"),
        "{d}"
    );
    svc.refused(r, StatusCode::CONFLICT, None, (1, 1)).await;
    svc.finish().await;
}

async fn idempotent_replay_and_mismatch(pg: bool) {
    let svc = Svc::new(pg, "api_idem", Limits::default()).await;
    let body = "point_id,epoch,ux,uy\nP1,2026-11-30T06:00:00Z,1,2\n";
    let key = [("idempotency-key", "logger-7/2026-11-30T06")];
    let (s1, v1, h1) = svc.send_full("POST", BATCHES, "text/csv", body, &key).await;
    assert_eq!(s1, StatusCode::CREATED, "{v1}");
    assert!(h1.get("idempotent-replayed").is_none());
    let (s2, v2, h2) = svc.send_full("POST", BATCHES, "text/csv", body, &key).await;
    assert_eq!(s2, StatusCode::CREATED, "{v2}");
    assert_eq!(v2, v1, "the first response again");
    assert_eq!(h2["idempotent-replayed"], "true");
    assert_eq!(h2["location"], h1["location"]);
    assert_eq!(svc.stored().await, (1, 1), "nothing new stored");
    let other = "point_id,epoch,ux,uy\nP1,2026-11-30T07:00:00Z,1,2\n";
    let r = svc
        .send("POST", BATCHES, "text/csv", other.into(), &key)
        .await;
    assert!(
        r.1["type"]
            .as_str()
            .expect("type")
            .ends_with("idempotency-key-reused"),
        "{}",
        r.1
    );
    svc.refused(r, StatusCode::UNPROCESSABLE_ENTITY, None, (1, 1))
        .await;
    // The same body with another unit is another request (values 1000 times apart).
    let in_m = format!("{BATCHES}?length_unit=m");
    let r = svc.send("POST", &in_m, "text/csv", body.into(), &key).await;
    svc.refused(r, StatusCode::UNPROCESSABLE_ENTITY, None, (1, 1))
        .await;
    svc.finish().await;
}

async fn a_streamed_batch_may_exceed_the_json_body_limit(pg: bool) {
    let limits = Limits {
        max_body_bytes: 1024,
        ..Limits::default()
    };
    let svc = Svc::new(pg, "api_stream", limits).await;
    let readings: Vec<Value> = (0..30_000)
        .map(|i| {
            reading(
                &format!("P{}", i % 3 + 1),
                &format!("2026-01-01T00:00:00.{:06}Z", i / 3),
                json!([i as f64 * 0.001, -1.25]),
            )
        })
        .collect();
    let body = json!({"length_unit": "m", "readings": readings}).to_string();
    assert!(body.len() > 1_000_000);
    let r = svc
        .send("POST", BATCHES, "application/json", body, &[])
        .await;
    assert_eq!(r.0, StatusCode::CREATED, "{}", r.1);
    assert_eq!(
        (r.1["readings"].as_u64(), r.1["epochs"].as_u64()),
        (Some(30_000), Some(10_000))
    );
    assert_eq!(svc.stored().await, (10_000, 1));
    // The same structure's JSON endpoints keep the small limit.
    let pts: Vec<Value> = (0..100)
        .map(|i| json!({"id": format!("Q{i}"), "x": [i, 0]}))
        .collect();
    let r = svc
        .send(
            "PUT",
            "/v1/structures/WALL-1/points",
            "application/json",
            json!({"points": pts}).to_string(),
            &[],
        )
        .await;
    assert_eq!(r.0, StatusCode::PAYLOAD_TOO_LARGE, "{}", r.1);
    svc.finish().await;
}

async fn lists_and_queries(pg: bool) {
    let svc = Svc::new(pg, "api_lists", Limits::default()).await;
    for h in 1..=3 {
        let r = svc.post_csv("", &format!("point_id,epoch,ux,uy\nP1,2026-11-30T0{h}:00:00Z,1,2\nP2,2026-11-30T0{h}:00:00Z,1,2\n")).await;
        assert_eq!(r.0, StatusCode::CREATED);
    }
    let (s, p1) = svc
        .send("GET", &format!("{BATCHES}?limit=2"), "", String::new(), &[])
        .await;
    assert_eq!(s, StatusCode::OK);
    assert_eq!(p1["items"].as_array().map(Vec::len), Some(2));
    let cursor = p1["next_cursor"].as_str().expect("cursor");
    let (_, p2) = svc
        .send(
            "GET",
            &format!("{BATCHES}?limit=2&cursor={cursor}"),
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(p2["items"].as_array().map(Vec::len), Some(1));
    assert!(p2.get("next_cursor").is_none());
    assert_eq!(p2["items"][0]["first_epoch"], "2026-11-30T03:00:00Z");
    let (s, _) = svc
        .send(
            "GET",
            &format!("{BATCHES}?cursor=zz"),
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    let (s, e) = svc
        .send(
            "GET",
            "/v1/structures/WALL-1/epochs?from=2026-11-30T03:00:00%2B01:00&to=2026-11-30T02:00:00Z",
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{e}");
    assert_eq!(
        e["epochs"],
        json!([{"epoch": "2026-11-30T02:00:00Z", "readings": 2}])
    );
    let (s, _) = svc
        .send(
            "GET",
            "/v1/structures/WALL-1/epochs?from=yesterday",
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    let (s, _) = svc
        .send(
            "GET",
            "/v1/structures/WALL-1/readings",
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    let (s, _) = svc
        .send(
            "GET",
            &format!("{BATCHES}/00000000-0000-0000-0000-000000000000"),
            "",
            String::new(),
            &[],
        )
        .await;
    assert_eq!(s, StatusCode::NOT_FOUND);
    // Deleting the structure removes its readings.
    let (s, _) = svc
        .send("DELETE", "/v1/structures/WALL-1", "", String::new(), &[])
        .await;
    assert_eq!(s, StatusCode::NO_CONTENT);
    assert!(
        svc.store
            .list_epochs("WALL-1", None, None)
            .await
            .expect("epochs")
            .is_empty()
    );
    svc.finish().await;
}
