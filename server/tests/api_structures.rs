//! Errors and conversions of `/v1/structures` and its points, in process (the real
//! router over a real store, both backends). Every error is an RFC 9457 problem
//! (`application/problem+json` with type, title, status and detail), bad fields carry
//! a JSON pointer (RFC 6901), and a refused write leaves nothing behind.

mod api_support;

use std::time::Duration;

use api_support::{App, Backend, Resp, local_2d};
use axum::body::{Body, Bytes};
use axum::http::Method;
use kinema_server::api::Limits;
use kinema_server::model::Scope;
use serde_json::{Value, json};

api_case!(
    malformed_json_is_400,
    nan_and_infinity_literals_are_400,
    unknown_fields_are_422_with_their_pointer,
    wrong_content_type_is_415,
    body_over_the_limit_is_413,
    more_points_than_allowed_is_413,
    duplicate_point_ids_point_at_the_second,
    coordinates_must_match_the_dimension,
    sigma_must_be_positive_and_one_per_dimension,
    unknown_structures_are_404,
    bad_ids_are_422,
    dimension_cannot_change_under_points,
    metadata_must_be_a_small_object,
    enu_origin_out_of_range_is_422,
    wgs84_points_become_enu_coordinates,
    wgs84_needs_an_enu_frame_and_excludes_x,
    lengths_convert_between_units,
    a_refused_points_write_leaves_nothing,
    unknown_routes_and_methods_are_problems,
    slow_requests_time_out_with_408,
    requests_over_the_concurrency_limit_get_503,
    bad_query_and_path_parameters_are_422_with_their_pointer,
);

const PATH: &str = "/v1/structures/WALL-1";
const POINTS: &str = "/v1/structures/WALL-1/points";

/// The app with a write key and structure WALL-1 (2D, local, mm) stored.
async fn with_wall(b: Backend, limits: Limits) -> (App, String) {
    let app = App::start(b, limits).await;
    let t = app.key(Scope::Write, None).await;
    let r = app
        .call(Method::PUT, PATH, Some(&t), Some(local_2d("Wall")))
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    (app, t)
}

async fn put_points(app: &App, t: &str, body: Value) -> Resp {
    app.call(Method::PUT, POINTS, Some(t), Some(body)).await
}

async fn stored_points(app: &App, t: &str) -> Value {
    let r = app.call(Method::GET, POINTS, Some(t), None).await;
    assert_eq!(r.status, 200);
    r.json["points"].clone()
}

async fn malformed_json_is_400(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    // A complete, valid document followed by more text is not JSON either.
    let trailing = format!("{} trailing", local_2d("Wall"));
    for body in [
        "{\"name\": ",
        "{\"name\": \"x\",}",
        "not json",
        "",
        trailing.as_str(),
        // Not JSON, even though a field is missing before the parser reaches the end.
        "{\"name\": \"x\"} trailing",
        "{\"name\": 1, \"dimension\": NaN}",
    ] {
        let r = app
            .raw(Method::PUT, PATH, &t, "application/json", body.to_owned())
            .await;
        let p = r.problem(400);
        assert!(
            p["type"]
                .as_str()
                .is_some_and(|s| s.ends_with("/malformed-body"))
        );
    }
}

async fn nan_and_infinity_literals_are_400(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    for lit in ["NaN", "Infinity", "-Infinity", "1e999"] {
        let body = format!(r#"{{"points": [{{"id": "P1", "x": [{lit}, 0]}}]}}"#);
        let r = app
            .raw(Method::PUT, POINTS, &t, "application/json", body)
            .await;
        // serde_json reads 1e999 as an out-of-range number: also not JSON we accept.
        let status = r.status.as_u16();
        assert!(status == 400 || status == 422, "{lit}: {status}");
        r.problem(status);
    }
    assert_eq!(stored_points(&app, &t).await, json!([]));
}

async fn unknown_fields_are_422_with_their_pointer(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let mut body = local_2d("Wall");
    body["colour"] = json!("grey");
    let r = app.call(Method::PUT, PATH, Some(&t), Some(body)).await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/colour"]);
    assert!(
        r.json["errors"][0]["detail"]
            .as_str()
            .is_some_and(|d| d.contains("unknown field `colour`"))
    );
    let r = put_points(
        &app,
        &t,
        json!({"points": [{"id": "P1", "x": [0, 0]}, {"id": "P2", "x": [1, 0], "z": 3}]}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/1/z"]);
    // A wrong type and a missing field also point at their place.
    let r = put_points(&app, &t, json!({"points": [{"id": "P1", "x": [0, "a"]}]})).await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/0/x/1"]);
    let r = app
        .call(Method::PUT, PATH, Some(&t), Some(json!({"dimension": 2})))
        .await;
    r.problem(422);
}

async fn wrong_content_type_is_415(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let body = json!({"points": [{"id": "P1", "x": [0, 0]}]}).to_string();
    for ct in [
        "text/plain",
        "text/csv",
        "application/x-www-form-urlencoded",
    ] {
        let r = app.raw(Method::PUT, POINTS, &t, ct, body.clone()).await;
        r.problem(415);
    }
    // No content type at all.
    let req = axum::http::Request::builder()
        .method(Method::PUT)
        .uri(POINTS)
        .header("authorization", format!("Bearer {t}"))
        .body(Body::from(body.clone()))
        .expect("request");
    app.send(req).await.problem(415);
    // `application/json; charset=utf-8` is JSON.
    let r = app
        .raw(
            Method::PUT,
            POINTS,
            &t,
            "application/json; charset=utf-8",
            body,
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.json);
}

async fn body_over_the_limit_is_413(b: Backend) {
    let limits = Limits {
        max_body_bytes: 2048,
        ..Limits::default()
    };
    let (app, t) = with_wall(b, limits).await;
    let points: Vec<Value> = (0..200)
        .map(|i| json!({"id": format!("P{i}"), "x": [i, 0]}))
        .collect();
    let body = json!({ "points": points });
    assert!(body.to_string().len() > 2048);
    let p = put_points(&app, &t, body).await.problem(413).clone();
    assert!(
        p["detail"]
            .as_str()
            .is_some_and(|d| d.contains("KINEMA_MAX_BODY_BYTES"))
    );
    assert_eq!(stored_points(&app, &t).await, json!([]));
    // Just under the limit is accepted.
    let small = json!({"points": [{"id": "P1", "x": [0, 0]}]});
    assert_eq!(put_points(&app, &t, small).await.status, 200);
}

async fn more_points_than_allowed_is_413(b: Backend) {
    let limits = Limits {
        max_points: 3,
        ..Limits::default()
    };
    let (app, t) = with_wall(b, limits).await;
    let points: Vec<Value> = (0..4)
        .map(|i| json!({"id": format!("P{i}"), "x": [i, 0]}))
        .collect();
    let p = put_points(&app, &t, json!({ "points": points[..4] }))
        .await
        .problem(413)
        .clone();
    assert!(
        p["detail"]
            .as_str()
            .is_some_and(|d| d.contains("KINEMA_MAX_POINTS"))
    );
    assert_eq!(stored_points(&app, &t).await, json!([]));
    let r = put_points(&app, &t, json!({ "points": points[..3] })).await;
    assert_eq!(r.status, 200);
    assert_eq!(r.json, json!({"created": 3, "updated": 0}));
    // No points at all is refused too.
    put_points(&app, &t, json!({"points": []}))
        .await
        .problem(422);
}

async fn duplicate_point_ids_point_at_the_second(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let r = put_points(
        &app,
        &t,
        json!({"points": [
            {"id": "P1", "x": [0, 0]},
            {"id": "P2", "x": [1, 0]},
            {"id": "P1", "x": [0, 1]},
        ]}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/2/id"]);
    assert!(
        r.json["errors"][0]["detail"]
            .as_str()
            .is_some_and(|d| d.contains("/points/0"))
    );
}

async fn coordinates_must_match_the_dimension(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let r = put_points(
        &app,
        &t,
        json!({"points": [
            {"id": "P1", "x": [0, 0, 0]},
            {"id": "P2", "x": [1]},
            {"id": "P3", "x": [1, 2]},
        ]}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/0/x", "/points/1/x"]);
    // A 3D structure wants three.
    let mut s3 = local_2d("Dam");
    s3["dimension"] = json!(3);
    let r = app
        .call(Method::PUT, "/v1/structures/DAM-1", Some(&t), Some(s3))
        .await;
    assert_eq!(r.status, 201);
    let r = app
        .call(
            Method::PUT,
            "/v1/structures/DAM-1/points",
            Some(&t),
            Some(json!({"points": [{"id": "P1", "x": [0, 0]}]})),
        )
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/0/x"]);
    // Only 2 or 3 dimensions exist.
    let mut s4 = local_2d("Odd");
    s4["dimension"] = json!(4);
    let r = app
        .call(Method::PUT, "/v1/structures/ODD-1", Some(&t), Some(s4))
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/dimension"]);
}

async fn sigma_must_be_positive_and_one_per_dimension(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let r = put_points(
        &app,
        &t,
        json!({"points": [
            {"id": "P1", "x": [0, 0], "sigma": [0, 1]},
            {"id": "P2", "x": [1, 0], "sigma": [1, -0.5]},
            {"id": "P3", "x": [2, 0], "sigma": [1]},
            {"id": "P4", "x": [3, 0], "sigma": [0.5, 0.5]},
        ]}),
    )
    .await;
    r.problem(422);
    assert_eq!(
        r.pointers(),
        ["/points/0/sigma/0", "/points/1/sigma/1", "/points/2/sigma"]
    );
    assert_eq!(stored_points(&app, &t).await, json!([]));
}

async fn unknown_structures_are_404(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    for (m, path, body) in [
        (Method::GET, "/v1/structures/NOPE", None),
        (Method::DELETE, "/v1/structures/NOPE", None),
        (Method::GET, "/v1/structures/NOPE/points", None),
        (
            Method::PUT,
            "/v1/structures/NOPE/points",
            Some(json!({"points": [{"id": "P1", "x": [0, 0]}]})),
        ),
    ] {
        let r = app.call(m.clone(), path, Some(&t), body).await;
        let p = r.problem(404);
        assert!(
            p["detail"].as_str().is_some_and(|d| d.contains("NOPE")),
            "{m} {path}: {p}"
        );
    }
    // Deleting twice: the second is a 404.
    assert_eq!(
        app.call(Method::DELETE, PATH, Some(&t), None).await.status,
        204
    );
    app.call(Method::DELETE, PATH, Some(&t), None)
        .await
        .problem(404);
    app.call(Method::GET, POINTS, Some(&t), None)
        .await
        .problem(404);
}

async fn bad_ids_are_422(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let long = "x".repeat(65);
    for id in ["has%20space", "caf%C3%A9", "a%2Fb", long.as_str()] {
        let r = app
            .call(
                Method::PUT,
                &format!("/v1/structures/{id}"),
                Some(&t),
                Some(local_2d("Bad")),
            )
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), ["/id"], "{id}");
    }
    let ok = "x".repeat(64);
    let r = app
        .call(
            Method::PUT,
            &format!("/v1/structures/{ok}"),
            Some(&t),
            Some(local_2d("Long ID")),
        )
        .await;
    assert_eq!(r.status, 201);
    // Point IDs follow the same rules.
    let r = put_points(
        &app,
        &t,
        json!({"points": [{"id": "", "x": [0, 0]}, {"id": "P 2", "x": [0, 0]}, {"id": long, "x": [0, 0]}]}),
    )
    .await;
    r.problem(422);
    assert_eq!(
        r.pointers(),
        ["/points/0/id", "/points/1/id", "/points/2/id"]
    );
    // A name that is empty or too long.
    for name in ["", "   ", &"n".repeat(201)] {
        let r = app
            .call(Method::PUT, PATH, Some(&t), Some(local_2d(name)))
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), ["/name"]);
    }
}

async fn dimension_cannot_change_under_points(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let mut s3 = local_2d("Wall");
    s3["dimension"] = json!(3);
    // Without points the dimension may change (and back).
    let r = app
        .call(Method::PUT, PATH, Some(&t), Some(s3.clone()))
        .await;
    assert_eq!(r.status, 200);
    assert_eq!(r.json["dimension"], 3);
    let r = app
        .call(Method::PUT, PATH, Some(&t), Some(local_2d("Wall")))
        .await;
    assert_eq!(r.status, 200);
    let r = put_points(&app, &t, json!({"points": [{"id": "P1", "x": [0, 0]}]})).await;
    assert_eq!(r.status, 200);
    let r = app.call(Method::PUT, PATH, Some(&t), Some(s3)).await;
    r.problem(409);
    let r = app.call(Method::GET, PATH, Some(&t), None).await;
    assert_eq!(r.json["dimension"], 2);
}

async fn metadata_must_be_a_small_object(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    for bad in [json!([1, 2]), json!("text"), json!(3), Value::Null] {
        let mut s = local_2d("Wall");
        s["metadata"] = bad.clone();
        let r = app.call(Method::PUT, PATH, Some(&t), Some(s)).await;
        r.problem(422);
        assert_eq!(r.pointers(), ["/metadata"], "{bad}");
    }
    let mut s = local_2d("Wall");
    s["metadata"] = json!({"blob": "m".repeat(17 * 1024)});
    let r = app.call(Method::PUT, PATH, Some(&t), Some(s)).await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/metadata"]);
    // What is stored is the first version.
    let r = app.call(Method::GET, PATH, Some(&t), None).await;
    assert_eq!(r.json["metadata"], json!({"asset_ref": "invented-7"}));
}

async fn enu_origin_out_of_range_is_422(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let enu = |lat: f64, lon: f64, h: f64| {
        let mut s = local_2d("Slope");
        s["frame"] = json!({"kind": "enu", "origin": {"lat_deg": lat, "lon_deg": lon, "h_m": h}});
        s
    };
    for (s, pointer) in [
        (enu(90.5, 8.0, 0.0), "/frame/origin/lat_deg"),
        (enu(-91.0, 8.0, 0.0), "/frame/origin/lat_deg"),
        (enu(45.0, 180.5, 0.0), "/frame/origin/lon_deg"),
        (enu(45.0, 8.0, 2.0e5), "/frame/origin/h_m"),
    ] {
        let r = app
            .call(Method::PUT, "/v1/structures/SLOPE-1", Some(&t), Some(s))
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), [pointer]);
    }
    let r = app
        .call(
            Method::PUT,
            "/v1/structures/SLOPE-1",
            Some(&t),
            Some(enu(90.0, -180.0, -400.0)),
        )
        .await;
    assert_eq!(
        r.status, 201,
        "the ends of the ranges are allowed: {}",
        r.json
    );
    // An unknown frame kind.
    let mut s = local_2d("Slope");
    s["frame"] = json!({"kind": "polar"});
    app.call(Method::PUT, "/v1/structures/SLOPE-2", Some(&t), Some(s))
        .await
        .problem(422);
}

// WGS84 defining constants (NIMA TR8350.2, 3rd ed., table 3.1): a = 6378137 m,
// 1/f = 298.257223563.
const A: f64 = 6_378_137.0;
const F: f64 = 1.0 / 298.257_223_563;

fn e2() -> f64 {
    F * (2.0 - F)
}

/// Prime-vertical radius of curvature N(φ) = a / √(1 − e² sin²φ).
fn n_radius(lat: f64) -> f64 {
    A / (1.0 - e2() * lat.sin().powi(2)).sqrt()
}

/// Meridian radius of curvature M(φ) = a (1 − e²) / (1 − e² sin²φ)^{3/2}.
fn m_radius(lat: f64) -> f64 {
    A * (1.0 - e2()) / (1.0 - e2() * lat.sin().powi(2)).powf(1.5)
}

async fn wgs84_points_become_enu_coordinates(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let t = app.key(Scope::Write, None).await;
    let (lat0, lon0) = (46.0_f64, 7.0_f64);
    let s = json!({
        "name": "Invented hillside",
        "dimension": 3,
        "frame": {"kind": "enu", "origin": {"lat_deg": lat0, "lon_deg": lon0, "h_m": 0.0}},
        "length_unit": "m",
    });
    let r = app
        .call(Method::PUT, "/v1/structures/HILL-1", Some(&t), Some(s))
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let (dlon, dlat) = (0.01_f64, 0.005_f64);
    let r = app
        .call(
            Method::PUT,
            "/v1/structures/HILL-1/points",
            Some(&t),
            Some(json!({"points": [
                {"id": "E", "wgs84": {"lat_deg": lat0, "lon_deg": lon0 + dlon, "h_m": 0.0}},
                {"id": "N", "wgs84": {"lat_deg": lat0 + dlat, "lon_deg": lon0}},
                {"id": "O", "wgs84": {"lat_deg": lat0, "lon_deg": lon0, "h_m": 12.5}},
            ]})),
        )
        .await;
    assert_eq!(r.status, 200, "{}", r.json);
    let r = app
        .call(Method::GET, "/v1/structures/HILL-1/points", Some(&t), None)
        .await;
    let pts = r.json["points"].as_array().expect("points").clone();
    let x = |i: usize| -> Vec<f64> {
        pts[i]["x"]
            .as_array()
            .expect("x")
            .iter()
            .map(|v| v.as_f64().expect("number"))
            .collect()
    };
    assert_eq!(pts[0]["id"], "E");
    let phi = lat0.to_radians();
    // E: same latitude and height, Δλ east. With X = N cosφ cosλ, Y = N cosφ sinλ,
    // Z = N(1 − e²) sinφ (geodetic to ECEF, h = 0) and the ENU axes at the origin,
    // exactly: east = N cosφ sin Δλ, north = N sinφ cosφ (1 − cos Δλ),
    // up = −N cos²φ (1 − cos Δλ).
    let dl = dlon.to_radians();
    let n = n_radius(phi);
    let expect_e = [
        n * phi.cos() * dl.sin(),
        n * phi.sin() * phi.cos() * (1.0 - dl.cos()),
        -n * phi.cos().powi(2) * (1.0 - dl.cos()),
    ];
    for (got, want) in x(0).iter().zip(expect_e) {
        assert!((got - want).abs() < 1e-6, "E: {:?} vs {expect_e:?}", x(0));
    }
    // N: due north by Δφ. North ≈ the meridian arc M(φ_mid)·Δφ (the chord is shorter
    // by s³/(24 M²) and tilted by Δφ/2: both under 1 µm here); up ≈ −s²/(2 M);
    // east = 0.
    let dp = dlat.to_radians();
    let s_arc = m_radius(phi + dp / 2.0) * dp;
    let got = x(1);
    assert!(got[0].abs() < 1e-6, "N east {got:?}");
    assert!(
        (got[1] - s_arc).abs() < 1e-4,
        "N north {} vs {s_arc}",
        got[1]
    );
    let up = -s_arc * s_arc / (2.0 * m_radius(phi));
    assert!((got[2] - up).abs() < 1e-4, "N up {} vs {up}", got[2]);
    // O: straight above the origin by 12.5 m.
    let got = x(2);
    assert!(got[0].abs() < 1e-6 && got[1].abs() < 1e-6, "{got:?}");
    assert!((got[2] - 12.5).abs() < 1e-6, "{got:?}");
}

async fn wgs84_needs_an_enu_frame_and_excludes_x(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let r = put_points(
        &app,
        &t,
        json!({"points": [{"id": "P1", "wgs84": {"lat_deg": 46.0, "lon_deg": 7.0}}]}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/0/wgs84"]);
    let r = put_points(
        &app,
        &t,
        json!({"points": [{"id": "P1", "x": [0, 0], "wgs84": {"lat_deg": 46.0, "lon_deg": 7.0}}, {"id": "P2"}]}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/points/0", "/points/1/x"]);
}

async fn lengths_convert_between_units(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    // WALL-1 is in mm; this request says m.
    let r = put_points(
        &app,
        &t,
        json!({"length_unit": "m", "points": [{"id": "P1", "x": [1.5, -2.25], "sigma": [0.001, 0.002]}]}),
    )
    .await;
    assert_eq!(r.status, 200);
    let r = put_points(&app, &t, json!({"points": [{"id": "P2", "x": [12.5, 0]}]})).await;
    assert_eq!(r.json, json!({"created": 1, "updated": 0}));
    let got = stored_points(&app, &t).await;
    assert_eq!(
        got,
        json!([
            {"id": "P1", "x": [1500.0, -2250.0], "sigma": [1.0, 2.0]},
            {"id": "P2", "x": [12.5, 0.0]},
        ])
    );
    // Replacing P1 counts as an update.
    let r = put_points(&app, &t, json!({"points": [{"id": "P1", "x": [1, 1]}]})).await;
    assert_eq!(r.json, json!({"created": 0, "updated": 1}));
    // An unknown unit is refused.
    let r = put_points(
        &app,
        &t,
        json!({"length_unit": "ft", "points": [{"id": "P1", "x": [1, 1]}]}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/length_unit"]);
}

async fn a_refused_points_write_leaves_nothing(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    let r = put_points(
        &app,
        &t,
        json!({"points": [{"id": "P1", "x": [0, 0]}, {"id": "P2", "x": [1, 0]}]}),
    )
    .await;
    assert_eq!(r.status, 200);
    let before = stored_points(&app, &t).await;
    // One good change, one new point, one bad point: nothing of it is stored.
    let r = put_points(
        &app,
        &t,
        json!({"points": [
            {"id": "P1", "x": [5, 5]},
            {"id": "P3", "x": [2, 0]},
            {"id": "P4", "x": [3, 0], "sigma": [0, 0]},
        ]}),
    )
    .await;
    r.problem(422);
    assert_eq!(stored_points(&app, &t).await, before);
}

async fn unknown_routes_and_methods_are_problems(b: Backend) {
    let (app, t) = with_wall(b, Limits::default()).await;
    for path in [
        "/v1/nothing",
        "/v2/structures",
        "/v1/structures/WALL-1/points/P1",
    ] {
        let r = app.call(Method::GET, path, Some(&t), None).await;
        r.problem(404);
    }
    let r = app.call(Method::PATCH, PATH, Some(&t), None).await;
    r.problem(405);
    let allow = r
        .headers
        .get("allow")
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_owned();
    for m in ["GET", "PUT", "DELETE"] {
        assert!(allow.contains(m), "Allow: {allow:?}");
    }
    app.call(Method::POST, "/v1/structures", Some(&t), None)
        .await
        .problem(405);
    // A bad query parameter is a problem too.
    let r = app
        .call(Method::GET, "/v1/structures?limit=0", Some(&t), None)
        .await;
    r.problem(422);
    let r = app
        .call(Method::GET, "/v1/structures?limit=abc", Some(&t), None)
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/limit"]);
    let r = app
        .call(Method::GET, "/v1/structures?cursor=zz", Some(&t), None)
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/cursor"]);
}

async fn slow_requests_time_out_with_408(b: Backend) {
    let limits = Limits {
        request_timeout: Duration::from_millis(300),
        ..Limits::default()
    };
    let (app, t) = with_wall(b, limits).await;
    // A body that never arrives: the request cannot finish before the timeout.
    let stream = futures_util::stream::pending::<Result<Bytes, std::io::Error>>();
    let r = app
        .raw(
            Method::PUT,
            POINTS,
            &t,
            "application/json",
            Body::from_stream(stream),
        )
        .await;
    let p = r.problem(408);
    assert!(
        p["detail"]
            .as_str()
            .is_some_and(|d| d.contains("KINEMA_REQUEST_TIMEOUT_SECS"))
    );
}

async fn requests_over_the_concurrency_limit_get_503(b: Backend) {
    let limits = Limits {
        max_concurrency: 1,
        ..Limits::default()
    };
    let (app, t) = with_wall(b, limits).await;
    // Request 1 holds the only slot while its body is held back.
    let (tx, rx) = tokio::sync::mpsc::channel::<Result<Bytes, std::io::Error>>(1);
    let stream = futures_util::stream::unfold(rx, |mut rx| async move {
        rx.recv().await.map(|item| (item, rx))
    });
    let req = axum::http::Request::builder()
        .method(Method::PUT)
        .uri(POINTS)
        .header("authorization", format!("Bearer {t}"))
        .header("content-type", "application/json")
        .body(Body::from_stream(stream))
        .expect("request");
    let router = app.router.clone();
    let first = tokio::spawn(async move {
        use tower::ServiceExt;
        let resp = router.oneshot(req).await.expect("infallible");
        resp.status()
    });
    // Until request 1 has its slot, /healthz answers 200; then 503.
    let deadline = tokio::time::Instant::now() + Duration::from_secs(10);
    let shed = loop {
        let r = app.call(Method::GET, "/healthz", None, None).await;
        if r.status == 503 {
            break r;
        }
        assert_eq!(r.status, 200);
        assert!(tokio::time::Instant::now() < deadline, "never shed");
        tokio::time::sleep(Duration::from_millis(10)).await;
    };
    let p = shed.problem(503);
    assert!(
        p["detail"]
            .as_str()
            .is_some_and(|d| d.contains("KINEMA_MAX_CONCURRENCY"))
    );
    // Request 1 completes once its body arrives, and the slot is free again.
    let body = json!({"points": [{"id": "P1", "x": [0, 0]}]}).to_string();
    tx.send(Ok(Bytes::from(body))).await.expect("send body");
    drop(tx);
    assert_eq!(first.await.expect("request 1"), 200);
    let r = app.call(Method::GET, "/healthz", None, None).await;
    assert_eq!(r.status, 200);
}

async fn bad_query_and_path_parameters_are_422_with_their_pointer(b: Backend) {
    let (app, _t) = with_wall(b, Limits::default()).await;
    let admin = app.key(Scope::Admin, None).await;
    for (path, pointer) in [
        ("/v1/structures?limit=abc", "/limit"),
        ("/v1/structures?limit=-1", "/limit"),
        ("/v1/structures?limit=0", "/limit"),
        ("/v1/structures/WALL-1/batches?limit=many", "/limit"),
        ("/v1/structures/WALL-1/analyses?from=yesterday", "/from"),
        ("/v1/structures/WALL-1/analyses?status=maybe", "/status"),
    ] {
        let r = app.call(Method::GET, path, Some(&admin), None).await;
        r.problem(422);
        assert_eq!(r.pointers(), [pointer], "{path}: {}", r.json);
    }
    let r = app
        .call(Method::DELETE, "/v1/keys/not-a-uuid", Some(&admin), None)
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/key_id"]);
}
