//! `/v1/compute/*` in process (`tower::ServiceExt::oneshot` on the app over a real
//! SQLite store), checked against sources outside the project.

use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use kinema_server::api::{AppState, Limits, app};
use kinema_server::keys::new_key;
use kinema_server::model::Scope;
use kinema_server::store;
use serde_json::{Value, json};
use tower::ServiceExt;

struct Api {
    app: axum::Router,
    token: String,
    _dir: tempfile::TempDir,
}

async fn api(limits: Limits) -> Api {
    let (url, dir) = kinema_tests::db::sqlite_file();
    let s = store::open(&url).await.expect("open");
    s.migrate().await.expect("migrate");
    let (token, key) = new_key("compute tests", Scope::Read, None).expect("key");
    s.insert_key(&key).await.expect("insert key");
    Api {
        app: app(AppState::new(s, limits)),
        token,
        _dir: dir,
    }
}

impl Api {
    async fn post_raw(&self, path: &str, body: &str) -> (StatusCode, Value) {
        let req = Request::post(path)
            .header(header::AUTHORIZATION, format!("Bearer {}", self.token))
            .header(header::CONTENT_TYPE, "application/json")
            .body(Body::from(body.to_owned()))
            .expect("request");
        let resp = self.app.clone().oneshot(req).await.expect("response");
        let status = resp.status();
        let bytes = axum::body::to_bytes(resp.into_body(), 1 << 26)
            .await
            .expect("body");
        (
            status,
            serde_json::from_slice(&bytes).unwrap_or(Value::Null),
        )
    }

    async fn post(&self, path: &str, body: &Value) -> (StatusCode, Value) {
        self.post_raw(path, &body.to_string()).await
    }
}

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * (1.0 + b.abs())
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn pointers(v: &Value) -> Vec<String> {
    v["errors"]
        .as_array()
        .into_iter()
        .flatten()
        .filter_map(|e| e["pointer"].as_str().map(str::to_owned))
        .collect()
}

#[tokio::test]
async fn principal_strains_follow_the_mohr_circle_closed_form() {
    let a = api(Limits::default()).await;
    // A symmetric gradient is its own small strain (no rotation).
    let (exx, eyy, exy) = (400e-6, -100e-6, 150e-6);
    let (s, v) = a
        .post(
            "/v1/compute/gradient",
            &json!({"gradient": [[exx, exy], [exy, eyy]], "strain_unit": "microstrain", "enu": true}),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    assert_eq!(v["strain_unit"], "microstrain");
    assert!(
        v["caution"]
            .as_str()
            .expect("caution")
            .contains("not a structural")
    );
    // Textbook Mohr circle: e1,2 = (exx+eyy)/2 ± sqrt(((exx−eyy)/2)² + exy²),
    // tan 2θp = 2exy/(exx−eyy).
    let c = (exx + eyy) / 2.0;
    let r = (((exx - eyy) / 2.0_f64).powi(2) + exy * exy).sqrt();
    let e1 = (c + r) * 1e6;
    let e2 = (c - r) * 1e6;
    assert!(close(num(&v["principal"][0]["value"]), e1, 1e-12));
    assert!(close(num(&v["principal"][1]["value"]), e2, 1e-12));
    let theta = 0.5 * (2.0 * exy).atan2(exx - eyy);
    assert!(close(
        num(&v["principal"][0]["angle_deg"]),
        theta.to_degrees(),
        1e-10
    ));
    // Azimuth clockwise from north of an axis at θ from east: 90° − θ (mod 180).
    assert!(close(
        num(&v["principal"][0]["azimuth_deg"]),
        (90.0 - theta.to_degrees()).rem_euclid(180.0),
        1e-10
    ));
    assert!(close(num(&v["mohr"][0]["centre"]), c * 1e6, 1e-12));
    assert!(close(num(&v["mohr"][0]["radius"]), r * 1e6, 1e-12));
    // Maximum shear: tensor = R, engineering = 2R (both labelled).
    assert!(close(num(&v["max_shear"]["tensor_shear"]), r * 1e6, 1e-12));
    assert!(close(
        num(&v["max_shear"]["engineering_shear"]),
        2.0 * r * 1e6,
        1e-12
    ));
    assert!(close(
        num(&v["engineering_shear"][0]),
        2.0 * exy * 1e6,
        1e-12
    ));
    // Volumetric strain = trace.
    assert!(close(
        num(&v["volumetric_strain"]),
        (exx + eyy) * 1e6,
        1e-12
    ));
    assert_eq!(v["isotropic"], false);
    assert_eq!(v["small_strain"]["adequate"], true);
}

#[tokio::test]
async fn pure_rotation_has_zero_strain_and_rigid_green_lagrange() {
    let a = api(Limits::default()).await;
    // Exact rigid rotation by φ: F = R(φ), G = R − I. Green–Lagrange E = (FᵀF − I)/2 = 0
    // (definition); small strain ε = (G+Gᵀ)/2 = (cos φ − 1)·I is the second-order
    // spurious strain; rotation ω = sin φ.
    let phi: f64 = 0.02;
    let g = [[phi.cos() - 1.0, -phi.sin()], [phi.sin(), phi.cos() - 1.0]];
    let (s, v) = a
        .post(
            "/v1/compute/gradient",
            &json!({"gradient": g, "strain_unit": "strain"}),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    for i in 0..2 {
        for j in 0..2 {
            assert!(num(&v["green_lagrange"][i][j]).abs() < 1e-15, "{v}");
        }
    }
    assert!(close(num(&v["rotation_rad"]), phi.sin(), 1e-12));
    assert!(close(
        num(&v["strain_tensor"][0][0]),
        phi.cos() - 1.0,
        1e-12
    ));
    // Isotropic small strain: no direction, flagged.
    assert_eq!(v["isotropic"], true);
    assert!(v["principal"][0]["direction"].is_null());
    // 2e-4 spurious strain > the default 1e-6 resolution: small strain is not adequate.
    assert_eq!(v["small_strain"]["adequate"], false);
    assert!(
        !v["small_strain"]["reasons"]
            .as_array()
            .expect("reasons")
            .is_empty()
    );
}

#[tokio::test]
async fn three_d_principal_strains_match_numpy_eigh() {
    let a = api(Limits::default()).await;
    let g = [
        [120e-6, 30e-6, -20e-6],
        [10e-6, -60e-6, 45e-6],
        [-40e-6, 5e-6, 80e-6],
    ];
    let (s, v) = a
        .post(
            "/v1/compute/gradient",
            &json!({"gradient": g, "strain_unit": "strain"}),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    // numpy.linalg.eigh of the symmetric part (ascending; reversed for e1 ≥ e2 ≥ e3).
    let reference = kinema_tests::python_json(
        "import json,sys,numpy as np\n\
         g=np.array(json.load(sys.stdin)['g'])\n\
         e=(g+g.T)/2\n\
         w,v=np.linalg.eigh(e)\n\
         print(json.dumps({'w':w[::-1].tolist(),'v':v[:,::-1].T.tolist(),'tr':float(np.trace(e))}))",
        &json!({"g": g}),
    );
    for k in 0..3 {
        let want = num(&reference["w"][k]);
        assert!(
            close(num(&v["principal"][k]["value"]), want, 1e-9),
            "{k}: {v}"
        );
        // Directions agree up to sign: |n·n_ref| = 1.
        let d = &v["principal"][k]["direction"];
        let dot: f64 = (0..3)
            .map(|i| num(&d[i]) * num(&reference["v"][k][i]))
            .sum();
        assert!(close(dot.abs(), 1.0, 1e-9), "{k}: {dot}");
    }
    assert!(close(
        num(&v["volumetric_strain"]),
        num(&reference["tr"]),
        1e-12
    ));
    assert_eq!(v["mohr"].as_array().map(Vec::len), Some(3));
}

fn square_grid(g: [[f64; 2]; 2], unit_scale: f64) -> Vec<Value> {
    let mut pts = Vec::new();
    let mut n = 0;
    for i in 0..4 {
        for j in 0..4 {
            // Slightly irregular so that the triangulation is unique.
            let x = [
                f64::from(i) * 10.0 + 0.3 * f64::from(j % 2),
                f64::from(j) * 10.0,
            ];
            let u = [
                g[0][0] * x[0] + g[0][1] * x[1] + 0.002,
                g[1][0] * x[0] + g[1][1] * x[1] - 0.001,
            ];
            pts.push(json!({"id": format!("P{n}"),
                "x": [x[0] * unit_scale, x[1] * unit_scale],
                "u": [u[0] * unit_scale, u[1] * unit_scale]}));
            n += 1;
        }
    }
    pts
}

#[tokio::test]
async fn a_uniform_field_is_recovered_exactly_by_every_method() {
    let a = api(Limits::default()).await;
    // Uniform field u = t + G·x: every estimator returns G (linear completeness of
    // constant-strain elements and of the least-squares plane fit).
    let g = [[250e-6, 80e-6], [-40e-6, -120e-6]];
    let exy = (g[0][1] + g[1][0]) / 2.0;
    for (method, section, unit, scale) in [
        (json!({"kind": "delaunay"}), "elements", "m", 1.0),
        (
            json!({"kind": "neighbourhood", "k": 6}),
            "neighbourhoods",
            "mm",
            1000.0,
        ),
        (json!({"kind": "network"}), "network", "m", 1.0),
        (
            json!({"kind": "groups", "groups": [{"name": "G1", "point_ids": ["P0", "P1", "P5", "P4"]}]}),
            "groups",
            "m",
            1.0,
        ),
        (
            json!({"kind": "elements", "elements": [{"id": "E1", "vertices": ["P0", "P4", "P1"]}]}),
            "elements",
            "m",
            1.0,
        ),
    ] {
        let (s, v) = a
            .post(
                "/v1/compute/strain-field",
                &json!({"length_unit": unit, "strain_unit": "microstrain",
                        "points": square_grid(g, scale), "method": method}),
            )
            .await;
        assert_eq!(s, StatusCode::OK, "{method}: {v}");
        assert_eq!(v["strain_unit"], "microstrain");
        assert_eq!(v["length_unit"], unit);
        assert!(v["caution"].is_string());
        let rows = v[section].as_array().expect("section rows");
        assert!(!rows.is_empty(), "{method}");
        for r in rows {
            assert!(
                close(num(&r["exx_microstrain"]), g[0][0] * 1e6, 1e-7),
                "{method}: {r}"
            );
            assert!(
                close(num(&r["eyy_microstrain"]), g[1][1] * 1e6, 1e-7),
                "{method}: {r}"
            );
            assert!(
                close(num(&r["exy_microstrain"]), exy * 1e6, 1e-7),
                "{method}: {r}"
            );
            assert!(
                close(num(&r["gxy_microstrain"]), 2.0 * exy * 1e6, 1e-7),
                "{method}: {r}"
            );
        }
    }
}

#[tokio::test]
async fn rosette_rectangular_formulas() {
    let a = api(Limits::default()).await;
    // Rectangular 0/45/90 rosette (textbook): exx = e0, eyy = e90,
    // gxy = 2·e45 − e0 − e90.
    let (e0, e45, e90) = (500.0, 300.0, -200.0);
    let (s, v) = a
        .post(
            "/v1/compute/rosette",
            &json!({"reading_unit": "microstrain", "strain_unit": "microstrain",
                    "rosettes": [{"id": "R1", "gauges": [
                        {"id": "a", "angle_deg": 0, "reading": e0},
                        {"id": "b", "angle_deg": 45, "reading": e45},
                        {"id": "c", "angle_deg": 90, "reading": e90}]}]}),
        )
        .await;
    assert_eq!(s, StatusCode::OK, "{v}");
    assert_eq!(v["strain_unit"], "microstrain");
    let r = &v["rosettes"][0];
    assert!(close(num(&r["exx_microstrain"]), e0, 1e-10), "{r}");
    assert!(close(num(&r["eyy_microstrain"]), e90, 1e-10));
    let gxy = 2.0 * e45 - e0 - e90;
    assert!(close(num(&r["gxy_microstrain"]), gxy, 1e-10));
    // Principal strains: (e0+e90)/2 ± ½·sqrt((e0−e90)² + gxy²) (textbook).
    let c = (e0 + e90) / 2.0;
    let rad = 0.5 * ((e0 - e90).powi(2) + gxy * gxy).sqrt();
    assert!(close(num(&r["e1_microstrain"]), c + rad, 1e-10));
    assert!(close(num(&r["e2_microstrain"]), c - rad, 1e-10));
}

#[tokio::test]
async fn bad_inputs_get_status_and_pointer() {
    let a = api(Limits {
        max_points: 10,
        ..Limits::default()
    })
    .await;
    let pts =
        |v: Vec<Value>| json!({"length_unit": "m", "points": v, "method": {"kind": "delaunay"}});
    let p = |id: &str, x: [f64; 2]| json!({"id": id, "x": x, "u": [0.0, 0.0]});
    // Duplicate point IDs.
    let (s, v) = a
        .post(
            "/v1/compute/strain-field",
            &pts(vec![
                p("A", [0.0, 0.0]),
                p("B", [1.0, 0.0]),
                p("A", [0.0, 1.0]),
            ]),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert_eq!(pointers(&v), ["/points/2/id"]);
    // Collinear points: the core's reason, 422.
    let (s, v) = a
        .post(
            "/v1/compute/strain-field",
            &pts(vec![
                p("A", [0.0, 0.0]),
                p("B", [1.0, 1.0]),
                p("C", [2.0, 2.0]),
            ]),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert!(
        v["type"]
            .as_str()
            .expect("type")
            .ends_with("not-computable"),
        "{v}"
    );
    // Wrong sizes and a negative sigma.
    let (s, v) = a
        .post(
            "/v1/compute/strain-field",
            &pts(vec![
                p("A", [0.0, 0.0]),
                json!({"id": "B", "x": [1.0, 0.0, 3.0], "u": [0.0, 0.0]}),
                json!({"id": "C", "x": [0.0, 1.0], "u": [0.0, 0.0], "sigma": [0.001, -1.0]}),
            ]),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(pointers(&v), ["/points/1/x", "/points/2/sigma/1"]);
    // NaN is not JSON: 400.
    let (s, _) = a
        .post_raw(
            "/v1/compute/strain-field",
            r#"{"length_unit":"m","points":[{"id":"A","x":[NaN,0],"u":[0,0]}],"method":{"kind":"delaunay"}}"#,
        )
        .await;
    assert_eq!(s, StatusCode::BAD_REQUEST);
    // Over the point limit: 413.
    let many: Vec<Value> = (0..11)
        .map(|i| p(&format!("P{i}"), [f64::from(i), 0.0]))
        .collect();
    let (s, _) = a.post("/v1/compute/strain-field", &pts(many)).await;
    assert_eq!(s, StatusCode::PAYLOAD_TOO_LARGE);
    // Unknown unit: 422 at /length_unit.
    let (s, v) = a
        .post(
            "/v1/compute/strain-field",
            &json!({"length_unit": "ft", "points": [], "method": {"kind": "delaunay"}}),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(pointers(&v), ["/length_unit"]);
    // Bad options and method parameters.
    let (s, v) = a
        .post(
            "/v1/compute/strain-field",
            &json!({"length_unit": "m", "points": [p("A", [0.0, 0.0])],
                    "method": {"kind": "neighbourhood", "k": 0},
                    "options": {"alpha": 1.5}}),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(pointers(&v), ["/method/k", "/options/alpha"]);
    // Gradient: not square; det F ≤ 0 is refused by the kinematics.
    let (s, v) = a
        .post(
            "/v1/compute/gradient",
            &json!({"gradient": [[0.0, 0.0], [0.0]]}),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(pointers(&v), ["/gradient/1"]);
    let (s, _) = a
        .post(
            "/v1/compute/gradient",
            &json!({"gradient": [[-2.0, 0.0], [0.0, 0.0]]}),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    // Rosette: two gauges in one direction cannot give a strain state.
    let (s, v) = a
        .post(
            "/v1/compute/rosette",
            &json!({"rosettes": [{"id": "R", "gauges": [
                {"id": "a", "angle_deg": 0, "reading": 1},
                {"id": "b", "angle_deg": 180, "reading": 1},
                {"id": "c", "angle_deg": 90, "reading": 1}]}]}),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    let (s, v) = a
        .post(
            "/v1/compute/rosette",
            &json!({"rosettes": [{"id": "R", "gauges": [
                {"id": "a", "angle_deg": 0, "reading": 1},
                {"id": "a", "angle_deg": 45, "reading": 1}]}]}),
        )
        .await;
    assert_eq!(s, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(
        pointers(&v),
        ["/rosettes/0/gauges", "/rosettes/0/gauges/1/id"]
    );
    // No key: 401.
    let req = Request::post("/v1/compute/gradient")
        .header(header::CONTENT_TYPE, "application/json")
        .body(Body::from("{}"))
        .expect("request");
    let resp = a.app.clone().oneshot(req).await.expect("response");
    assert_eq!(resp.status(), StatusCode::UNAUTHORIZED);
}
