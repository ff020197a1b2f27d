//! Analyses run through the API, in process (`tower::ServiceExt::oneshot`) on SQLite
//! and PostgreSQL: structures, points and readings go in through the real HTTP
//! endpoints (`PUT /v1/structures/{id}`, `PUT …/points`, `POST …/batches`), then
//! `POST /v1/structures/{id}/analyses` queues epoch and series analyses as jobs that
//! run (as `kinema serve`'s workers run them) and are read back, listed and exported.
//!
//! Outside references:
//! - a homogeneous displacement field `u = t + G·x` has the constant small strain
//!   `ε = (G + Gᵀ)/2` everywhere (textbook continuum mechanics), so every region of
//!   every estimator recovers it exactly; the change between two such fields is the
//!   field of the difference `G₂ − G₁`;
//! - the least-squares line through points lying exactly on a line has that line's
//!   slope (textbook linear regression), so a strain growing linearly in time has a
//!   rate equal to its slope, per day and ×365.25 per Julian year.

use axum::body::Body;
use axum::http::{HeaderMap, Method, Request, StatusCode, header};
use kinema_server::api::{AppState, Limits, app};
use kinema_server::jobs::worker::drain as drain_jobs;
use kinema_server::keys::new_key;
use kinema_server::model::Scope;
use kinema_server::store::{self, DynStore};
use kinema_tests::db::{PgSchema, sqlite_file};
use serde_json::{Value, json};
use tower::ServiceExt;

/// Displacement gradient rate, 1/day: G(d) = RATE · d after d days (dimensionless).
const RATE: [[f64; 2]; 2] = [[2e-6, 1e-6], [0.5e-6, -1e-6]];
/// Epoch days after 2026-01-01T00:00:00Z.
const DAYS: [i64; 4] = [0, 10, 20, 30];

async fn call(
    app: &axum::Router,
    method: Method,
    token: &str,
    path: &str,
    body: Option<&Value>,
) -> (StatusCode, HeaderMap, Vec<u8>) {
    let mut req = Request::builder()
        .method(method)
        .uri(path)
        .header(header::AUTHORIZATION, format!("Bearer {token}"));
    let body = match body {
        Some(v) => {
            req = req.header(header::CONTENT_TYPE, "application/json");
            Body::from(serde_json::to_vec(v).expect("JSON"))
        }
        None => Body::empty(),
    };
    let resp = app
        .clone()
        .oneshot(req.body(body).expect("request"))
        .await
        .expect("response");
    let status = resp.status();
    let headers = resp.headers().clone();
    let bytes = axum::body::to_bytes(resp.into_body(), 1 << 26)
        .await
        .expect("body")
        .to_vec();
    (status, headers, bytes)
}

fn json_of(b: &[u8]) -> Value {
    serde_json::from_slice(b).expect("JSON body")
}

fn epoch(day: i64) -> String {
    let t = time::macros::datetime!(2026-01-01 00:00 UTC) + time::Duration::days(day);
    t.format(&time::format_description::well_known::Rfc3339)
        .expect("format")
}

/// The 3×3 grid of points (metres), slightly skewed so that the Delaunay
/// triangulation is unique.
fn grid() -> Vec<(String, [f64; 2])> {
    let mut v = Vec::new();
    for i in 0..3 {
        for j in 0..3 {
            v.push((
                format!("P{i}{j}"),
                [
                    f64::from(i) * 10.0 + 0.4 * f64::from(j % 2),
                    f64::from(j) * 10.0,
                ],
            ));
        }
    }
    v
}

/// Displacement u = t + G(day)·x, metres.
fn u_at(x: [f64; 2], day: i64) -> [f64; 2] {
    let d = day as f64;
    let t = [0.0001 * d, -0.00005 * d];
    [
        t[0] + d * (RATE[0][0] * x[0] + RATE[0][1] * x[1]),
        t[1] + d * (RATE[1][0] * x[0] + RATE[1][1] * x[1]),
    ]
}

async fn put_structure(app: &axum::Router, token: &str, id: &str, frame: Value) {
    let (s, _, b) = call(
        app,
        Method::PUT,
        token,
        &format!("/v1/structures/{id}"),
        Some(
            &json!({"name": "culvert wing wall", "dimension": 2, "frame": frame,
                     "length_unit": "m"}),
        ),
    )
    .await;
    assert_eq!(s, StatusCode::CREATED, "{}", String::from_utf8_lossy(&b));
}

async fn put_points(app: &axum::Router, token: &str, id: &str, pts: &[(String, [f64; 2])]) {
    let points: Vec<Value> = pts
        .iter()
        .map(|(p, x)| json!({"id": p, "x": x, "sigma": [0.001, 0.001]}))
        .collect();
    let (s, _, b) = call(
        app,
        Method::PUT,
        token,
        &format!("/v1/structures/{id}/points"),
        Some(&json!({"points": points})),
    )
    .await;
    assert!(s.is_success(), "{s}: {}", String::from_utf8_lossy(&b));
}

async fn post_batch(app: &axum::Router, token: &str, id: &str, readings: Vec<Value>) {
    let (s, _, b) = call(
        app,
        Method::POST,
        token,
        &format!("/v1/structures/{id}/batches"),
        Some(&json!({"readings": readings})),
    )
    .await;
    assert_eq!(s, StatusCode::CREATED, "{}", String::from_utf8_lossy(&b));
}

/// The app with its state, so that a test can run the queued jobs; derefs to the
/// router.
struct Svc {
    router: axum::Router,
    state: AppState,
}

impl std::ops::Deref for Svc {
    type Target = axum::Router;
    fn deref(&self) -> &axum::Router {
        &self.router
    }
}

/// Run every queued job (as the workers of `kinema serve` do).
async fn drain(svc: &Svc) {
    drain_jobs(&svc.state, "test-worker")
        .await
        .expect("run the jobs");
}

/// POST an analysis: a request error as it is answered, or — once it is queued (202,
/// `Location` of the job) and the job has run — 202 with the stored analysis.
async fn analyse(app: &Svc, token: &str, id: &str, body: Value) -> (StatusCode, Value) {
    let (s, h, b) = call(
        app,
        Method::POST,
        token,
        &format!("/v1/structures/{id}/analyses"),
        Some(&body),
    )
    .await;
    let v = json_of(&b);
    if s != StatusCode::ACCEPTED {
        return (s, v);
    }
    let loc = h
        .get(header::LOCATION)
        .and_then(|v| v.to_str().ok())
        .expect("Location")
        .to_owned();
    assert_eq!(
        loc,
        format!("/v1/structures/{id}/jobs/{}", v["id"].as_str().expect("id"))
    );
    assert_eq!(v["status"], "queued", "{v}");
    drain(app).await;
    let (s, _, b) = call(app, Method::GET, token, &loc, None).await;
    assert_eq!(s, StatusCode::OK);
    let job = json_of(&b);
    let aid = job["analysis_id"]
        .as_str()
        .expect("the job stored an analysis");
    let (s, _, b) = call(
        app,
        Method::GET,
        token,
        &format!("/v1/structures/{id}/analyses/{aid}"),
        None,
    )
    .await;
    assert_eq!(s, StatusCode::OK);
    let a = json_of(&b);
    // The job ends as its analysis did.
    assert_eq!(job["status"], a["status"], "{job} {a}");
    (StatusCode::ACCEPTED, a)
}

fn close(a: &Value, b: f64) -> bool {
    a.as_f64()
        .is_some_and(|a| (a - b).abs() <= 1e-7 * (1.0 + b.abs()))
}

/// Equal JSON, numbers to 1e-12 relative: the stored document is parsed back by
/// serde_json without its `float_roundtrip` feature, which may differ in the last bit.
fn same(a: &Value, b: &Value) -> bool {
    match (a, b) {
        (Value::Number(x), Value::Number(y)) => match (x.as_f64(), y.as_f64()) {
            (Some(x), Some(y)) => (x - y).abs() <= 1e-12 * x.abs().max(y.abs()),
            _ => x == y,
        },
        (Value::Array(x), Value::Array(y)) => {
            x.len() == y.len() && x.iter().zip(y).all(|(x, y)| same(x, y))
        }
        (Value::Object(x), Value::Object(y)) => {
            x.len() == y.len() && x.iter().all(|(k, v)| y.get(k).is_some_and(|w| same(v, w)))
        }
        _ => a == b,
    }
}

fn pointers(problem: &Value) -> Vec<String> {
    problem["errors"]
        .as_array()
        .into_iter()
        .flatten()
        .filter_map(|e| e["pointer"].as_str().map(str::to_owned))
        .collect()
}

/// Every element row of an epoch result has the strain of gradient `d · RATE`.
fn assert_uniform(doc: &Value, days: f64) {
    let rows = doc["elements"].as_array().expect("elements");
    assert_eq!(rows.len(), 8, "8 triangles of the 3×3 grid");
    let exy = (RATE[0][1] + RATE[1][0]) / 2.0 * days * 1e6;
    for r in rows {
        assert!(close(&r["exx_microstrain"], RATE[0][0] * days * 1e6), "{r}");
        assert!(close(&r["eyy_microstrain"], RATE[1][1] * days * 1e6), "{r}");
        assert!(close(&r["exy_microstrain"], exy), "{r}");
    }
}

async fn count(app: &axum::Router, token: &str, id: &str) -> usize {
    let (s, _, b) = call(
        app,
        Method::GET,
        token,
        &format!("/v1/structures/{id}/analyses"),
        None,
    )
    .await;
    assert_eq!(s, StatusCode::OK);
    json_of(&b)["items"].as_array().expect("items").len()
}

async fn scenario(store: DynStore) {
    let (writer, key) = new_key("logger", Scope::Write, None).expect("key");
    store.insert_key(&key).await.expect("key");
    let (reader, key) = new_key("viewer", Scope::Read, None).expect("key");
    store.insert_key(&key).await.expect("key");
    let (elsewhere, key) =
        new_key("other wall", Scope::Write, Some(vec!["LINE".into()])).expect("key");
    store.insert_key(&key).await.expect("key");
    let state = AppState::new(store.clone(), Limits::default());
    let app = Svc {
        router: app(state.clone()),
        state,
    };

    put_structure(
        &app,
        &writer,
        "W1",
        json!({"kind": "enu", "origin": {"lat_deg": 46.9, "lon_deg": 7.4, "h_m": 540.0}}),
    )
    .await;
    let pts = grid();
    put_points(&app, &writer, "W1", &pts).await;
    let mut readings = Vec::new();
    for day in DAYS {
        for (id, x) in &pts {
            // P22 is not measured at day 20.
            if day == 20 && id == "P22" {
                continue;
            }
            readings.push(json!({"point_id": id, "epoch": epoch(day), "u": u_at(*x, day)}));
        }
    }
    post_batch(&app, &writer, "W1", readings).await;

    // Epoch against the reference coordinates: the uniform field at day 30.
    let (s, a_ref) = analyse(
        &app,
        &writer,
        "W1",
        json!({"kind": "epoch", "epoch": epoch(30), "method": {"kind": "delaunay"}}),
    )
    .await;
    assert_eq!(s, StatusCode::ACCEPTED, "{a_ref}");
    assert_eq!(a_ref["kind"], "epoch");
    assert_eq!(a_ref["status"], "succeeded");
    assert_eq!(a_ref["inputs"]["points_used"], 9);
    assert_eq!(a_ref["result"]["strain_unit"], "microstrain");
    assert_uniform(&a_ref["result"], 30.0);

    // Epoch 30 against baseline epoch 10: the field of the difference, 20 days of RATE.
    let (s, a_base) = analyse(
        &app,
        &writer,
        "W1",
        json!({"kind": "epoch", "epoch": epoch(30), "baseline_epoch": epoch(10),
               "method": {"kind": "delaunay"}, "strain_unit": "microstrain"}),
    )
    .await;
    assert_eq!(s, StatusCode::ACCEPTED, "{a_base}");
    assert_eq!(a_base["baseline_epoch"], epoch(10));
    assert_uniform(&a_base["result"], 20.0);

    // Day 20 lacks P22: left out and listed; the field is still uniform (a network fit).
    let (s, a_net) = analyse(
        &app,
        &writer,
        "W1",
        json!({"kind": "epoch", "epoch": epoch(20), "method": {"kind": "network"},
               "strain_unit": "strain"}),
    )
    .await;
    assert_eq!(s, StatusCode::ACCEPTED, "{a_net}");
    assert_eq!(a_net["inputs"]["points_used"], 8);
    assert_eq!(a_net["inputs"]["left_out"][0]["point_id"], "P22");
    let net = &a_net["result"]["network"][0];
    assert!(close(&net["exx_strain"], RATE[0][0] * 20.0), "{net}");
    assert!(close(&net["eyy_strain"], RATE[1][1] * 20.0), "{net}");

    // Series over all four epochs, baseline = the first (G = 0 there): the
    // cumulative strain at day d is d·RATE and the rate is RATE exactly.
    let series_body = json!({
        "kind": "series",
        "method": {"kind": "groups", "groups": [
            {"name": "all", "point_ids": pts.iter().map(|p| p.0.clone()).collect::<Vec<_>>()},
            {"name": "corner", "point_ids": ["P00", "P01", "P10", "P11"]},
        ]},
    });
    let (s, a_ser) = analyse(&app, &writer, "W1", series_body.clone()).await;
    assert_eq!(s, StatusCode::ACCEPTED, "{a_ser}");
    assert_eq!(a_ser["kind"], "series");
    assert_eq!(a_ser["status"], "succeeded");
    assert_eq!(a_ser["method"], "groups");
    assert_eq!(a_ser["epoch"], Value::Null);
    assert_eq!(a_ser["baseline_epoch"], epoch(0));
    assert_eq!(a_ser["series_first"], epoch(0));
    assert_eq!(a_ser["series_last"], epoch(30));
    assert_eq!(a_ser["inputs"]["epochs_used"], 4);
    assert_eq!(a_ser["inputs"]["epochs"][2]["left_out"], json!(["P22"]));
    assert_eq!(a_ser["inputs"]["epochs"][2]["readings"], 8);
    let doc = &a_ser["result"];
    let per_day = |region: &str, comp: &str| {
        doc["rates"]
            .as_array()
            .expect("rates")
            .iter()
            .find(|r| r["region"] == region && r["component"] == comp)
            .unwrap_or_else(|| panic!("rate {region} {comp} in {doc}"))
            .clone()
    };
    let exy = (RATE[0][1] + RATE[1][0]) / 2.0;
    for region in ["all", "corner"] {
        for (comp, want) in [("exx", RATE[0][0]), ("eyy", RATE[1][1]), ("exy", exy)] {
            let r = per_day(region, comp);
            assert!(close(&r["rate_microstrain_per_day"], want * 1e6), "{r}");
            assert!(
                close(&r["rate_microstrain_per_year"], want * 1e6 * 365.25),
                "{r}"
            );
        }
    }
    // "all" holds P22, missing at day 20: that region-epoch is excluded.
    let excluded = doc["excluded"].as_array().expect("excluded");
    assert_eq!(excluded.len(), 1, "{excluded:?}");
    assert_eq!(excluded[0]["region"], "all");
    let last = doc["cumulative"]
        .as_array()
        .expect("cumulative")
        .iter()
        .find(|r| r["region"] == "corner" && r["epoch"] == epoch(30))
        .expect("corner at day 30")
        .clone();
    assert!(
        close(&last["exx_microstrain"], RATE[0][0] * 30.0 * 1e6),
        "{last}"
    );

    // A series over a time range with one epoch only is refused.
    let mut one = series_body.clone();
    one["from"] = json!(epoch(25));
    let (s, p) = analyse(&app, &writer, "W1", one).await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{p}");
    assert_eq!(pointers(&p), ["/from"]);
    // … but a baseline outside the range is added to it.
    let mut ranged = series_body.clone();
    ranged["from"] = json!(epoch(25));
    ranged["baseline_epoch"] = json!(epoch(0));
    let (s, a_rng) = analyse(&app, &writer, "W1", ranged).await;
    assert_eq!(s, StatusCode::ACCEPTED, "{a_rng}");
    assert_eq!(a_rng["inputs"]["epochs_used"], 2);
    let r = a_rng["result"]["rates"]
        .as_array()
        .expect("rates")
        .iter()
        .find(|r| r["region"] == "corner" && r["component"] == "exx")
        .expect("rate")
        .clone();
    assert!(
        close(&r["rate_microstrain_per_day"], RATE[0][0] * 1e6),
        "{r}"
    );

    // A group weighted by the points' stated sigma: the slope is still exact.
    let (s, a_el) = analyse(
        &app,
        &writer,
        "W1",
        json!({"kind": "series", "to": epoch(30), "strain_unit": "strain",
               "method": {"kind": "groups", "groups": [
                   {"name": "corner", "point_ids": ["P00", "P01", "P10", "P11"]}]},
               "options": {"use_precision": true}}),
    )
    .await;
    assert_eq!(s, StatusCode::ACCEPTED, "{a_el}");
    let r = a_el["result"]["rates"]
        .as_array()
        .expect("rates")
        .iter()
        .find(|r| r["component"] == "eyy")
        .expect("rate")
        .clone();
    assert_eq!(r["weighted"], true, "{r}");
    assert!(close(&r["rate_strain_per_day"], RATE[1][1]), "{r}");

    let stored = count(&app, &reader, "W1").await;
    assert_eq!(stored, 6);

    // Bad requests: 422 with a pointer, nothing stored.
    let bad = [
        (
            json!({"kind": "epoch", "epoch": epoch(5), "method": {"kind": "delaunay"}}),
            "/epoch",
        ),
        (
            json!({"kind": "epoch", "epoch": epoch(30), "baseline_epoch": epoch(7),
                   "method": {"kind": "delaunay"}}),
            "/baseline_epoch",
        ),
        (
            json!({"kind": "epoch", "epoch": epoch(10), "baseline_epoch": epoch(30),
                   "method": {"kind": "delaunay"}}),
            "/baseline_epoch",
        ),
        (
            json!({"kind": "epoch", "epoch": epoch(10), "baseline_epoch": epoch(10),
                   "method": {"kind": "delaunay"}}),
            "/baseline_epoch",
        ),
        (
            json!({"kind": "epoch", "epoch": "yesterday", "method": {"kind": "delaunay"}}),
            "/epoch",
        ),
        (
            json!({"kind": "epoch", "epoch": epoch(10), "method": {"kind": "delaunay"},
                   "options": {"alpha": 1.5}}),
            "/options/alpha",
        ),
        (
            json!({"kind": "series", "options": {"use_precision": true},
                   "method": {"kind": "elements", "elements": [
                {"id": "T1", "vertices": ["P00", "P10", "P01"]}]}}),
            "/options/use_precision",
        ),
        (
            json!({"kind": "series", "method": {"kind": "delaunay"}}),
            "/method/kind",
        ),
        (
            json!({"kind": "series", "method": {"kind": "neighbourhood", "k": 4}}),
            "/method/kind",
        ),
        (
            json!({"kind": "series", "method": {"kind": "groups", "groups": [
                {"name": "g", "point_ids": ["P00", "P01", "NOPE"]}]}}),
            "/method/groups/0/point_ids/2",
        ),
        (
            json!({"kind": "series", "baseline_epoch": epoch(3),
                   "method": {"kind": "groups", "groups": [
                {"name": "g", "point_ids": ["P00", "P01", "P10"]}]}}),
            "/baseline_epoch",
        ),
    ];
    for (body, pointer) in bad {
        let (s, p) = analyse(&app, &writer, "W1", body.clone()).await;
        assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{body}: {p}");
        assert!(pointers(&p).iter().any(|x| x == pointer), "{body}: {p}");
    }
    // Unknown members are refused (there is no temperature compensation to ask for).
    let mut thermal = series_body.clone();
    thermal["thermal_alpha_per_k"] = json!(1.2e-5);
    let (s, p) = analyse(&app, &writer, "W1", thermal).await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{p}");
    let (s, p) = analyse(&app, &writer, "W1", json!({"kind": "trend"})).await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{p}");
    // Write scope needed; a key limited to other structures sees no W1.
    let (s, p) = analyse(
        &app,
        &reader,
        "W1",
        json!({"kind": "epoch", "epoch": epoch(30), "method": {"kind": "delaunay"}}),
    )
    .await;
    assert_eq!(s, StatusCode::FORBIDDEN, "{p}");
    let (s, p) = analyse(
        &app,
        &elsewhere,
        "W1",
        json!({"kind": "epoch", "epoch": epoch(30), "method": {"kind": "delaunay"}}),
    )
    .await;
    assert_eq!(s, StatusCode::NOT_FOUND, "{p}");
    assert_eq!(count(&app, &reader, "W1").await, stored, "nothing stored");

    // Listing: newest first, without results, both kinds.
    let (s, _, b) = call(
        &app,
        Method::GET,
        &reader,
        "/v1/structures/W1/analyses",
        None,
    )
    .await;
    assert_eq!(s, StatusCode::OK);
    let list = json_of(&b);
    let items = list["items"].as_array().expect("items");
    assert_eq!(items[0]["id"], a_el["id"]);
    assert!(items.iter().all(|i| i.get("result").is_none()));
    assert_eq!(
        items.iter().filter(|i| i["kind"] == "series").count(),
        3,
        "{list}"
    );
    // Read back one by one.
    for a in [&a_ref, &a_base, &a_net, &a_ser, &a_rng, &a_el] {
        let path = format!(
            "/v1/structures/W1/analyses/{}",
            a["id"].as_str().expect("id")
        );
        let (s, _, b) = call(&app, Method::GET, &reader, &path, None).await;
        assert_eq!(s, StatusCode::OK);
        assert!(same(&json_of(&b), a), "{a} read back");
    }
    // Exports: CSV of both kinds, GeoJSON of an epoch analysis (ENU frame), not of a
    // series.
    let result = |a: &Value, format: &str| {
        format!(
            "/v1/structures/W1/analyses/{}/result?format={format}",
            a["id"].as_str().expect("id")
        )
    };
    let (s, h, b) = call(&app, Method::GET, &reader, &result(&a_ser, "csv"), None).await;
    assert_eq!(s, StatusCode::OK);
    assert!(
        h[header::CONTENT_TYPE]
            .to_str()
            .expect("ct")
            .starts_with("text/csv")
    );
    let csv = String::from_utf8(b).expect("UTF-8");
    for head in ["rate_microstrain_per_day", "days_from_baseline", "missing"] {
        assert!(csv.contains(head), "{head} in {csv}");
    }
    let (s, _, b) = call(&app, Method::GET, &reader, &result(&a_ref, "csv"), None).await;
    assert_eq!(s, StatusCode::OK);
    let csv = String::from_utf8(b).expect("UTF-8");
    assert!(
        csv.lines()
            .next()
            .expect("header")
            .contains("exx_microstrain")
    );
    let (s, _, b) = call(&app, Method::GET, &reader, &result(&a_ref, "geojson"), None).await;
    assert_eq!(s, StatusCode::OK);
    let fc = json_of(&b);
    assert_eq!(fc["type"], "FeatureCollection");
    assert_eq!(fc["features"].as_array().expect("features").len(), 8);
    let (s, _, _) = call(&app, Method::GET, &reader, &result(&a_ser, "geojson"), None).await;
    assert_eq!(s, StatusCode::CONFLICT);
    let (s, _, b) = call(&app, Method::GET, &reader, &result(&a_ser, "json"), None).await;
    assert_eq!(s, StatusCode::OK);
    assert!(same(&json_of(&b), &a_ser["result"]));

    // Collinear points: the analysis is stored as failed, with the reason, and the job
    // fails with it.
    put_structure(&app, &writer, "LINE", json!({"kind": "local"})).await;
    let line: Vec<(String, [f64; 2])> = (0..4)
        .map(|i| (format!("L{i}"), [f64::from(i) * 5.0, f64::from(i) * 5.0]))
        .collect();
    put_points(&app, &elsewhere, "LINE", &line).await;
    post_batch(
        &app,
        &elsewhere,
        "LINE",
        line.iter()
            .map(|(id, x)| json!({"point_id": id, "epoch": epoch(1), "u": u_at(*x, 1)}))
            .collect(),
    )
    .await;
    let (s, failed) = analyse(
        &app,
        &elsewhere,
        "LINE",
        json!({"kind": "epoch", "epoch": epoch(1), "method": {"kind": "delaunay"}}),
    )
    .await;
    assert_eq!(s, StatusCode::ACCEPTED, "{failed}");
    assert_eq!(failed["status"], "failed");
    assert!(
        failed["error"].as_str().is_some_and(|e| !e.is_empty()),
        "{failed}"
    );
    assert!(failed.get("result").is_none());
    let (s, _, _) = call(
        &app,
        Method::GET,
        &reader,
        &result(&failed, "json").replace("W1", "LINE"),
        None,
    )
    .await;
    assert_eq!(s, StatusCode::CONFLICT, "a failed analysis has no result");
    let (s, _, b) = call(
        &app,
        Method::GET,
        &reader,
        "/v1/structures/LINE/analyses?status=failed",
        None,
    )
    .await;
    assert_eq!(s, StatusCode::OK);
    assert_eq!(json_of(&b)["items"][0]["id"], failed["id"]);
}

#[tokio::test]
async fn analysis_runs_on_sqlite() {
    let (url, _dir) = sqlite_file();
    let s = store::open(&url).await.expect("open");
    s.migrate().await.expect("migrate");
    scenario(s).await;
}

#[tokio::test]
async fn analysis_runs_on_postgres() {
    let schema = PgSchema::create("api_analysis_runs").await;
    let s = store::open(&schema.url).await.expect("open");
    s.migrate().await.expect("migrate");
    scenario(s).await;
    schema.drop_schema().await;
}
