//! Webhook delivery against a receiver inside the test (axum on 127.0.0.1, allowed on
//! purpose by the allow-list setting):
//! - one attempt: the headers, a signature that verifies (HMAC-SHA256 per RFC 2104 over
//!   `"{timestamp}.{body}"`), non-2xx, redirects, timeouts and refused connections as
//!   failed attempts, denied addresses never contacted (literal or resolved);
//! - the dispatcher over a real store (both backends): events queued by the store's
//!   `complete_job`, a receiver that is down for the first attempts, every event then
//!   delivered in `seq` order with every attempt logged; a delivery out of attempts
//!   fails, and its replay sends the same event ID again; two dispatchers keep each
//!   subscription's order and send nothing twice.

mod api_support;

use std::net::SocketAddr;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use api_support::{App, Backend, local_2d};
use axum::Router;
use axum::body::Bytes;
use axum::extract::State;
use axum::http::{HeaderMap, Method, StatusCode, Uri, header};
use axum::response::{IntoResponse, Response};
use kinema_server::model::{
    AlertRuleRecord, AlertState, Analysis, Evaluation, EventType, JobOrigin, JobOutcome, NewJob,
    Scope, Structure, now_utc,
};
use kinema_server::settings::Settings;
use kinema_server::store::DynStore;
use kinema_server::webhooks::send::{Outgoing, Sender};
use kinema_server::webhooks::{self, WebhookSettings, sign};
use serde_json::{Value, json};
use tokio_util::sync::CancellationToken;
use uuid::Uuid;

// ---------------------------------------------------------------- the receiver

/// One request the receiver got.
#[derive(Debug, Clone)]
struct Received {
    path: String,
    headers: HeaderMap,
    body: Vec<u8>,
}

impl Received {
    fn header(&self, name: &str) -> &str {
        self.headers
            .get(name)
            .and_then(|v| v.to_str().ok())
            .unwrap_or_else(|| panic!("request without header {name}: {:?}", self.headers))
    }

    fn event_id(&self) -> String {
        self.header(sign::EVENT_ID).to_owned()
    }
}

#[derive(Clone)]
struct Rx {
    got: Arc<Mutex<Vec<Received>>>,
    /// Requests still to refuse with 503.
    refuse: Arc<AtomicUsize>,
}

/// A receiver on 127.0.0.1 that refuses (503) its first `refuse_first` requests to
/// ordinary paths and accepts (204) the rest; `/redirect` answers 302, `/big-503` a 503
/// with a long body, `/slow` answers after 3 s.
struct Receiver {
    addr: SocketAddr,
    rx: Rx,
}

impl Receiver {
    async fn start(refuse_first: usize) -> Self {
        let rx = Rx {
            got: Arc::new(Mutex::new(Vec::new())),
            refuse: Arc::new(AtomicUsize::new(refuse_first)),
        };
        let app = Router::new().fallback(receive).with_state(rx.clone());
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0")
            .await
            .expect("bind the receiver");
        let addr = listener.local_addr().expect("its address");
        tokio::spawn(async move {
            let _ = axum::serve(listener, app).await;
        });
        Self { addr, rx }
    }

    fn url(&self, path: &str) -> String {
        format!("http://{}{path}", self.addr)
    }

    fn got(&self) -> Vec<Received> {
        self.rx.got.lock().expect("not poisoned").clone()
    }

    /// Wait until the receiver has `n` requests (at most 20 s).
    async fn wait_for(&self, n: usize) -> Vec<Received> {
        let deadline = Instant::now() + Duration::from_secs(20);
        loop {
            let got = self.got();
            if got.len() >= n || Instant::now() > deadline {
                return got;
            }
            tokio::time::sleep(Duration::from_millis(20)).await;
        }
    }
}

async fn receive(State(rx): State<Rx>, uri: Uri, headers: HeaderMap, body: Bytes) -> Response {
    rx.got.lock().expect("not poisoned").push(Received {
        path: uri.path().to_owned(),
        headers,
        body: body.to_vec(),
    });
    match uri.path() {
        "/redirect" => (StatusCode::FOUND, [(header::LOCATION, "/ok")]).into_response(),
        "/big-503" => (
            StatusCode::SERVICE_UNAVAILABLE,
            format!("{}\nsecond line", "x".repeat(1000)),
        )
            .into_response(),
        "/slow" => {
            tokio::time::sleep(Duration::from_secs(3)).await;
            StatusCode::NO_CONTENT.into_response()
        }
        _ => {
            let refused = rx
                .refuse
                .fetch_update(Ordering::SeqCst, Ordering::SeqCst, |n| n.checked_sub(1))
                .is_ok();
            if refused {
                (
                    StatusCode::SERVICE_UNAVAILABLE,
                    "receiver is down for maintenance",
                )
                    .into_response()
            } else {
                StatusCode::NO_CONTENT.into_response()
            }
        }
    }
}

// ---------------------------------------------------------------- one attempt

fn local_settings() -> WebhookSettings {
    WebhookSettings {
        allow: "127.0.0.1/32".parse().expect("a valid allow-list"),
        timeout: Duration::from_millis(500),
        ..WebhookSettings::default()
    }
}

const BODY: &[u8] = br#"{"id":"invented","type":"analysis.finished","data":{}}"#;

fn outgoing(url: &str) -> Outgoing<'_> {
    Outgoing {
        url,
        secret: "kn_hooksec_test",
        event_id: Uuid::from_u128(0x1111),
        event_type: EventType::AnalysisFinished,
        delivery_id: Uuid::from_u128(0x2222),
        attempt: 3,
        body: BODY,
    }
}

#[tokio::test]
async fn an_attempt_is_signed_and_carries_the_headers() {
    let r = Receiver::start(0).await;
    let sender = Sender::new(&local_settings()).expect("client");
    let url = r.url("/hooks/in");
    let a = sender.send(&outgoing(&url)).await;
    assert!(a.delivered(), "{a:?}");
    assert_eq!(a.status_code, Some(204));
    let got = r.got();
    assert_eq!(got.len(), 1);
    let req = &got[0];
    assert_eq!(req.path, "/hooks/in");
    assert_eq!(req.body, BODY);
    assert_eq!(req.header("content-type"), "application/json");
    assert_eq!(
        req.header("user-agent"),
        format!("kinema/{}", env!("CARGO_PKG_VERSION"))
    );
    assert_eq!(
        req.header("kinema-event-id"),
        Uuid::from_u128(0x1111).to_string()
    );
    assert_eq!(req.header("kinema-event-type"), "analysis.finished");
    assert_eq!(
        req.header("kinema-delivery-id"),
        Uuid::from_u128(0x2222).to_string()
    );
    assert_eq!(req.header("kinema-delivery-attempt"), "3");
    let ts: i64 = req
        .header("kinema-timestamp")
        .parse()
        .expect("Unix seconds");
    assert_eq!(ts, a.at.unix_timestamp());
    let now = time::OffsetDateTime::now_utc().unix_timestamp();
    assert!((now - ts).abs() <= 5, "timestamp {ts}, now {now}");
    let sig = req.header("kinema-signature");
    assert_eq!(
        sign::verify("kn_hooksec_test", ts, &req.body, sig, now, 300),
        Ok(())
    );
    // Recomputed from the primitive (RFC 2104 HMAC with SHA-256, checked against
    // RFC 4231 in the unit tests) over "{timestamp}.{body}".
    let mut msg = format!("{ts}.").into_bytes();
    msg.extend_from_slice(BODY);
    let want = kinema_server::keys::hex(&sign::hmac_sha256(b"kn_hooksec_test", &msg));
    assert_eq!(sig, format!("sha256={want}"));
}

#[tokio::test]
async fn a_denied_address_is_a_failed_attempt_and_nothing_is_sent() {
    let r = Receiver::start(0).await;
    let port = r.addr.port();
    let sender = Sender::new(&WebhookSettings::default()).expect("client");
    for url in [
        format!("http://127.0.0.1:{port}/"),
        format!("http://[::ffff:127.0.0.1]:{port}/"),
        format!("http://localhost:{port}/"),
    ] {
        let a = sender.send(&outgoing(&url)).await;
        assert!(!a.delivered(), "{url}");
        assert_eq!(a.status_code, None);
        let e = a.error.expect("an error");
        assert!(e.contains("KINEMA_WEBHOOK_ALLOW"), "{url}: {e}");
        assert!(e.contains("loopback"), "{url}: {e}");
    }
    assert!(r.got().is_empty(), "a denied address was contacted");
}

#[tokio::test]
async fn a_host_name_is_connected_only_at_its_allowed_addresses() {
    let r = Receiver::start(0).await;
    let port = r.addr.port();
    // `localhost` resolves to 127.0.0.1 (and ::1 where IPv6 is set up; RFC 6761 §6.3).
    // With only 127.0.0.1 allowed, the attempt reaches the receiver on 127.0.0.1.
    let v4 = Sender::new(&local_settings()).expect("client");
    let a = v4
        .send(&outgoing(&format!("http://localhost:{port}/by-name")))
        .await;
    assert!(a.delivered(), "{a:?}");
    assert_eq!(r.got().len(), 1);
    // With only ::1 allowed, 127.0.0.1 is never handed to the client: the receiver,
    // which listens on 127.0.0.1 only, gets nothing.
    let v6_only = WebhookSettings {
        allow: "none,::1/128".parse().expect("a valid allow-list"),
        ..local_settings()
    };
    let a = Sender::new(&v6_only)
        .expect("client")
        .send(&outgoing(&format!("http://localhost:{port}/by-name")))
        .await;
    assert!(!a.delivered(), "{a:?}");
    assert_eq!(r.got().len(), 1, "127.0.0.1 was contacted though denied");
}

#[tokio::test]
async fn non_2xx_redirects_timeouts_and_refusals_are_failed_attempts() {
    let r = Receiver::start(1).await;
    let sender = Sender::new(&local_settings()).expect("client");
    // 503 with a short body.
    let a = sender.send(&outgoing(&r.url("/down"))).await;
    assert_eq!(a.status_code, Some(503));
    assert_eq!(
        a.error.as_deref(),
        Some("HTTP 503 Service Unavailable: receiver is down for maintenance")
    );
    // A long body is cut to 200 characters, on one line.
    let a = sender.send(&outgoing(&r.url("/big-503"))).await;
    let e = a.error.expect("an error");
    let snippet = e
        .strip_prefix("HTTP 503 Service Unavailable: ")
        .expect("the status line first");
    assert_eq!(snippet.chars().count(), 200, "{e}");
    assert!(snippet.ends_with('…') && !snippet.contains('\n'));
    // A redirect is not followed.
    let a = sender.send(&outgoing(&r.url("/redirect"))).await;
    assert_eq!(a.status_code, Some(302));
    assert!(
        a.error
            .as_deref()
            .is_some_and(|e| e.contains("not followed")),
        "{a:?}"
    );
    assert!(
        r.got().iter().all(|q| q.path != "/ok"),
        "the redirect was followed"
    );
    // No answer within the timeout (500 ms).
    let started = Instant::now();
    let a = sender.send(&outgoing(&r.url("/slow"))).await;
    assert!(
        started.elapsed() < Duration::from_millis(2500),
        "{:?}",
        started.elapsed()
    );
    assert_eq!(a.status_code, None);
    assert!(
        a.error.as_deref().is_some_and(|e| e.contains("timed out")),
        "{a:?}"
    );
    // Nobody listening.
    let closed = {
        let l = std::net::TcpListener::bind("127.0.0.1:0").expect("bind");
        l.local_addr().expect("address")
    };
    let a = sender.send(&outgoing(&format!("http://{closed}/"))).await;
    assert_eq!(a.status_code, None);
    assert!(a.error.is_some_and(|e| !e.is_empty()));
}

// ---------------------------------------------------------------- the dispatcher

api_case!(
    every_event_arrives_in_order_once_the_receiver_is_back,
    a_delivery_out_of_attempts_fails_and_its_replay_sends_the_same_event,
    two_dispatchers_keep_each_subscriptions_order_and_send_nothing_twice,
);

/// Short timings: back-off from 50 ms (ceiling), at most 200 ms; polling every 20 ms.
fn fast(max_attempts: u32) -> WebhookSettings {
    WebhookSettings {
        allow: "127.0.0.1/32".parse().expect("a valid allow-list"),
        max_attempts,
        retry_base: Duration::from_millis(50),
        retry_max: Duration::from_millis(200),
        timeout: Duration::from_secs(2),
        lease: Duration::from_secs(10),
        poll: Duration::from_millis(20),
        ..WebhookSettings::default()
    }
}

/// The app with `hooks` as its webhook settings, an admin token and structure `id`.
async fn start(b: Backend, hooks: &WebhookSettings, id: &str) -> (App, String) {
    let app = App::start_with(
        b,
        Settings {
            webhooks: hooks.clone(),
            ..Settings::default()
        },
    )
    .await;
    let admin = app.key(Scope::Admin, None).await;
    let put = app
        .call(
            Method::PUT,
            &format!("/v1/structures/{id}"),
            Some(&admin),
            Some(local_2d("Invented culvert")),
        )
        .await;
    assert_eq!(put.status, 201, "{}", put.json);
    (app, admin)
}

/// Subscribe `url` to `analysis.failed` of structure `id`; returns (ID, secret).
async fn subscribe(app: &App, admin: &str, url: &str, id: &str) -> (String, String) {
    let r = app
        .call(
            Method::POST,
            "/v1/webhooks",
            Some(admin),
            Some(json!({"url": url, "events": ["analysis.failed"], "structure_id": id})),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    (
        r.json["subscription"]["id"]
            .as_str()
            .expect("id")
            .to_owned(),
        r.json["secret"].as_str().expect("secret").to_owned(),
    )
}

/// An evaluator for a structure without alert rules (the jobs here store no analysis,
/// so it is not called).
fn no_rules(
    _: &Structure,
    _: &[AlertRuleRecord],
    _: &[AlertState],
    _: &Analysis,
    _: time::OffsetDateTime,
) -> Evaluation {
    Evaluation::default()
}

/// Queue `n` `analysis.failed` events of structure `id` through the store: each a job
/// with one attempt whose attempt ends in an error, which queues `deliveries` deliveries
/// (one per matching subscription). Returns the job IDs in order.
async fn failed_jobs(store: &DynStore, id: &str, n: usize, deliveries: u64) -> Vec<Uuid> {
    let mut jobs = Vec::new();
    for i in 0..n {
        let job = NewJob {
            id: Uuid::new_v4(),
            structure_id: id.to_owned(),
            origin: JobOrigin::Request,
            batch_id: None,
            request: json!({"kind": "epoch", "epoch": "2026-02-01T00:00:00Z"}),
            max_attempts: 1,
            created_at: now_utc(),
        };
        store.enqueue_job(&job).await.expect("enqueue a job");
        let now = now_utc();
        let (claimed, lease) = store
            .claim_job("test-worker", now, now + time::Duration::minutes(1))
            .await
            .expect("claim")
            .expect("the job is due");
        assert_eq!(claimed.id, job.id);
        let done = store
            .complete_job(
                &lease,
                &JobOutcome::Error {
                    error: format!("invented failure {i}"),
                    retry_at: now,
                },
                &no_rules,
                now_utc(),
            )
            .await
            .expect("complete the job");
        assert_eq!(
            done.deliveries, deliveries,
            "one delivery per matching subscription"
        );
        jobs.push(job.id);
    }
    jobs
}

fn run_dispatcher(
    store: &DynStore,
    s: &WebhookSettings,
    worker: &str,
    stop: &CancellationToken,
) -> tokio::task::JoinHandle<()> {
    tokio::spawn(webhooks::run(
        store.clone(),
        Arc::new(s.clone()),
        worker.to_owned(),
        stop.clone(),
    ))
}

fn job_of(r: &Received) -> String {
    let body: Value = serde_json::from_slice(&r.body).expect("a JSON body");
    body["data"]["job_id"].as_str().expect("job_id").to_owned()
}

/// Every request verifies with `secret`, and its body is the same for one event.
fn assert_signed(got: &[Received], secret: &str) {
    let now = time::OffsetDateTime::now_utc().unix_timestamp();
    for r in got {
        let ts: i64 = r.header(sign::TIMESTAMP).parse().expect("Unix seconds");
        assert_eq!(
            sign::verify(secret, ts, &r.body, r.header(sign::SIGNATURE), now, 300),
            Ok(()),
            "request {r:?}"
        );
        let body: Value = serde_json::from_slice(&r.body).expect("JSON");
        assert_eq!(
            body["id"],
            r.event_id(),
            "the envelope's ID is the header's"
        );
        assert_eq!(body["type"], "analysis.failed");
        assert_eq!(r.header(sign::EVENT_TYPE), "analysis.failed");
    }
    for a in got {
        for b in got.iter().filter(|b| b.event_id() == a.event_id()) {
            assert_eq!(a.body, b.body, "an event's body changed between attempts");
        }
    }
}

async fn every_event_arrives_in_order_once_the_receiver_is_back(b: Backend) {
    const DOWN: usize = 3;
    const EVENTS: usize = 4;
    let s = fast(8);
    let (app, admin) = start(b, &s, "CULVERT-3").await;
    let r = Receiver::start(DOWN).await;
    let (sub, secret) = subscribe(&app, &admin, &r.url("/hooks/kinema"), "CULVERT-3").await;
    let jobs = failed_jobs(&app.store, "CULVERT-3", EVENTS, 1).await;
    let stop = CancellationToken::new();
    let d = run_dispatcher(&app.store, &s, "dispatcher-a", &stop);
    let got = r.wait_for(DOWN + EVENTS).await;
    // Let a wrong extra request show up before stopping.
    tokio::time::sleep(Duration::from_millis(200)).await;
    stop.cancel();
    d.await.expect("the dispatcher stops cleanly");
    let got_all = r.got();
    assert_eq!(got_all.len(), DOWN + EVENTS, "{got:#?}");
    assert_signed(&got_all, &secret);
    // The first event was tried until the receiver came back (attempts 1..=4), and
    // the others waited behind it, then came once each, in the jobs' order.
    let seen: Vec<String> = got_all.iter().map(job_of).collect();
    let mut want: Vec<String> = vec![jobs[0].to_string(); DOWN + 1];
    want.extend(jobs[1..].iter().map(Uuid::to_string));
    assert_eq!(seen, want);
    let attempts: Vec<&str> = got_all
        .iter()
        .map(|q| q.header(sign::DELIVERY_ATTEMPT))
        .collect();
    assert_eq!(attempts, ["1", "2", "3", "4", "1", "1", "1"]);
    // The log, in seq order, matches what the receiver saw.
    let list = app
        .call(
            Method::GET,
            &format!("/v1/webhooks/{sub}/deliveries"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(list.status, 200, "{}", list.json);
    let items = list.json["items"].as_array().expect("items").clone();
    assert_eq!(items.len(), EVENTS);
    let seqs: Vec<i64> = items
        .iter()
        .map(|d| d["seq"].as_i64().expect("seq"))
        .collect();
    assert!(seqs.windows(2).all(|w| w[0] < w[1]), "{seqs:?}");
    let mut distinct: Vec<String> = got_all.iter().map(Received::event_id).collect();
    distinct.dedup();
    let logged: Vec<String> = items
        .iter()
        .map(|d| d["event_id"].as_str().expect("event_id").to_owned())
        .collect();
    assert_eq!(logged, distinct);
    for d in &items {
        assert_eq!(d["status"], "delivered", "{d}");
        assert!(d["last_error"].is_null(), "{d}");
        assert!(d["delivered_at"].is_string(), "{d}");
    }
    assert_eq!(items[0]["attempts"], 4);
    assert!(items[1..].iter().all(|d| d["attempts"] == 1));
    let first = items[0]["id"].as_str().expect("id");
    let detail = app
        .call(
            Method::GET,
            &format!("/v1/webhooks/{sub}/deliveries/{first}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(detail.status, 200, "{}", detail.json);
    let log = detail.json["attempts"].as_array().expect("attempts");
    assert_eq!(log.len(), 4);
    for (i, a) in log.iter().enumerate() {
        assert_eq!(a["attempt"], i + 1);
        assert_eq!(a["worker"], "dispatcher-a");
        if i < DOWN {
            assert_eq!(a["status_code"], 503, "{a}");
            assert_eq!(
                a["error"],
                "HTTP 503 Service Unavailable: receiver is down for maintenance"
            );
        } else {
            assert_eq!(a["status_code"], 204, "{a}");
            assert!(a["error"].is_null(), "{a}");
        }
    }
    // Back-off: each retry came at least half its ceiling (25, 50, 100 ms) after the
    // previous attempt started.
    let at: Vec<time::OffsetDateTime> = log
        .iter()
        .map(|a| {
            time::OffsetDateTime::parse(
                a["at"].as_str().expect("at"),
                &time::format_description::well_known::Rfc3339,
            )
            .expect("RFC 3339")
        })
        .collect();
    for (i, w) in at.windows(2).enumerate() {
        let half_ceiling = s.backoff().ceiling(u32::try_from(i + 1).expect("small")) / 2;
        assert!(
            w[1] - w[0] >= half_ceiling,
            "retry {i}: {} < {half_ceiling:?}",
            w[1] - w[0]
        );
    }
}

async fn a_delivery_out_of_attempts_fails_and_its_replay_sends_the_same_event(b: Backend) {
    // Three attempts allowed, and the receiver refuses three requests: the first
    // delivery fails, the second (behind it) then goes through at once.
    let s = fast(3);
    let (app, admin) = start(b, &s, "CULVERT-4").await;
    let r = Receiver::start(3).await;
    let (sub, secret) = subscribe(&app, &admin, &r.url("/in"), "CULVERT-4").await;
    let jobs = failed_jobs(&app.store, "CULVERT-4", 2, 1).await;
    let stop = CancellationToken::new();
    let d = run_dispatcher(&app.store, &s, "dispatcher-b", &stop);
    let got = r.wait_for(4).await;
    let seen: Vec<String> = got.iter().map(job_of).collect();
    let j0 = jobs[0].to_string();
    let j1 = jobs[1].to_string();
    assert_eq!(seen, [j0.as_str(), &j0, &j0, &j1]);
    let list = app
        .call(
            Method::GET,
            &format!("/v1/webhooks/{sub}/deliveries?status=failed"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(list.status, 200, "{}", list.json);
    let failed = list.json["items"].as_array().expect("items").clone();
    assert_eq!(failed.len(), 1, "{}", list.json);
    assert_eq!(failed[0]["attempts"], 3);
    assert_eq!(
        failed[0]["last_error"],
        "HTTP 503 Service Unavailable: receiver is down for maintenance"
    );
    let failed_id = failed[0]["id"].as_str().expect("id");
    // Replay: a new delivery of the same event, sent once more.
    let replay = app
        .call(
            Method::POST,
            &format!("/v1/webhooks/{sub}/deliveries/{failed_id}/replay"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(replay.status, 202, "{}", replay.json);
    let new_id = replay.json["id"].as_str().expect("id").to_owned();
    assert_ne!(new_id, failed_id);
    assert_eq!(replay.json["event_id"], failed[0]["event_id"]);
    assert_eq!(replay.json["status"], "pending");
    assert_eq!(
        replay.headers["location"],
        format!("/v1/webhooks/{sub}/deliveries/{new_id}")
    );
    let got = r.wait_for(5).await;
    tokio::time::sleep(Duration::from_millis(200)).await;
    stop.cancel();
    d.await.expect("the dispatcher stops cleanly");
    assert_eq!(r.got().len(), 5, "{got:#?}");
    let last = &got[4];
    assert_eq!(
        last.event_id(),
        failed[0]["event_id"].as_str().expect("event id")
    );
    assert_eq!(last.body, got[0].body, "a replay sends the same body");
    assert_eq!(last.header(sign::DELIVERY_ID), new_id);
    assert_eq!(last.header(sign::DELIVERY_ATTEMPT), "1");
    assert_signed(&r.got(), &secret);
    let detail = app
        .call(
            Method::GET,
            &format!("/v1/webhooks/{sub}/deliveries/{new_id}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(detail.status, 200, "{}", detail.json);
    assert_eq!(detail.json["delivery"]["status"], "delivered");
    assert_eq!(detail.json["attempts"].as_array().map(Vec::len), Some(1));
    // The failed delivery stays failed in the log.
    let old = app
        .call(
            Method::GET,
            &format!("/v1/webhooks/{sub}/deliveries/{failed_id}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(old.json["delivery"]["status"], "failed");
}

async fn two_dispatchers_keep_each_subscriptions_order_and_send_nothing_twice(b: Backend) {
    const EVENTS: usize = 6;
    let s = fast(8);
    let (app, admin) = start(b, &s, "CULVERT-5").await;
    // Two receivers, each down for its first two requests, one subscription each.
    let r1 = Receiver::start(2).await;
    let r2 = Receiver::start(2).await;
    subscribe(&app, &admin, &r1.url("/one"), "CULVERT-5").await;
    // The second subscription is made after half of the events: it gets only the
    // later ones.
    let early = failed_jobs(&app.store, "CULVERT-5", EVENTS / 2, 1).await;
    subscribe(&app, &admin, &r2.url("/two"), "CULVERT-5").await;
    let late: Vec<String> = failed_jobs(&app.store, "CULVERT-5", EVENTS / 2, 2)
        .await
        .iter()
        .map(Uuid::to_string)
        .collect();
    let stop = CancellationToken::new();
    let d1 = run_dispatcher(&app.store, &s, "dispatcher-1", &stop);
    let d2 = run_dispatcher(&app.store, &s, "dispatcher-2", &stop);
    let one = r1.wait_for(2 + EVENTS).await;
    let two = r2.wait_for(2 + EVENTS / 2).await;
    tokio::time::sleep(Duration::from_millis(300)).await;
    stop.cancel();
    d1.await.expect("stops");
    d2.await.expect("stops");
    let mut all: Vec<String> = early.iter().map(Uuid::to_string).collect();
    all.extend(late.iter().cloned());
    // Receiver 1: the first event three times (two refusals, then accepted), the rest
    // once each, in order; receiver 2 likewise with the late events.
    let mut want1 = vec![all[0].clone(); 2];
    want1.extend(all.iter().cloned());
    let mut want2 = vec![late[0].clone(); 2];
    want2.extend(late.iter().cloned());
    assert_eq!(r1.got().len(), want1.len(), "{one:#?}");
    assert_eq!(r2.got().len(), want2.len(), "{two:#?}");
    assert_eq!(r1.got().iter().map(job_of).collect::<Vec<_>>(), want1);
    assert_eq!(r2.got().iter().map(job_of).collect::<Vec<_>>(), want2);
}
