//! Stored analyses through the API, in process (`tower::ServiceExt::oneshot`) on
//! SQLite and PostgreSQL. Readings storage is not on this branch yet: the epoch
//! analyses are run by `analysis::epoch::run_epoch` on readings built here, stored
//! through the store, and read back, listed and exported through the API.

use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use kinema_server::analysis::epoch::{Displacement, EpochRequest, run_epoch};
use kinema_server::analysis::params::{FieldOptions, MethodSpec};
use kinema_server::api::{AppState, Limits, app};
use kinema_server::keys::new_key;
use kinema_server::model::{
    AnalysisStatus, Frame, Scope, StoredPoint, Structure, WgsOrigin, now_utc,
};
use kinema_server::store::{self, DynStore};
use kinema_server::units::{LengthUnit, StrainUnit};
use kinema_tests::db::{PgSchema, sqlite_file};
use serde_json::{Value, json};
use time::macros::datetime;
use tower::ServiceExt;

const LAT0: f64 = 47.25;
const LON0: f64 = 8.5;

async fn get(app: &axum::Router, token: &str, path: &str) -> (StatusCode, String, Vec<u8>) {
    let req = Request::get(path)
        .header(header::AUTHORIZATION, format!("Bearer {token}"))
        .body(Body::empty())
        .expect("request");
    let resp = app.clone().oneshot(req).await.expect("response");
    let status = resp.status();
    let ct = resp
        .headers()
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_owned();
    let body = axum::body::to_bytes(resp.into_body(), 1 << 26)
        .await
        .expect("body")
        .to_vec();
    (status, ct, body)
}

fn json_of(b: &[u8]) -> Value {
    serde_json::from_slice(b).expect("JSON body")
}

async fn structure(store: &DynStore, id: &str, frame: Frame) -> (Structure, Vec<StoredPoint>) {
    let now = now_utc();
    let s = Structure {
        id: id.into(),
        name: "retaining wall".into(),
        dimension: 2,
        frame,
        length_unit: LengthUnit::Metre,
        material: None,
        metadata: json!({}),
        created_at: now,
        updated_at: now,
    };
    store.put_structure(&s).await.expect("structure");
    let mut pts = Vec::new();
    for i in 0..3 {
        for j in 0..3 {
            pts.push(StoredPoint {
                id: format!("P{i}{j}"),
                x: vec![
                    f64::from(i) * 10.0 + 0.4 * f64::from(j % 2),
                    f64::from(j) * 10.0,
                ],
                sigma: Some(vec![0.001, 0.001]),
            });
        }
    }
    store.put_points(id, &pts).await.expect("points");
    (s, pts)
}

/// Readings of a uniform field u = t + G·x at every point (except `skip`).
fn readings(pts: &[StoredPoint], g: [[f64; 2]; 2], t: [f64; 2], skip: &str) -> Vec<Displacement> {
    pts.iter()
        .filter(|p| p.id != skip)
        .map(|p| Displacement {
            point_id: p.id.clone(),
            u: (0..2)
                .map(|i| t[i] + g[i][0] * p.x[0] + g[i][1] * p.x[1])
                .collect(),
            sigma: None,
        })
        .collect()
}

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * (1.0 + b.abs())
}

async fn scenario(store: DynStore) {
    let (token, key) = new_key("reader", Scope::Read, None).expect("key");
    store.insert_key(&key).await.expect("key");
    let (other_token, other) =
        new_key("other wall only", Scope::Read, Some(vec!["W2".into()])).expect("key");
    store.insert_key(&other).await.expect("key");
    let origin = WgsOrigin {
        lat_deg: LAT0,
        lon_deg: LON0,
        h_m: 0.0,
    };
    let (w1, pts) = structure(&store, "W1", Frame::Enu { origin }).await;
    let (w2, pts2) = structure(&store, "W2", Frame::Local).await;
    let app = app(AppState::new(store.clone(), Limits::default()));

    let g_ref = [[200e-6, 50e-6], [10e-6, -80e-6]];
    let g_base = [[50e-6, 0.0], [0.0, 30e-6]];
    let e1 = datetime!(2026-03-01 10:00 UTC);
    let e0 = datetime!(2026-02-01 10:00 UTC);
    let at = readings(&pts, g_ref, [0.003, -0.002], "P22");
    let base = readings(&pts, g_base, [0.001, 0.0], "");
    let req = |baseline_epoch| EpochRequest {
        epoch: e1,
        baseline_epoch,
        method: MethodSpec::Delaunay,
        options: FieldOptions::default(),
        strain_unit: StrainUnit::Microstrain,
    };

    // Epoch against the reference state: the uniform field is recovered exactly.
    let a_ref = run_epoch(&w1, &pts, &at, None, &req(None)).expect("runs");
    assert_eq!(a_ref.status, AnalysisStatus::Succeeded);
    assert_eq!(a_ref.inputs["points_used"], 8);
    assert_eq!(a_ref.inputs["left_out"][0]["point_id"], "P22");
    let doc = a_ref.result.as_ref().expect("result");
    let exy = (g_ref[0][1] + g_ref[1][0]) / 2.0;
    for r in doc["elements"].as_array().expect("elements") {
        assert!(
            close(r["exx_microstrain"].as_f64().expect("exx"), 200.0, 1e-8),
            "{r}"
        );
        assert!(close(
            r["eyy_microstrain"].as_f64().expect("eyy"),
            -80.0,
            1e-8
        ));
        assert!(close(
            r["exy_microstrain"].as_f64().expect("exy"),
            exy * 1e6,
            1e-8
        ));
        assert!(
            r["azimuth1_deg"].is_number(),
            "ENU structure: azimuth column"
        );
    }
    // Epoch against a baseline epoch: the difference of the two fields.
    let a_base = run_epoch(&w1, &pts, &at, Some(&base), &req(Some(e0))).expect("runs");
    let doc = a_base.result.as_ref().expect("result");
    for r in doc["elements"].as_array().expect("elements") {
        assert!(
            close(r["exx_microstrain"].as_f64().expect("exx"), 150.0, 1e-8),
            "{r}"
        );
        assert!(close(
            r["eyy_microstrain"].as_f64().expect("eyy"),
            -110.0,
            1e-8
        ));
    }
    // Collinear data: stored as failed with the core's reason.
    let line: Vec<StoredPoint> = (0..4)
        .map(|i| StoredPoint {
            id: format!("L{i}"),
            x: vec![f64::from(i), f64::from(i)],
            sigma: None,
        })
        .collect();
    let a_fail = run_epoch(
        &w1,
        &line,
        &readings(&line, g_ref, [0.0, 0.0], ""),
        None,
        &req(None),
    )
    .expect("runs");
    assert_eq!(a_fail.status, AnalysisStatus::Failed);
    assert!(a_fail.error.as_deref().is_some_and(|e| !e.is_empty()));
    // Bad parameters are an error, nothing to store.
    let mut bad = req(None);
    bad.options.alpha = Some(2.0);
    assert!(run_epoch(&w1, &pts, &at, None, &bad).is_err());

    for a in [&a_ref, &a_base, &a_fail] {
        store.insert_analysis(a).await.expect("insert");
    }
    let a_w2 = run_epoch(
        &w2,
        &pts2,
        &readings(&pts2, g_ref, [0.0, 0.0], ""),
        None,
        &req(None),
    )
    .expect("runs");
    store.insert_analysis(&a_w2).await.expect("insert");

    // One analysis with its result.
    let (s, _, b) = get(
        &app,
        &token,
        &format!("/v1/structures/W1/analyses/{}", a_ref.id),
    )
    .await;
    assert_eq!(s, StatusCode::OK);
    let v = json_of(&b);
    assert_eq!(v["status"], "succeeded");
    assert_eq!(v["result"]["strain_unit"], "microstrain");
    // Listing: newest first, status filter, cursor pages.
    let (s, _, b) = get(&app, &token, "/v1/structures/W1/analyses?status=failed").await;
    assert_eq!(s, StatusCode::OK);
    let v = json_of(&b);
    assert_eq!(v["items"].as_array().map(Vec::len), Some(1));
    assert_eq!(v["items"][0]["id"], a_fail.id.to_string());
    let mut seen = Vec::new();
    let mut path = "/v1/structures/W1/analyses?limit=2".to_owned();
    loop {
        let (s, _, b) = get(&app, &token, &path).await;
        assert_eq!(s, StatusCode::OK);
        let v = json_of(&b);
        for it in v["items"].as_array().expect("items") {
            assert!(it.get("result").is_none(), "lists leave results out");
            seen.push(it["id"].as_str().expect("id").to_owned());
        }
        match v["next_cursor"].as_str() {
            Some(c) => path = format!("/v1/structures/W1/analyses?limit=2&cursor={c}"),
            None => break,
        }
    }
    let mut want = vec![
        a_ref.id.to_string(),
        a_base.id.to_string(),
        a_fail.id.to_string(),
    ];
    want.sort();
    let mut got = seen.clone();
    got.sort();
    assert_eq!(got, want, "every analysis once over the pages");
    let (s, _, _) = get(&app, &token, "/v1/structures/W1/analyses?cursor=zz").await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);

    // Exports.
    let base_path = format!("/v1/structures/W1/analyses/{}/result", a_ref.id);
    let (s, ct, b) = get(&app, &token, &format!("{base_path}?format=json")).await;
    assert_eq!(s, StatusCode::OK);
    assert!(ct.starts_with("application/json"));
    assert_eq!(json_of(&b), *a_ref.result.as_ref().expect("result"));
    let (s, ct, b) = get(&app, &token, &format!("{base_path}?format=csv")).await;
    assert_eq!(s, StatusCode::OK);
    assert!(ct.starts_with("text/csv"));
    let text = String::from_utf8(b).expect("utf-8");
    let first = text.split("\r\n").next().expect("header");
    assert!(
        first.starts_with("label,members,x_m,y_m,exx_microstrain"),
        "{first}"
    );
    let n_rows = a_ref.result.as_ref().expect("r")["elements"]
        .as_array()
        .map_or(0, Vec::len);
    let tables: Vec<&str> = text.split("\r\n\r\n").collect();
    assert_eq!(tables.len(), 2, "elements and rejected");
    assert_eq!(tables[0].trim_end().split("\r\n").count(), n_rows + 1);
    let (s, ct, b) = get(&app, &token, &format!("{base_path}?format=geojson")).await;
    assert_eq!(s, StatusCode::OK);
    assert_eq!(ct, "application/geo+json");
    let fc = json_of(&b);
    assert_eq!(fc["type"], "FeatureCollection");
    assert_eq!(fc["strain_unit"], "microstrain");
    assert!(fc["caution"].is_string());
    assert_eq!(fc["features"].as_array().map(Vec::len), Some(n_rows));
    // WGS84 (published: a = 6378137 m, 1/f = 298.257223563). Near the origin,
    // Δlat = Δn / M(φ0) and Δlon = Δe / (N(φ0)·cos φ0), with the radii of curvature
    // M = a(1−e²)/(1−e² sin²φ)^{3/2}, N = a/√(1−e² sin²φ) (standard geodesy);
    // the second-order error over 20 m is below 1e-9°.
    let a_ = 6_378_137.0_f64;
    let f = 1.0 / 298.257_223_563;
    let e2 = f * (2.0 - f);
    let phi = LAT0.to_radians();
    let w = (1.0 - e2 * phi.sin().powi(2)).sqrt();
    let m = a_ * (1.0 - e2) / w.powi(3);
    let n = a_ / w;
    let by_id: std::collections::HashMap<&str, &StoredPoint> =
        pts.iter().map(|p| (p.id.as_str(), p)).collect();
    for feat in fc["features"].as_array().expect("features") {
        assert_eq!(feat["geometry"]["type"], "Polygon");
        let ring = feat["geometry"]["coordinates"][0].as_array().expect("ring");
        assert_eq!(ring.len(), 4);
        assert_eq!(ring[0], ring[3], "closed ring");
        // Counter-clockwise (RFC 7946 §3.1.6): positive shoelace area in lon/lat.
        let area2: f64 = (0..3)
            .map(|i| {
                let (p, q) = (&ring[i], &ring[i + 1]);
                p[0].as_f64().expect("lon") * q[1].as_f64().expect("lat")
                    - q[0].as_f64().expect("lon") * p[1].as_f64().expect("lat")
            })
            .sum();
        assert!(area2 > 0.0, "counter-clockwise");
        for (k, id) in feat["properties"]["members"]
            .as_array()
            .expect("m")
            .iter()
            .enumerate()
        {
            let p = by_id[id.as_str().expect("id")];
            let lon = LON0 + (p.x[0] / (n * phi.cos())).to_degrees();
            let lat = LAT0 + (p.x[1] / m).to_degrees();
            let found = ring[..3].iter().any(|c| {
                (c[0].as_f64().expect("lon") - lon).abs() < 1e-9
                    && (c[1].as_f64().expect("lat") - lat).abs() < 1e-9
            });
            assert!(found, "member {k} ({id}) at {lon}, {lat} not in {ring:?}");
        }
    }
    // A failed analysis has no result; a local frame cannot be placed on WGS84.
    let (s, _, _) = get(
        &app,
        &token,
        &format!("/v1/structures/W1/analyses/{}/result", a_fail.id),
    )
    .await;
    assert_eq!(s, StatusCode::CONFLICT);
    let (s, _, b) = get(
        &app,
        &token,
        &format!(
            "/v1/structures/W2/analyses/{}/result?format=geojson",
            a_w2.id
        ),
    )
    .await;
    assert_eq!(s, StatusCode::CONFLICT);
    assert!(String::from_utf8_lossy(&b).contains("local frame"));
    let (s, _, _) = get(&app, &token, &format!("{base_path}?format=xml")).await;
    assert_eq!(
        s,
        StatusCode::UNPROCESSABLE_ENTITY,
        "a bad format is a bad field"
    );
    // Another structure's analysis, and a key limited to another structure: 404.
    let (s, _, _) = get(
        &app,
        &token,
        &format!("/v1/structures/W2/analyses/{}", a_ref.id),
    )
    .await;
    assert_eq!(s, StatusCode::NOT_FOUND);
    let (s, _, _) = get(
        &app,
        &other_token,
        &format!("/v1/structures/W1/analyses/{}", a_ref.id),
    )
    .await;
    assert_eq!(s, StatusCode::NOT_FOUND);
    let (s, _, _) = get(&app, &other_token, "/v1/structures/W1/analyses").await;
    assert_eq!(s, StatusCode::NOT_FOUND);
    let (s, _, _) = get(&app, &token, "/v1/structures/W1/analyses/not-a-uuid").await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
}

#[tokio::test]
async fn analyses_on_sqlite() {
    let (url, _dir) = sqlite_file();
    let s = store::open(&url).await.expect("open");
    s.migrate().await.expect("migrate");
    scenario(s).await;
}

#[tokio::test]
async fn analyses_on_postgres() {
    let schema = PgSchema::create("api_analyses").await;
    let s = store::open(&schema.url).await.expect("open");
    s.migrate().await.expect("migrate");
    scenario(s).await;
    schema.drop_schema().await;
}
