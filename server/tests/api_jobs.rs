//! Analysis jobs and the automatic analysis over the API, in process on SQLite and
//! PostgreSQL: a POST is answered 202 with a queued job, the job runs (as the workers of
//! `kinema serve` run it), and its analysis is stored once; an arriving batch queues
//! the structure's automatic analysis of each of its epochs, with the baseline policy
//! resolved against the stored epochs.
//!
//! Outside reference: a homogeneous displacement field `u = G·x` has the constant small
//! strain `ε = (G + Gᵀ)/2` (textbook continuum mechanics), which every constant-strain
//! triangle recovers exactly; the difference of two such fields is the field of `G₂ − G₁`.

mod api_support;

use api_support::{App, Backend};
use axum::http::Method;
use kinema_server::model::Scope;
use serde_json::{Value, json};

api_case!(
    a_queued_analysis_runs_once_and_the_job_links_it,
    job_lists_filter_and_page_and_jobs_stay_in_their_structure,
    the_automatic_analysis_queues_one_job_per_epoch_of_a_batch,
    automatic_analysis_settings_are_checked_and_scoped,
);

/// Gradient of survey `k` (dimensionless): k × a base field.
fn g(k: f64) -> [[f64; 2]; 2] {
    [[k * 100e-6, k * 20e-6], [k * 40e-6, k * -50e-6]]
}

const XS: [[f64; 2]; 5] = [[0.0, 0.0], [10.0, 0.0], [0.0, 8.0], [10.0, 8.0], [4.0, 3.0]];

fn epoch(day: u32) -> String {
    format!("2026-03-{day:02}T06:00:00Z")
}

async fn seed(app: &App, t: &str, id: &str) {
    let r = app
        .call(
            Method::PUT,
            &format!("/v1/structures/{id}"),
            Some(t),
            Some(
                json!({"name": "Invented footbridge abutment", "dimension": 2,
                        "frame": {"kind": "local"}, "length_unit": "m"}),
            ),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let points: Vec<Value> = XS
        .iter()
        .enumerate()
        .map(|(i, x)| json!({"id": format!("A{i}"), "x": x}))
        .collect();
    let r = app
        .call(
            Method::PUT,
            &format!("/v1/structures/{id}/points"),
            Some(t),
            Some(json!({"points": points})),
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.json);
}

/// A batch with the field of `g(k)` at each (day, k).
async fn batch(app: &App, t: &str, id: &str, surveys: &[(u32, f64)]) -> Value {
    let mut readings = Vec::new();
    for &(day, k) in surveys {
        let gk = g(k);
        for (i, x) in XS.iter().enumerate() {
            let u = [
                gk[0][0] * x[0] + gk[0][1] * x[1],
                gk[1][0] * x[0] + gk[1][1] * x[1],
            ];
            readings.push(json!({"point_id": format!("A{i}"), "epoch": epoch(day), "u": u}));
        }
    }
    let r = app
        .call(
            Method::POST,
            &format!("/v1/structures/{id}/batches"),
            Some(t),
            Some(json!({"readings": readings})),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    r.json
}

/// exx of every element of a stored analysis's result, microstrain.
async fn exx_of(app: &App, t: &str, id: &str, analysis: &str) -> Vec<f64> {
    let r = app
        .call(
            Method::GET,
            &format!("/v1/structures/{id}/analyses/{analysis}/result"),
            Some(t),
            None,
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.json);
    r.json["elements"]
        .as_array()
        .expect("elements")
        .iter()
        .map(|row| row["exx_microstrain"].as_f64().expect("exx"))
        .collect()
}

async fn a_queued_analysis_runs_once_and_the_job_links_it(b: Backend) {
    let app = App::start(b, Default::default()).await;
    let w = app.key(Scope::Write, None).await;
    let r = app.key(Scope::Read, None).await;
    seed(&app, &w, "FB-1").await;
    batch(&app, &w, "FB-1", &[(1, 1.0), (8, 3.0)]).await;
    let body = json!({"kind": "epoch", "epoch": epoch(8), "baseline_epoch": epoch(1),
                      "method": {"kind": "delaunay"}});
    let q = app
        .call(
            Method::POST,
            "/v1/structures/FB-1/analyses",
            Some(&w),
            Some(body.clone()),
        )
        .await;
    assert_eq!(q.status, 202, "{}", q.json);
    let jid = q.json["id"].as_str().expect("job id").to_owned();
    assert_eq!(
        q.headers.get("location").and_then(|v| v.to_str().ok()),
        Some(format!("/v1/structures/FB-1/jobs/{jid}").as_str())
    );
    assert_eq!(q.json["status"], "queued");
    assert_eq!(q.json["origin"], "request");
    assert_eq!(q.json["attempts"], 0);
    // The request is kept as validated, with the defaults filled in.
    assert_eq!(q.json["request"]["epoch"], body["epoch"]);
    assert_eq!(q.json["request"]["baseline_epoch"], body["baseline_epoch"]);
    assert_eq!(q.json["request"]["method"], body["method"]);
    assert_eq!(q.json["request"]["strain_unit"], "microstrain");
    assert!(q.json["analysis_id"].is_null());
    // A read key cannot queue; nothing ran yet, so there is no analysis.
    let p = app
        .call(
            Method::POST,
            "/v1/structures/FB-1/analyses",
            Some(&r),
            Some(body.clone()),
        )
        .await;
    p.problem(403);
    let list = app
        .call(Method::GET, "/v1/structures/FB-1/analyses", Some(&r), None)
        .await;
    assert_eq!(list.json["items"], json!([]));

    assert_eq!(app.drain().await, 1, "one attempt");
    assert_eq!(app.drain().await, 0, "nothing left to claim");
    let j = app
        .call(
            Method::GET,
            &format!("/v1/structures/FB-1/jobs/{jid}"),
            Some(&r),
            None,
        )
        .await;
    assert_eq!(j.status, 200);
    assert_eq!(j.json["status"], "succeeded", "{}", j.json);
    assert_eq!(j.json["attempts"], 1);
    assert_eq!(j.json["worker"], "test-worker");
    assert!(j.json["finished_at"].is_string());
    let aid = j.json["analysis_id"].as_str().expect("analysis").to_owned();
    let list = app
        .call(Method::GET, "/v1/structures/FB-1/analyses", Some(&r), None)
        .await;
    let items = list.json["items"].as_array().expect("items");
    assert_eq!(items.len(), 1, "exactly one analysis");
    assert_eq!(items[0]["id"], aid.as_str());
    // The change between the surveys is the field of g(3) − g(1) = g(2): exx = 200 µε.
    for exx in exx_of(&app, &r, "FB-1", &aid).await {
        assert!((exx - 200.0).abs() < 1e-6, "{exx}");
    }

    // Request errors are answered at once and queue nothing.
    for (bad, pointer) in [
        (
            json!({"kind": "epoch", "epoch": epoch(9), "method": {"kind": "delaunay"}}),
            "/epoch",
        ),
        (
            json!({"kind": "epoch", "epoch": epoch(8), "baseline_epoch": epoch(8),
                   "method": {"kind": "delaunay"}}),
            "/baseline_epoch",
        ),
        (
            json!({"kind": "series", "from": epoch(8), "method": {"kind": "delaunay"}}),
            "/method",
        ),
    ] {
        let p = app
            .call(
                Method::POST,
                "/v1/structures/FB-1/analyses",
                Some(&w),
                Some(bad.clone()),
            )
            .await;
        p.problem(422);
        assert!(
            p.pointers().iter().any(|x| x.starts_with(pointer)),
            "{bad}: {}",
            p.json
        );
    }
    let jobs = app
        .call(Method::GET, "/v1/structures/FB-1/jobs", Some(&r), None)
        .await;
    assert_eq!(jobs.json["items"].as_array().map(Vec::len), Some(1));
}

async fn job_lists_filter_and_page_and_jobs_stay_in_their_structure(b: Backend) {
    let app = App::start(b, Default::default()).await;
    let w = app.key(Scope::Write, None).await;
    seed(&app, &w, "FB-2").await;
    seed(&app, &w, "FB-3").await;
    batch(&app, &w, "FB-2", &[(1, 1.0)]).await;
    let body = json!({"kind": "epoch", "epoch": epoch(1), "method": {"kind": "delaunay"}});
    let mut ids = Vec::new();
    for _ in 0..3 {
        let q = app
            .call(
                Method::POST,
                "/v1/structures/FB-2/analyses",
                Some(&w),
                Some(body.clone()),
            )
            .await;
        assert_eq!(q.status, 202);
        ids.push(q.json["id"].as_str().expect("id").to_owned());
    }
    let queued = app
        .call(
            Method::GET,
            "/v1/structures/FB-2/jobs?status=queued",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(queued.json["items"].as_array().map(Vec::len), Some(3));
    app.drain().await;
    let queued = app
        .call(
            Method::GET,
            "/v1/structures/FB-2/jobs?status=queued",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(queued.json["items"], json!([]));
    // Pages of 2, newest first, every job once.
    let mut seen = Vec::new();
    let mut path = "/v1/structures/FB-2/jobs?limit=2".to_owned();
    loop {
        let p = app.call(Method::GET, &path, Some(&w), None).await;
        assert_eq!(p.status, 200, "{}", p.json);
        for j in p.json["items"].as_array().expect("items") {
            assert_eq!(j["status"], "succeeded");
            seen.push(j["id"].as_str().expect("id").to_owned());
        }
        match p.json["next_cursor"].as_str() {
            Some(c) => path = format!("/v1/structures/FB-2/jobs?limit=2&cursor={c}"),
            None => break,
        }
    }
    ids.reverse();
    assert_eq!(seen, ids);
    // A job is found only under its own structure; bad IDs and filters are refused.
    let other = app
        .call(
            Method::GET,
            &format!("/v1/structures/FB-3/jobs/{}", ids[0]),
            Some(&w),
            None,
        )
        .await;
    other.problem(404);
    app.call(
        Method::GET,
        "/v1/structures/FB-2/jobs/not-a-uuid",
        Some(&w),
        None,
    )
    .await
    .problem(422);
    app.call(
        Method::GET,
        "/v1/structures/FB-2/jobs?status=done",
        Some(&w),
        None,
    )
    .await
    .problem(422);
    app.call(
        Method::GET,
        "/v1/structures/FB-2/jobs?cursor=zz",
        Some(&w),
        None,
    )
    .await
    .problem(422);
    // A key limited to FB-3 does not see FB-2's jobs.
    let limited = app.key(Scope::Read, Some(&["FB-3"])).await;
    app.call(
        Method::GET,
        "/v1/structures/FB-2/jobs",
        Some(&limited),
        None,
    )
    .await
    .problem(404);
}

async fn the_automatic_analysis_queues_one_job_per_epoch_of_a_batch(b: Backend) {
    let app = App::start(b, Default::default()).await;
    let w = app.key(Scope::Write, None).await;
    seed(&app, &w, "FB-4").await;
    // Before any automatic analysis is set, a batch queues nothing.
    batch(&app, &w, "FB-4", &[(1, 1.0)]).await;
    let jobs = app
        .call(Method::GET, "/v1/structures/FB-4/jobs", Some(&w), None)
        .await;
    assert_eq!(jobs.json["items"], json!([]));
    let auto = json!({"method": {"kind": "delaunay"}, "baseline": "previous_epoch"});
    let r = app
        .call(
            Method::PUT,
            "/v1/structures/FB-4/auto-analysis",
            Some(&w),
            Some(auto),
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.json);
    assert_eq!(
        r.json["strain_unit"], "microstrain",
        "defaults are filled in"
    );
    let got = app
        .call(
            Method::GET,
            "/v1/structures/FB-4/auto-analysis",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(got.json, r.json);
    // One batch with two surveys: two jobs, each relative to the epoch before it.
    let stored = batch(&app, &w, "FB-4", &[(15, 4.0), (8, 2.5)]).await;
    let jobs = app
        .call(Method::GET, "/v1/structures/FB-4/jobs", Some(&w), None)
        .await;
    let items = jobs.json["items"].as_array().expect("items").clone();
    assert_eq!(items.len(), 2, "{}", jobs.json);
    let mut pairs: Vec<(String, String)> = items
        .iter()
        .map(|j| {
            assert_eq!(j["origin"], "batch");
            assert_eq!(j["batch_id"], stored["id"]);
            (
                j["request"]["epoch"].as_str().expect("epoch").to_owned(),
                j["request"]["baseline_epoch"]
                    .as_str()
                    .expect("baseline")
                    .to_owned(),
            )
        })
        .collect();
    pairs.sort();
    assert_eq!(pairs, vec![(epoch(8), epoch(1)), (epoch(15), epoch(8))]);
    assert_eq!(app.drain().await, 2);
    // Increments: g(2.5) − g(1) = g(1.5) → 150 µε; g(4) − g(2.5) = g(1.5) → 150 µε.
    let list = app
        .call(Method::GET, "/v1/structures/FB-4/analyses", Some(&w), None)
        .await;
    let analyses = list.json["items"].as_array().expect("items").clone();
    assert_eq!(analyses.len(), 2);
    for a in analyses {
        assert_eq!(a["status"], "succeeded");
        for exx in exx_of(&app, &w, "FB-4", a["id"].as_str().expect("id")).await {
            assert!((exx - 150.0).abs() < 1e-6, "{exx}");
        }
    }
    // Removed: the next batch queues nothing.
    let r = app
        .call(
            Method::DELETE,
            "/v1/structures/FB-4/auto-analysis",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(r.status, 204);
    batch(&app, &w, "FB-4", &[(22, 5.0)]).await;
    let jobs = app
        .call(Method::GET, "/v1/structures/FB-4/jobs", Some(&w), None)
        .await;
    assert_eq!(jobs.json["items"].as_array().map(Vec::len), Some(2));
    app.call(
        Method::GET,
        "/v1/structures/FB-4/auto-analysis",
        Some(&w),
        None,
    )
    .await
    .problem(404);
}

async fn automatic_analysis_settings_are_checked_and_scoped(b: Backend) {
    let app = App::start(b, Default::default()).await;
    let w = app.key(Scope::Write, None).await;
    let r = app.key(Scope::Read, None).await;
    seed(&app, &w, "FB-5").await;
    let path = "/v1/structures/FB-5/auto-analysis";
    app.call(
        Method::PUT,
        path,
        Some(&r),
        Some(json!({"method": {"kind": "delaunay"}})),
    )
    .await
    .problem(403);
    app.call(
        Method::PUT,
        "/v1/structures/NOPE/auto-analysis",
        Some(&w),
        Some(json!({"method": {"kind": "delaunay"}})),
    )
    .await
    .problem(404);
    for (bad, pointer) in [
        (
            json!({"method": {"kind": "delaunay"}, "baseline": "yesterday"}),
            "/baseline",
        ),
        (json!({"method": {"kind": "delaunay"}, "every": 3}), ""),
        (json!({"method": {"kind": "spline"}}), "/method"),
        (
            json!({"method": {"kind": "delaunay"}, "options": {"alpha": 2.0}}),
            "/options/alpha",
        ),
    ] {
        let p = app
            .call(Method::PUT, path, Some(&w), Some(bad.clone()))
            .await;
        p.problem(422);
        if !pointer.is_empty() {
            assert!(
                p.pointers().iter().any(|x| x.starts_with(pointer)),
                "{bad}: {}",
                p.json
            );
        }
    }
    app.call(Method::GET, path, Some(&r), None)
        .await
        .problem(404);
}
