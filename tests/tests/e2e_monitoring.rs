//! The monitoring loop end to end over HTTP, with the real `kinema serve`: a logger's
//! batch arrives, the structure's automatic analysis is queued for each of its epochs,
//! the jobs run, the alert rule raises and clears levels, and the webhooks reach a small
//! receiver inside the test — which refuses the first attempts, so the deliveries are
//! retried, and then every event arrives in the logged order with a valid signature.
//!
//! Outside references:
//! - a homogeneous displacement field `u = G·x` has the constant small strain
//!   `ε = (G + Gᵀ)/2` (textbook continuum mechanics), recovered exactly by a
//!   least-squares fit over any group of points;
//! - the major principal strain `ε1 = (εx + εy)/2 + sqrt(((εx − εy)/2)² + εxy²)`
//!   (textbook Mohr circle, e.g. Gere & Goodno, Mechanics of Materials);
//! - the signatures are checked with Python's standard `hmac` module (HMAC, RFC 2104,
//!   with SHA-256), not with Kinema's own code.

use std::collections::BTreeMap;
use std::io::{BufRead, BufReader, Read, Write};
use std::net::TcpListener;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use kinema_tests::e2e;
use kinema_tests::http::Request;
use kinema_tests::python_json;
use kinema_tests::server::{Server, TestDb, create_key, wait_for};
use serde_json::{Value, json};

e2e!(a_batch_raises_and_clears_alerts_and_the_receiver_hears_of_it);

/// One request the receiver got, and what it answered.
#[derive(Debug, Clone)]
struct Received {
    headers: BTreeMap<String, String>,
    body: String,
    answered: u16,
}

/// A receiver on 127.0.0.1 that answers 503 to its first `refuse` requests and 204 after.
fn receiver(refuse: usize) -> (u16, Arc<Mutex<Vec<Received>>>) {
    let listener = TcpListener::bind("127.0.0.1:0").expect("bind the receiver");
    let port = listener.local_addr().expect("address").port();
    let log: Arc<Mutex<Vec<Received>>> = Arc::default();
    let sink = log.clone();
    std::thread::spawn(move || {
        for stream in listener.incoming() {
            let Ok(mut stream) = stream else { continue };
            let mut reader = BufReader::new(stream.try_clone().expect("clone the stream"));
            let mut line = String::new();
            if reader.read_line(&mut line).is_err() {
                continue;
            }
            let mut headers = BTreeMap::new();
            loop {
                let mut h = String::new();
                if reader.read_line(&mut h).is_err() || h.trim().is_empty() {
                    break;
                }
                if let Some((k, v)) = h.split_once(':') {
                    headers.insert(k.trim().to_ascii_lowercase(), v.trim().to_owned());
                }
            }
            let n: usize = headers
                .get("content-length")
                .and_then(|v| v.parse().ok())
                .unwrap_or(0);
            let mut body = vec![0; n];
            if reader.read_exact(&mut body).is_err() {
                continue;
            }
            let mut log = sink.lock().expect("log");
            let answered = if log.len() < refuse { 503 } else { 204 };
            log.push(Received {
                headers,
                body: String::from_utf8_lossy(&body).into_owned(),
                answered,
            });
            drop(log);
            let reason = if answered == 204 {
                "No Content"
            } else {
                "Service Unavailable"
            };
            let _ = write!(
                stream,
                "HTTP/1.1 {answered} {reason}\r\nContent-Length: 0\r\nConnection: close\r\n\r\n"
            );
        }
    });
    (port, log)
}

/// Displacement gradient of survey `k`: k × a base field (dimensionless).
fn g(k: f64) -> [[f64; 2]; 2] {
    [[k * 100e-6, k * 20e-6], [k * 40e-6, k * -50e-6]]
}

/// ε1 of `g(k)` in microstrain, by the textbook formula.
fn e1(k: f64) -> f64 {
    let gk = g(k);
    let (ex, ey, exy) = (gk[0][0], gk[1][1], (gk[0][1] + gk[1][0]) / 2.0);
    ((ex + ey) / 2.0 + (((ex - ey) / 2.0).powi(2) + exy * exy).sqrt()) * 1e6
}

const XS: [[f64; 2]; 5] = [[0.0, 0.0], [12.0, 0.0], [0.0, 6.0], [12.0, 6.0], [6.0, 3.0]];

fn ok(r: &kinema_tests::http::Response, status: u16) -> Value {
    assert_eq!(r.status, status, "{}", r.text());
    r.json()
}

fn a_batch_raises_and_clears_alerts_and_the_receiver_hears_of_it(db: &TestDb) {
    const REFUSED: usize = 3;
    let (port, log) = receiver(REFUSED);
    let server = Server::start_with(
        &db.url,
        &[
            "--job-workers",
            "2",
            "--job-poll-ms",
            "50",
            "--webhook-allow",
            "127.0.0.1/32",
            "--webhook-poll-ms",
            "50",
            "--webhook-retry-base-ms",
            "100",
            "--webhook-retry-max-secs",
            "1",
            "--webhook-timeout-secs",
            "2",
            "--webhook-lease-secs",
            "5",
        ],
    );
    let key = create_key(&db.url, "admin", &[]);
    let t = key.token.as_str();
    let send = |method: &str, path: &str, body: Option<Value>| {
        let mut r = Request::new(method, path).bearer(t);
        if let Some(b) = body {
            r = r.json(&b);
        }
        server.send(&r)
    };

    // An invented wall with five targets, one group of all of them.
    ok(
        &send(
            "PUT",
            "/v1/structures/RW-9",
            Some(json!({
        "name": "Invented quay wall", "dimension": 2, "frame": {"kind": "local"},
        "length_unit": "m"})),
        ),
        201,
    );
    let ids: Vec<String> = (0..XS.len()).map(|i| format!("Q{i}")).collect();
    let points: Vec<Value> = XS
        .iter()
        .zip(&ids)
        .map(|(x, id)| json!({"id": id, "x": x}))
        .collect();
    ok(
        &send(
            "PUT",
            "/v1/structures/RW-9/points",
            Some(json!({"points": points})),
        ),
        200,
    );
    ok(
        &send(
            "PUT",
            "/v1/structures/RW-9/auto-analysis",
            Some(json!({
        "method": {"kind": "groups", "groups": [{"name": "WALL", "point_ids": ids}]},
        "baseline": "reference"})),
        ),
        200,
    );
    // The user's thresholds (invented for the test; Kinema ships none).
    let rule = ok(
        &send(
            "POST",
            "/v1/structures/RW-9/alert-rules",
            Some(json!({
        "name": "wall tension", "quantity": "principal_tensile", "unit": "microstrain",
        "levels": [{"name": "review", "threshold": 150.0}, {"name": "alarm", "threshold": 400.0}],
        "hysteresis": 20.0})),
        ),
        201,
    );
    let hook = ok(
        &send(
            "POST",
            "/v1/webhooks",
            Some(json!({
        "url": format!("http://127.0.0.1:{port}/kinema"),
        "events": ["analysis.finished", "analysis.failed", "alert.raised", "alert.cleared"],
        "structure_id": "RW-9", "description": "the asset register's listener"})),
        ),
        201,
    );
    let secret = hook["secret"]
        .as_str()
        .expect("the secret, shown once")
        .to_owned();
    let hook_id = hook["subscription"]["id"].as_str().expect("id").to_owned();

    // One logger batch with three surveys: ε1 rises past review, past alarm, then falls
    // below review − hysteresis.
    let surveys = [
        ("2026-06-01T04:00:00Z", 2.0),
        ("2026-06-02T04:00:00Z", 4.0),
        ("2026-06-03T04:00:00Z", 1.0),
    ];
    assert!(e1(2.0) > 150.0 && e1(2.0) < 400.0 && e1(4.0) > 400.0 && e1(1.0) < 130.0);
    let mut readings = Vec::new();
    for (epoch, k) in surveys {
        let gk = g(k);
        for (x, id) in XS.iter().zip(&ids) {
            let u = [
                gk[0][0] * x[0] + gk[0][1] * x[1],
                gk[1][0] * x[0] + gk[1][1] * x[1],
            ];
            readings.push(json!({"point_id": id, "epoch": epoch, "u": u}));
        }
    }
    let batch = ok(
        &send(
            "POST",
            "/v1/structures/RW-9/batches",
            Some(json!({"readings": readings})),
        ),
        201,
    );

    // Three jobs queued by the batch, all succeeded.
    let jobs = wait_for(Duration::from_secs(60), "the batch's jobs", || {
        let v = ok(&send("GET", "/v1/structures/RW-9/jobs", None), 200);
        let items = v["items"].as_array().cloned().unwrap_or_default();
        (items.len() == 3 && items.iter().all(|j| j["status"] == "succeeded")).then_some(items)
    });
    for j in &jobs {
        assert_eq!(j["origin"], "batch");
        assert_eq!(j["batch_id"], batch["id"]);
    }

    // The alert log: raised to review, raised to alarm, cleared — in epoch order.
    let events = ok(&send("GET", "/v1/structures/RW-9/alert-events", None), 200);
    let events = events["items"].as_array().expect("events").clone();
    let steps: Vec<(String, u64, u64)> = events
        .iter()
        .map(|e| {
            (
                e["kind"].as_str().expect("kind").to_owned(),
                e["from_level"].as_u64().expect("from"),
                e["to_level"].as_u64().expect("to"),
            )
        })
        .collect();
    assert_eq!(
        steps,
        vec![
            ("raised".into(), 0, 1),
            ("raised".into(), 1, 2),
            ("cleared".into(), 2, 0)
        ],
        "{events:?}"
    );
    for (e, (_, k)) in events.iter().zip(surveys) {
        assert_eq!(e["region"], "WALL");
        assert_eq!(e["rule_id"], rule["id"]);
        let value = e["evidence"]["value"]
            .as_f64()
            .expect("the value in the evidence");
        assert!((value - e1(k)).abs() < 1e-6, "{value} vs {}", e1(k));
    }
    let states = ok(&send("GET", "/v1/structures/RW-9/alert-states", None), 200);
    assert_eq!(states["items"][0]["region"], "WALL");
    assert_eq!(states["items"][0]["level"], 0);

    // The receiver: 3 analysis events + 3 alert events, the first attempts refused.
    let got = wait_for(
        Duration::from_secs(60),
        "six events at the receiver",
        || {
            let l = log.lock().expect("log").clone();
            (l.iter().filter(|r| r.answered == 204).count() == 6).then_some(l)
        },
    );
    assert_eq!(
        got.len(),
        6 + REFUSED,
        "nothing sent twice after it was accepted"
    );
    for r in &got[..=REFUSED] {
        assert_eq!(
            r.headers["kinema-event-id"], got[0].headers["kinema-event-id"],
            "the head is retried first"
        );
    }
    let attempts: Vec<&str> = got
        .iter()
        .map(|r| r.headers["kinema-delivery-attempt"].as_str())
        .collect();
    assert_eq!(attempts, ["1", "2", "3", "4", "1", "1", "1", "1", "1"]);
    // Every signature, refused or not, verifies with Python's hmac.
    let checks: Vec<Value> = got
        .iter()
        .map(|r| {
            json!({"ts": r.headers["kinema-timestamp"], "body": r.body,
                        "sig": r.headers["kinema-signature"]})
        })
        .collect();
    let verdicts = python_json(
        "import hashlib, hmac, json, sys\n\
         d = json.load(sys.stdin)\n\
         key = d['secret'].encode()\n\
         print(json.dumps([hmac.compare_digest('sha256=' + hmac.new(key, (c['ts'] + '.' + c['body']).encode(), hashlib.sha256).hexdigest(), c['sig']) for c in d['checks']]))",
        &json!({"secret": secret, "checks": checks}),
    );
    assert_eq!(verdicts, json!(vec![true; got.len()]), "signatures");
    // In the logged order: the accepted events are the subscription's deliveries by seq.
    let deliveries = ok(
        &send("GET", &format!("/v1/webhooks/{hook_id}/deliveries"), None),
        200,
    );
    let logged: Vec<String> = deliveries["items"]
        .as_array()
        .expect("deliveries")
        .iter()
        .map(|d| {
            assert_eq!(d["status"], "delivered", "{d}");
            d["event_id"].as_str().expect("event").to_owned()
        })
        .collect();
    let accepted: Vec<String> = got
        .iter()
        .filter(|r| r.answered == 204)
        .map(|r| r.headers["kinema-event-id"].clone())
        .collect();
    assert_eq!(accepted, logged);
    let types: Vec<String> = got
        .iter()
        .filter(|r| r.answered == 204)
        .map(|r| r.headers["kinema-event-type"].clone())
        .collect();
    let count = |t: &str| types.iter().filter(|x| *x == t).count();
    assert_eq!(
        (
            count("analysis.finished"),
            count("alert.raised"),
            count("alert.cleared")
        ),
        (3, 2, 1),
        "{types:?}"
    );
    // The alert webhook events carry the alert events' own IDs, in their order.
    let alert_ids: Vec<String> = got
        .iter()
        .filter(|r| r.answered == 204 && r.headers["kinema-event-type"].starts_with("alert."))
        .map(|r| r.headers["kinema-event-id"].clone())
        .collect();
    let logged_alerts: Vec<String> = events
        .iter()
        .map(|e| e["id"].as_str().expect("id").to_owned())
        .collect();
    assert_eq!(alert_ids, logged_alerts);
    // The first delivery's log: three refusals, then the success.
    let first = deliveries["items"][0]["id"]
        .as_str()
        .expect("delivery")
        .to_owned();
    let detail = ok(
        &send(
            "GET",
            &format!("/v1/webhooks/{hook_id}/deliveries/{first}"),
            None,
        ),
        200,
    );
    let codes: Vec<u64> = detail["attempts"]
        .as_array()
        .expect("attempts")
        .iter()
        .map(|a| a["status_code"].as_u64().expect("status"))
        .collect();
    assert_eq!(codes, [503, 503, 503, 204], "{detail}");
}
