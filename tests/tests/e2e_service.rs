//! End-to-end checks of `kinema serve`: the real binary on a free loopback port, over
//! plain HTTP, on an SQLite file and on a PostgreSQL schema (each case runs on both).

use std::collections::BTreeSet;
use std::time::Duration;

use kinema_tests::e2e;
use kinema_tests::http::Request;
use kinema_tests::server::{Server, TestDb, create_key, kinema_ok};
use serde_json::json;
use sqlx::Connection;

e2e!(
    serve_applies_the_migrations_at_start_up,
    migrate_then_serve,
    health_and_readiness,
    metrics_count_requests_by_route_template,
    openapi_json_is_the_committed_document,
    docs_serve_swagger_ui_from_the_binary,
    structures_and_points_over_http,
    sigterm_lets_the_request_in_flight_finish,
    json_log_lines_on_stderr,
    text_log_lines_have_no_colour_codes_when_piped,
    limits_from_flags_apply,
);

/// Versions of the migration files for the backend (`migrations/<backend>/NNNN_*.sql`).
fn migration_files(backend: &str) -> BTreeSet<i64> {
    let dir = kinema_tests::workspace_root()
        .join("migrations")
        .join(backend);
    std::fs::read_dir(&dir)
        .unwrap_or_else(|e| panic!("{}: {e}", dir.display()))
        .filter_map(Result::ok)
        .filter_map(|e| {
            let name = e.file_name().to_string_lossy().into_owned();
            name.strip_suffix(".sql")?
                .split('_')
                .next()?
                .parse::<i64>()
                .ok()
        })
        .collect()
}

/// Versions recorded as applied in the database (sqlx's `_sqlx_migrations`).
fn applied_migrations(db: &TestDb) -> BTreeSet<i64> {
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("runtime");
    rt.block_on(async {
        const SQL: &str = "SELECT version FROM _sqlx_migrations WHERE success ORDER BY version";
        let rows: Vec<(i64,)> = if db.backend == "sqlite" {
            let mut c = sqlx::SqliteConnection::connect(&db.url)
                .await
                .expect("open the SQLite file");
            sqlx::query_as(SQL).fetch_all(&mut c).await.expect("query")
        } else {
            let mut c = sqlx::PgConnection::connect(&db.url).await.expect("connect");
            sqlx::query_as(SQL).fetch_all(&mut c).await.expect("query")
        };
        rows.into_iter().map(|(v,)| v).collect()
    })
}

fn serve_applies_the_migrations_at_start_up(db: &TestDb) {
    let server = Server::start(&db.url);
    let files = migration_files(db.backend);
    assert!(files.contains(&1), "{files:?}");
    assert_eq!(applied_migrations(db), files);
    drop(server);
    // A second start on the same database applies nothing new and serves.
    let server = Server::start(&db.url);
    assert_eq!(applied_migrations(db), files);
    assert_eq!(server.get("/readyz").status, 200);
}

fn migrate_then_serve(db: &TestDb) {
    let out = kinema_ok(&["migrate", "--database-url", &db.url]);
    assert!(
        out.starts_with(&format!("migrations applied ({}:", db.backend)),
        "{out:?}"
    );
    assert_eq!(applied_migrations(db), migration_files(db.backend));
    // Again: nothing to do, still success.
    kinema_ok(&["migrate", "--database-url", &db.url]);
    let server = Server::start(&db.url);
    let key = create_key(&db.url, "read", &[]);
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(&key.token));
    assert_eq!(r.status, 200);
    assert_eq!(r.json(), json!({"items": []}));
}

fn health_and_readiness(db: &TestDb) {
    let server = Server::start(&db.url);
    let r = server.get("/healthz");
    assert_eq!(r.status, 200);
    assert!(
        r.header("content-type")
            .is_some_and(|c| c.starts_with("application/json"))
    );
    let h = r.json();
    assert_eq!(h["status"], "ok");
    assert!(h["version"].as_str().is_some_and(|v| !v.is_empty()));
    let r = server.get("/readyz");
    assert_eq!(r.status, 200);
    assert_eq!(r.json()["database"], db.backend);
}

/// The value of the sample `name{labels}` in a Prometheus text exposition.
fn sample(text: &str, series: &str) -> Option<f64> {
    text.lines()
        .find_map(|l| l.strip_prefix(series)?.strip_prefix(' ')?.parse().ok())
}

fn metrics_count_requests_by_route_template(db: &TestDb) {
    let server = Server::start(&db.url);
    for _ in 0..3 {
        assert_eq!(server.get("/healthz").status, 200);
    }
    assert_eq!(server.get("/v1/structures/WALL-7").status, 401);
    assert_eq!(server.get("/v1/structures/WALL-8").status, 401);
    let r = server.get("/metrics");
    assert_eq!(r.status, 200);
    assert!(
        r.header("content-type")
            .is_some_and(|c| c.starts_with("text/plain; version=0.0.4")),
        "{:?}",
        r.header("content-type")
    );
    let text = r.text();
    let healthz = r#"kinema_http_requests_total{method="GET",route="/healthz",status="200"}"#;
    let by_id =
        r#"kinema_http_requests_total{method="GET",route="/v1/structures/{id}",status="401"}"#;
    // The readiness polls of the harness also count, so at least 3.
    let before = sample(&text, healthz).expect("healthz counter");
    assert!(before >= 3.0, "{text}");
    assert_eq!(sample(&text, by_id), Some(2.0), "{text}");
    assert!(!text.contains("WALL-7"), "raw paths must not become labels");
    assert!(text.contains("# TYPE kinema_http_request_duration_seconds histogram"));
    let count = sample(
        &text,
        r#"kinema_http_request_duration_seconds_count{method="GET",route="/healthz"}"#,
    )
    .expect("latency count");
    assert_eq!(count, before);
    assert_eq!(server.get("/healthz").status, 200);
    let text = server.get("/metrics").text();
    assert_eq!(sample(&text, healthz), Some(before + 1.0));
}

fn openapi_json_is_the_committed_document(db: &TestDb) {
    let server = Server::start(&db.url);
    let r = server.get("/openapi.json");
    assert_eq!(r.status, 200);
    let path = kinema_tests::workspace_root().join("openapi/kinema.json");
    let committed: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&path).expect("read openapi/kinema.json"))
            .expect("the committed document is JSON");
    assert_eq!(r.json(), committed);
    assert!(
        committed["openapi"]
            .as_str()
            .is_some_and(|v| v.starts_with("3.1"))
    );
}

/// Values of `attr="…"` in an HTML page.
fn attributes<'a>(html: &'a str, attr: &str) -> Vec<&'a str> {
    let needle = format!("{attr}=\"");
    html.match_indices(&needle)
        .filter_map(|(i, _)| {
            let rest = &html[i + needle.len()..];
            rest.split('"').next()
        })
        .collect()
}

fn docs_serve_swagger_ui_from_the_binary(db: &TestDb) {
    let server = Server::start(&db.url);
    let mut r = server.get("/docs/");
    if (300..400).contains(&r.status) {
        let to = r.header("location").expect("redirect target").to_owned();
        r = server.get(&to);
    }
    assert_eq!(r.status, 200);
    assert!(
        r.header("content-type")
            .is_some_and(|c| c.starts_with("text/html"))
    );
    let html = r.text();
    assert!(html.contains("swagger-ui"), "{html}");
    let mut assets: Vec<&str> = attributes(&html, "src");
    assets.extend(attributes(&html, "href"));
    let scripts: Vec<&str> = assets
        .iter()
        .copied()
        .filter(|a| a.ends_with(".js"))
        .collect();
    assert!(scripts.len() >= 2, "scripts: {scripts:?}");
    for a in &assets {
        assert!(
            !a.starts_with("http://") && !a.starts_with("https://") && !a.starts_with("//"),
            "the page loads {a} from the network"
        );
        let path = format!("/docs/{}", a.trim_start_matches("./"));
        let r = server.get(&path);
        assert_eq!(r.status, 200, "{path}");
        assert!(!r.body.is_empty(), "{path}");
        if a.ends_with(".js") {
            assert!(
                r.header("content-type")
                    .is_some_and(|c| c.contains("javascript")),
                "{path}: {:?}",
                r.header("content-type")
            );
        }
    }
    // The initializer points Swagger UI at this server's own document.
    let init = server.get("/docs/swagger-initializer.js");
    assert_eq!(init.status, 200);
    assert!(init.text().contains("/openapi.json"));
}

fn structures_and_points_over_http(db: &TestDb) {
    let server = Server::start(&db.url);
    let key = create_key(&db.url, "write", &[]);
    let t = key.token.as_str();
    let body = json!({
        "name": "Invented retaining wall",
        "dimension": 2,
        "frame": {"kind": "enu", "origin": {"lat_deg": 47.1, "lon_deg": 8.6, "h_m": 420.0}},
        "length_unit": "mm",
        "material": {"name": "concrete", "youngs_modulus_gpa": 30.0, "poisson_ratio": 0.2},
        "metadata": {"asset_ref": "RW-17"}
    });
    let r = server.send(
        &Request::new("PUT", "/v1/structures/RW-17")
            .bearer(t)
            .json(&body),
    );
    assert_eq!(r.status, 201, "{}", r.text());
    assert_eq!(r.header("location"), Some("/v1/structures/RW-17"));
    let created = r.json();
    assert_eq!(created["id"], "RW-17");
    assert_eq!(created["metadata"], json!({"asset_ref": "RW-17"}));
    let r = server.send(&Request::new("GET", "/v1/structures/RW-17").bearer(t));
    assert_eq!(r.status, 200);
    assert_eq!(r.json(), created);
    // Replace: 200, creation time kept.
    let mut renamed = body.clone();
    renamed["name"] = json!("Renamed wall");
    let r = server.send(
        &Request::new("PUT", "/v1/structures/RW-17")
            .bearer(t)
            .json(&renamed),
    );
    assert_eq!(r.status, 200);
    let replaced = r.json();
    assert_eq!(replaced["name"], "Renamed wall");
    assert_eq!(replaced["created_at"], created["created_at"]);
    // Points.
    let pts = json!({"points": [
        {"id": "T1", "x": [0.0, 0.0], "sigma": [0.5, 0.5]},
        {"id": "T2", "x": [10000.0, 0.0]},
        {"id": "T3", "x": [0.0, 8000.0]},
    ]});
    let r = server.send(
        &Request::new("PUT", "/v1/structures/RW-17/points")
            .bearer(t)
            .json(&pts),
    );
    assert_eq!(r.status, 200, "{}", r.text());
    assert_eq!(r.json(), json!({"created": 3, "updated": 0}));
    let r = server.send(&Request::new("GET", "/v1/structures/RW-17/points").bearer(t));
    assert_eq!(
        r.json(),
        json!({"length_unit": "mm", "points": [
            {"id": "T1", "x": [0.0, 0.0], "sigma": [0.5, 0.5]},
            {"id": "T2", "x": [10000.0, 0.0]},
            {"id": "T3", "x": [0.0, 8000.0]},
        ]})
    );
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(t));
    assert_eq!(r.json()["items"][0]["name"], "Renamed wall");
    // An error over HTTP is a problem document.
    let r = server.send(
        &Request::new("PUT", "/v1/structures/RW-17/points")
            .bearer(t)
            .json(&json!({"points": [{"id": "T1", "x": [1.0]}]})),
    );
    assert_eq!(r.status, 422);
    assert_eq!(r.header("content-type"), Some("application/problem+json"));
    assert_eq!(r.json()["errors"][0]["pointer"], "/points/0/x");
    // Delete, then it is gone.
    let r = server.send(&Request::new("DELETE", "/v1/structures/RW-17").bearer(t));
    assert_eq!(r.status, 204);
    let r = server.send(&Request::new("GET", "/v1/structures/RW-17").bearer(t));
    assert_eq!(r.status, 404);
    assert_eq!(r.header("content-type"), Some("application/problem+json"));
    let r = server.send(&Request::new("GET", "/v1/structures/RW-17/points").bearer(t));
    assert_eq!(r.status, 404);
}

fn sigterm_lets_the_request_in_flight_finish(db: &TestDb) {
    let mut server = Server::start(&db.url);
    let key = create_key(&db.url, "write", &[]);
    let body = json!({
        "name": "Invented tunnel portal",
        "dimension": 3,
        "frame": {"kind": "local"},
        "length_unit": "m",
    });
    let req = Request::new("PUT", "/v1/structures/TP-1")
        .bearer(&key.token)
        .json(&body);
    // Head and most of the body now; the server is waiting for the rest.
    let mut pending = req.send_part(server.addr, req.body.len() - 5);
    std::thread::sleep(Duration::from_millis(300));
    server.sigterm();
    std::thread::sleep(Duration::from_millis(500));
    assert!(server.running(), "the server quit with a request in flight");
    // No new connections are taken once shutdown has begun.
    let deadline = std::time::Instant::now() + Duration::from_secs(10);
    while std::net::TcpStream::connect(server.addr).is_ok() {
        assert!(std::time::Instant::now() < deadline, "still accepting");
        std::thread::sleep(Duration::from_millis(50));
    }
    let r = pending.finish();
    assert_eq!(r.status, 201, "{}", r.text());
    let status = server
        .wait_exit(Duration::from_secs(20))
        .expect("the server exits after the last request");
    assert_eq!(status.code(), Some(0), "exit status {status:?}");
    let log = server.stderr_after_exit();
    assert!(log.contains("shutdown signal received"), "{log}");
    assert!(log.contains("kinema stopped"), "{log}");
    // The request was committed.
    let server = Server::start(&db.url);
    let r = server.send(&Request::new("GET", "/v1/structures/TP-1").bearer(&key.token));
    assert_eq!(r.status, 200);
}

fn json_log_lines_on_stderr(db: &TestDb) {
    let mut server = Server::start_with(&db.url, &["--log-format", "json"]);
    assert_eq!(server.get("/healthz").status, 200);
    server.sigterm();
    let status = server.wait_exit(Duration::from_secs(20)).expect("exits");
    assert_eq!(status.code(), Some(0));
    let log = server.stderr_after_exit();
    let lines: Vec<&str> = log.lines().filter(|l| !l.trim().is_empty()).collect();
    assert!(lines.len() >= 2, "{log}");
    let mut messages = Vec::new();
    for l in &lines {
        let v: serde_json::Value =
            serde_json::from_str(l).unwrap_or_else(|e| panic!("not a JSON line ({e}): {l}"));
        assert!(v["timestamp"].is_string() && v["level"].is_string(), "{l}");
        messages.push(v["fields"]["message"].as_str().unwrap_or("").to_owned());
        if v["fields"]["message"] == "kinema serving" {
            assert_eq!(v["fields"]["backend"], db.backend);
            assert!(
                v["fields"]["addr"]
                    .as_str()
                    .is_some_and(|a| a.starts_with("127.0.0.1:"))
            );
        }
    }
    assert!(
        messages.iter().any(|m| m == "kinema serving"),
        "{messages:?}"
    );
    assert!(
        messages.iter().any(|m| m == "kinema stopped"),
        "{messages:?}"
    );
}

fn text_log_lines_have_no_colour_codes_when_piped(db: &TestDb) {
    let mut server = Server::start(&db.url);
    server.sigterm();
    let status = server.wait_exit(Duration::from_secs(20)).expect("exits");
    assert_eq!(status.code(), Some(0));
    let log = server.stderr_after_exit();
    assert!(log.contains("kinema serving"), "{log}");
    assert!(
        !log.contains('\u{1b}'),
        "ANSI escape codes in piped logs:\n{log:?}"
    );
}

fn limits_from_flags_apply(db: &TestDb) {
    let server = Server::start_with(
        &db.url,
        &[
            "--max-body-bytes",
            "600",
            "--max-points",
            "2",
            "--request-timeout-secs",
            "1",
        ],
    );
    let key = create_key(&db.url, "write", &[]);
    let t = key.token.as_str();
    let wall =
        json!({"name": "Wall", "dimension": 2, "frame": {"kind": "local"}, "length_unit": "m"});
    let r = server.send(
        &Request::new("PUT", "/v1/structures/W")
            .bearer(t)
            .json(&wall),
    );
    assert_eq!(r.status, 201);
    let pts = |n: usize| {
        let p: Vec<_> = (0..n)
            .map(|i| json!({"id": format!("P{i}"), "x": [i, 0]}))
            .collect();
        json!({ "points": p })
    };
    let put = |body: &serde_json::Value| {
        server.send(
            &Request::new("PUT", "/v1/structures/W/points")
                .bearer(t)
                .json(body),
        )
    };
    assert_eq!(put(&pts(2)).status, 200);
    let r = put(&pts(3));
    assert_eq!(r.status, 413, "more points than --max-points");
    assert!(r.text().contains("KINEMA_MAX_POINTS"));
    let big = pts(40);
    assert!(big.to_string().len() > 600);
    let r = put(&big);
    assert_eq!(r.status, 413, "a body over --max-body-bytes");
    assert_eq!(r.header("content-type"), Some("application/problem+json"));
    // A request whose body stops coming is answered with 408 after the timeout.
    let req = Request::new("PUT", "/v1/structures/W/points")
        .bearer(t)
        .json(&pts(1));
    let started = std::time::Instant::now();
    let mut pending = req.send_part(server.addr, 3);
    let r = pending.finish_without_body();
    assert_eq!(r.status, 408, "{}", r.text());
    assert!(started.elapsed() >= Duration::from_millis(900));
    assert_eq!(r.header("content-type"), Some("application/problem+json"));
}

/// Readiness follows the database: a PostgreSQL database dropped under a running
/// server makes `/readyz` answer 503 (a problem document) while `/healthz` stays 200.
/// (SQLite keeps its open file even when the file is removed, so there is no
/// comparable way to take an SQLite database away from a running server.)
#[test]
fn readyz_is_503_when_the_postgres_database_is_gone() {
    let base = kinema_tests::db::pg_base_url();
    let nanos = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.subsec_nanos());
    let name = format!("kinema_e2e_gone_{}_{nanos}", std::process::id());
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("runtime");
    let admin = |sql: String| {
        rt.block_on(async {
            let mut c = sqlx::PgConnection::connect(&base)
                .await
                .unwrap_or_else(|e| panic!("PostgreSQL at {base}: {e}"));
            sqlx::raw_sql(sqlx::AssertSqlSafe(sql))
                .execute(&mut c)
                .await
                .expect("admin statement");
        });
    };
    admin(format!("CREATE DATABASE \"{name}\""));
    let (no_query, query) = base
        .split_once('?')
        .map_or((base.as_str(), ""), |(a, q)| (a, q));
    let root = no_query.rsplit_once('/').map_or(no_query, |(r, _)| r);
    let url = if query.is_empty() {
        format!("{root}/{name}")
    } else {
        format!("{root}/{name}?{query}")
    };
    let server = Server::start(&url);
    assert_eq!(server.get("/readyz").status, 200);
    admin(format!("DROP DATABASE \"{name}\" WITH (FORCE)"));
    let r = server.get("/readyz");
    assert_eq!(r.status, 503, "{}", r.text());
    assert_eq!(r.header("content-type"), Some("application/problem+json"));
    let p = r.json();
    assert_eq!(p["status"], 503);
    assert!(p["title"].is_string() && p["type"].is_string() && p["detail"].is_string());
    assert_eq!(server.get("/healthz").status, 200);
}
