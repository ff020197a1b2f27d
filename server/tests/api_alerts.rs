//! Alert rules, states and events, and the reference strains, over HTTP in process on
//! both backends.
//! - rules: create (201, Location), list, get, replace and create by PUT (200/201),
//!   delete (204, then 404); defaults are stated in the stored rule;
//! - bad rules are 422 with a pointer to every bad field (negative and unsorted
//!   thresholds, too much hysteresis, unknown quantity, missing axis, unknown point);
//! - a read key reads but cannot write; a key limited to another structure gets 404;
//! - states and events of a finished analysis, evaluated by `alerts::evaluate` in the
//!   store's transaction, are listed with their unit and paged by cursor;
//! - reference strains answer any valid key, each value its inputs' quotient.

mod api_support;

use api_support::{App, Backend, local_2d};
use axum::http::Method;
use kinema_server::analysis::epoch::{Displacement, EpochRequest, run_epoch};
use kinema_server::analysis::params::{ElementInput, FieldOptions, MethodSpec};
use kinema_server::api::Limits;
use kinema_server::model::{JobOrigin, JobOutcome, NewJob, Scope, now_utc};
use kinema_server::units::StrainUnit;
use serde_json::{Value, json};

api_case!(
    rules_are_created_listed_replaced_and_deleted,
    bad_rules_are_422_with_a_pointer_to_every_bad_field,
    a_read_key_reads_rules_but_cannot_write_them,
    states_and_events_of_an_analysis_are_listed_with_their_unit,
    reference_strains_answer_any_valid_key,
);

/// A 2D structure `id` (millimetres) with points A, B, C, D on a 10 m square.
async fn wall(app: &App, token: &str, id: &str) {
    let r = app
        .call(
            Method::PUT,
            &format!("/v1/structures/{id}"),
            Some(token),
            Some(local_2d("invented wall")),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let r = app
        .call(
            Method::PUT,
            &format!("/v1/structures/{id}/points"),
            Some(token),
            Some(json!({
                "length_unit": "m",
                "points": [
                    {"id": "A", "x": [0, 0], "sigma": [0.0005, 0.0005]},
                    {"id": "B", "x": [10, 0], "sigma": [0.0005, 0.0005]},
                    {"id": "C", "x": [0, 10], "sigma": [0.0005, 0.0005]},
                    {"id": "D", "x": [10, 10], "sigma": [0.0005, 0.0005]}
                ]
            })),
        )
        .await;
    assert!(r.status.is_success(), "{}", r.json);
}

fn tension_rule() -> Value {
    json!({
        "name": "wall tension",
        "quantity": "principal_tensile",
        "unit": "microstrain",
        "levels": [{"name": "watch", "threshold": 100}, {"name": "alarm", "threshold": 200}],
        "hysteresis": 10,
        "scope": {"points": ["B"]}
    })
}

async fn rules_are_created_listed_replaced_and_deleted(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let w = app.key(Scope::Write, None).await;
    wall(&app, &w, "WALL-1").await;
    let base = "/v1/structures/WALL-1/alert-rules";
    let r = app
        .call(Method::POST, base, Some(&w), Some(tension_rule()))
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let id = r.json["id"].as_str().expect("id").to_owned();
    assert_eq!(r.headers["location"], format!("{base}/{id}"));
    assert_eq!(r.json["structure_id"], "WALL-1");
    // The defaults are stated: sense positive for tension (common practice: extension
    // positive), enabled.
    assert_eq!(r.json["sense"], "positive");
    assert_eq!(r.json["enabled"], true);
    assert_eq!(r.json["unit"], "microstrain");
    assert_eq!(r.json["levels"][1]["threshold"], 200.0);
    // The Location answers.
    let got = app
        .call(Method::GET, &format!("{base}/{id}"), Some(&w), None)
        .await;
    assert_eq!(got.status, 200, "{}", got.json);
    assert_eq!(got.json, r.json);
    // Replace: 200, creation time kept.
    let mut changed = tension_rule();
    changed["name"] = json!("wall tension, revised");
    changed["quantity"] = json!("principal_compressive");
    let put = app
        .call(
            Method::PUT,
            &format!("{base}/{id}"),
            Some(&w),
            Some(changed),
        )
        .await;
    assert_eq!(put.status, 200, "{}", put.json);
    assert_eq!(put.json["name"], "wall tension, revised");
    assert_eq!(
        put.json["sense"], "negative",
        "compression is negative strain"
    );
    assert_eq!(put.json["created_at"], r.json["created_at"]);
    // Create by PUT with the client's UUID: 201 and Location.
    let mine = "8c4f6a52-3f0e-4b8e-9a51-2d4c1e7b9f10";
    let put = app
        .call(
            Method::PUT,
            &format!("{base}/{mine}"),
            Some(&w),
            Some(json!({
                "name": "diagonal",
                "quantity": "axial",
                "axis": {"name": "diagonal", "direction": [1, 1]},
                "unit": "strain",
                "levels": [{"name": "watch", "threshold": 0.0002}]
            })),
        )
        .await;
    assert_eq!(put.status, 201, "{}", put.json);
    assert_eq!(put.headers["location"], format!("{base}/{mine}"));
    assert_eq!(put.json["sense"], "absolute");
    // Listed oldest first.
    let list = app.call(Method::GET, base, Some(&w), None).await;
    assert_eq!(list.status, 200, "{}", list.json);
    let ids: Vec<&str> = list.json["items"]
        .as_array()
        .expect("items")
        .iter()
        .filter_map(|r| r["id"].as_str())
        .collect();
    assert_eq!(ids, [id.as_str(), mine]);
    // The same ID under another structure is a conflict.
    wall(&app, &w, "WALL-2").await;
    app.call(
        Method::PUT,
        &format!("/v1/structures/WALL-2/alert-rules/{mine}"),
        Some(&w),
        Some(tension_rule()),
    )
    .await
    .problem(409);
    // Delete: 204, then 404.
    let del = app
        .call(Method::DELETE, &format!("{base}/{id}"), Some(&w), None)
        .await;
    assert_eq!(del.status, 204);
    app.call(Method::GET, &format!("{base}/{id}"), Some(&w), None)
        .await
        .problem(404);
    app.call(Method::DELETE, &format!("{base}/{id}"), Some(&w), None)
        .await
        .problem(404);
    // Unknown structure: 404.
    app.call(
        Method::POST,
        "/v1/structures/NOPE/alert-rules",
        Some(&w),
        Some(tension_rule()),
    )
    .await
    .problem(404);
}

async fn bad_rules_are_422_with_a_pointer_to_every_bad_field(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let w = app.key(Scope::Write, None).await;
    wall(&app, &w, "WALL-1").await;
    let base = "/v1/structures/WALL-1/alert-rules";
    let with = |patch: Value| {
        let mut v = tension_rule();
        for (k, x) in patch.as_object().expect("object") {
            v[k] = x.clone();
        }
        v
    };
    let cases = [
        (
            with(json!({"levels": [{"name": "a", "threshold": -5}]})),
            vec!["/levels/0/threshold"],
        ),
        (
            with(json!({"levels": [
                {"name": "a", "threshold": 200}, {"name": "b", "threshold": 100}
            ]})),
            vec!["/levels/1/threshold"],
        ),
        (with(json!({"hysteresis": 100})), vec!["/hysteresis"]),
        (with(json!({"quantity": "von_mises"})), vec!["/quantity"]),
        (with(json!({"quantity": "axial"})), vec!["/axis"]),
        (
            with(json!({"scope": {"points": ["B", "Z9"]}})),
            vec!["/scope/points/1"],
        ),
        (with(json!({"quantity": "strain_rate"})), vec!["/rate_of"]),
        (with(json!({"limit": 3})), vec!["/limit"]),
        // Several at once: every one is named.
        (
            with(json!({
                "name": "",
                "levels": [{"name": "a", "threshold": 0}, {"name": "a", "threshold": 50}],
                "significance": {"alpha": 0.7}
            })),
            vec![
                "/name",
                "/levels/0/threshold",
                "/levels/1/name",
                "/significance/alpha",
            ],
        ),
    ];
    for (body, want) in cases {
        let r = app
            .call(Method::POST, base, Some(&w), Some(body.clone()))
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), want, "{body}: {}", r.json);
    }
    // Nothing was stored.
    let list = app.call(Method::GET, base, Some(&w), None).await;
    assert_eq!(list.json["items"], json!([]));
    // A rule ID that is not a UUID.
    let r = app
        .call(
            Method::PUT,
            &format!("{base}/not-a-uuid"),
            Some(&w),
            Some(tension_rule()),
        )
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/rule_id"]);
}

async fn a_read_key_reads_rules_but_cannot_write_them(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let w = app.key(Scope::Write, None).await;
    let read = app.key(Scope::Read, None).await;
    let elsewhere = app.key(Scope::Write, Some(&["OTHER"])).await;
    wall(&app, &w, "WALL-1").await;
    let base = "/v1/structures/WALL-1/alert-rules";
    let r = app
        .call(Method::POST, base, Some(&w), Some(tension_rule()))
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let one = format!("{base}/{}", r.json["id"].as_str().expect("id"));
    for (m, path) in [
        (Method::POST, base.to_owned()),
        (Method::PUT, one.clone()),
        (Method::DELETE, one.clone()),
    ] {
        let body = (m != Method::DELETE).then(tension_rule);
        app.call(m, &path, Some(&read), body).await.problem(403);
    }
    for path in [
        base.to_owned(),
        one.clone(),
        "/v1/structures/WALL-1/alert-states".to_owned(),
        "/v1/structures/WALL-1/alert-events".to_owned(),
    ] {
        let r = app.call(Method::GET, &path, Some(&read), None).await;
        assert_eq!(r.status, 200, "{path}: {}", r.json);
        // A key limited to another structure does not see this one.
        app.call(Method::GET, &path, Some(&elsewhere), None)
            .await
            .problem(404);
    }
    app.call(Method::GET, base, None, None).await.problem(401);
}

async fn states_and_events_of_an_analysis_are_listed_with_their_unit(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let w = app.key(Scope::Write, None).await;
    wall(&app, &w, "WALL-1").await;
    let r = app
        .call(
            Method::POST,
            "/v1/structures/WALL-1/alert-rules",
            Some(&w),
            Some(json!({
                "name": "wall tension",
                "quantity": "principal_tensile",
                "unit": "microstrain",
                "levels": [{"name": "watch", "threshold": 100}, {"name": "alarm", "threshold": 200}]
            })),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let rule_id = r.json["id"].as_str().expect("id").to_owned();
    let empty = app
        .call(
            Method::GET,
            "/v1/structures/WALL-1/alert-states",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(empty.json["items"], json!([]));
    // An epoch analysis of a homogeneous field exx = 300, eyy = −100, exy = 50 µε,
    // finished through a job: e1 = 100 + sqrt(200² + 50²) = 306.2 µε (Gere & Goodno,
    // principal strains) raises both elements to level 2.
    let s = app
        .store
        .get_structure("WALL-1")
        .await
        .expect("read")
        .expect("structure");
    let points = app.store.list_points("WALL-1").await.expect("points");
    let g = [[300e-6, 50e-6], [50e-6, -100e-6]];
    let at: Vec<Displacement> = points
        .iter()
        .map(|p| Displacement {
            point_id: p.id.clone(),
            u: (0..2)
                .map(|i| g[i][0] * p.x[0] + g[i][1] * p.x[1])
                .collect(),
            sigma: None,
        })
        .collect();
    let epoch = time::macros::datetime!(2026-04-01 08:00 UTC);
    let req = EpochRequest {
        epoch,
        baseline_epoch: None,
        method: MethodSpec::Elements {
            elements: vec![
                ElementInput {
                    id: "E1".into(),
                    vertices: vec!["A".into(), "B".into(), "C".into()],
                },
                ElementInput {
                    id: "E2".into(),
                    vertices: vec!["B".into(), "D".into(), "C".into()],
                },
            ],
        },
        options: FieldOptions::default(),
        strain_unit: StrainUnit::Microstrain,
    };
    let analysis = run_epoch(&s, &points, &at, None, &req).expect("an epoch analysis");
    let now = now_utc();
    let job = app
        .store
        .enqueue_job(&NewJob {
            id: uuid::Uuid::new_v4(),
            structure_id: "WALL-1".into(),
            origin: JobOrigin::Request,
            batch_id: None,
            request: json!({"kind": "epoch"}),
            max_attempts: 1,
            created_at: now,
        })
        .await
        .expect("queued");
    let (_, lease) = app
        .store
        .claim_job("test-worker", now, now + time::Duration::minutes(1))
        .await
        .expect("claim")
        .expect("a job to claim");
    assert_eq!(lease.job_id, job.id);
    let done = app
        .store
        .complete_job(
            &lease,
            &JobOutcome::Analysis(Box::new(analysis.clone())),
            &kinema_server::alerts::evaluate,
            now,
        )
        .await
        .expect("completed");
    assert_eq!(done.alert_events.len(), 2, "{:?}", done.alert_events);
    // States: per rule and region, with the unit.
    let st = app
        .call(
            Method::GET,
            "/v1/structures/WALL-1/alert-states",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(st.status, 200, "{}", st.json);
    let items = st.json["items"].as_array().expect("items");
    assert_eq!(items.len(), 2);
    let e1 = 100.0 + 42500f64.sqrt();
    for it in items {
        assert_eq!(it["rule_id"], rule_id.as_str());
        assert_eq!(it["rule_name"], "wall tension");
        assert_eq!(it["level"], 2);
        assert_eq!(it["level_name"], "alarm");
        assert_eq!(it["unit"], "microstrain");
        assert!(
            (it["value"].as_f64().expect("value") - e1).abs() < 1e-6,
            "{it}"
        );
        assert_eq!(it["epoch"], "2026-04-01T08:00:00Z");
        assert_eq!(it["analysis_id"], analysis.id.to_string());
    }
    // Events: paged by cursor, filtered by rule and region.
    let path = "/v1/structures/WALL-1/alert-events";
    let p1 = app
        .call(Method::GET, &format!("{path}?limit=1"), Some(&w), None)
        .await;
    assert_eq!(p1.status, 200, "{}", p1.json);
    assert_eq!(p1.json["items"].as_array().map(Vec::len), Some(1));
    let ev = &p1.json["items"][0];
    assert_eq!(ev["kind"], "raised");
    assert_eq!(
        (ev["from_level"].as_u64(), ev["to_level"].as_u64()),
        (Some(0), Some(2))
    );
    assert_eq!(ev["evidence"]["unit"], "microstrain");
    assert_eq!(ev["evidence"]["to_level_name"], "alarm");
    let cursor = p1.json["next_cursor"].as_str().expect("a next page");
    let p2 = app
        .call(
            Method::GET,
            &format!("{path}?limit=1&cursor={cursor}"),
            Some(&w),
            None,
        )
        .await;
    assert_eq!(p2.json["items"].as_array().map(Vec::len), Some(1));
    assert!(p2.json.get("next_cursor").is_none(), "{}", p2.json);
    assert_ne!(p2.json["items"][0]["region"], ev["region"]);
    let only = app
        .call(
            Method::GET,
            &format!("{path}?region=E2&rule_id={rule_id}"),
            Some(&w),
            None,
        )
        .await;
    let regions: Vec<&str> = only.json["items"]
        .as_array()
        .expect("items")
        .iter()
        .filter_map(|e| e["region"].as_str())
        .collect();
    assert_eq!(regions, ["E2"]);
    let other = app
        .call(
            Method::GET,
            &format!("{path}?rule_id={}", uuid::Uuid::new_v4()),
            Some(&w),
            None,
        )
        .await;
    assert_eq!(other.json["items"], json!([]));
    // Bad filters name their parameter.
    for (q, pointer) in [
        ("rule_id=nope", "/rule_id"),
        ("limit=0", "/limit"),
        ("cursor=zz", "/cursor"),
    ] {
        let r = app
            .call(Method::GET, &format!("{path}?{q}"), Some(&w), None)
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), [pointer], "{q}");
    }
    // Deleting the rule removes its states; its events stay in the log.
    let del = app
        .call(
            Method::DELETE,
            &format!("/v1/structures/WALL-1/alert-rules/{rule_id}"),
            Some(&w),
            None,
        )
        .await;
    assert_eq!(del.status, 204);
    let st = app
        .call(
            Method::GET,
            "/v1/structures/WALL-1/alert-states",
            Some(&w),
            None,
        )
        .await;
    assert_eq!(st.json["items"], json!([]));
    let log = app.call(Method::GET, path, Some(&w), None).await;
    assert_eq!(log.json["items"].as_array().map(Vec::len), Some(2));
}

async fn reference_strains_answer_any_valid_key(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let read = app.key(Scope::Read, Some(&["SOME"])).await;
    let r = app
        .call(Method::GET, "/v1/reference-strains", Some(&read), None)
        .await;
    assert_eq!(r.status, 200, "{}", r.json);
    assert!(
        r.json["caution"]
            .as_str()
            .is_some_and(|c| c.contains("not a limit value"))
    );
    let items = r.json["items"].as_array().expect("items");
    let grades: Vec<&str> = items.iter().filter_map(|i| i["grade"].as_str()).collect();
    assert_eq!(grades, ["S235", "S355", "C25/30", "C30/37", "C40/50"]);
    for i in items {
        // Each value is strength / modulus with 1 GPa = 1000 MPa.
        let f = i["inputs"][0]["value"].as_f64().expect("strength");
        let e = i["inputs"][1]["value"].as_f64().expect("modulus");
        assert_eq!(i["inputs"][0]["unit"], "MPa");
        assert_eq!(i["inputs"][1]["unit"], "GPa");
        let strain = f / (e * 1000.0);
        assert!((i["strain"].as_f64().expect("strain") - strain).abs() < 1e-15);
        assert!((i["microstrain"].as_f64().expect("µε") - strain * 1e6).abs() < 1e-9);
        assert!(
            i["source"]
                .as_str()
                .is_some_and(|s| s.starts_with("EN 199"))
        );
        assert!(
            i["caution"]
                .as_str()
                .is_some_and(|c| c.contains("not a limit value"))
        );
    }
    // S355 on E = 210 GPa: 355 / 210 000 = 1690.5 µε (EN 1993-1-1 nominal values,
    // from memory).
    assert!((items[1]["microstrain"].as_f64().expect("µε") - 1690.476).abs() < 1e-3);
    app.call(Method::GET, "/v1/reference-strains", None, None)
        .await
        .problem(401);
}
