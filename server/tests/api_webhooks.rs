//! `/v1/webhooks`: subscriptions and their delivery log over HTTP, in process on both
//! backends.
//! - create answers 201 with `Location` and the signing secret once; get, list and
//!   delete never show it;
//! - bad fields are 422 with their pointer: the URL (scheme, user name, fragment, a
//!   literal address the allow-list denies, naming `KINEMA_WEBHOOK_ALLOW`), empty,
//!   unknown or repeated event types, an unknown structure, a long description;
//! - the allow-list setting lets a denied range in on purpose;
//! - only admin keys manage webhooks; a key limited to some structures sees and makes
//!   only their subscriptions;
//! - the delivery list pages by `seq` and filters by status; unknown IDs are 404, bad
//!   ones 422.

mod api_support;

use api_support::{App, Backend, local_2d};
use axum::http::Method;
use kinema_server::api::Limits;
use kinema_server::model::{
    AlertRuleRecord, AlertState, Analysis, Evaluation, JobOrigin, JobOutcome, NewJob, Scope,
    Structure, now_utc,
};
use kinema_server::settings::Settings;
use kinema_server::webhooks::WebhookSettings;
use kinema_server::webhooks::sign::SECRET_PREFIX;
use serde_json::json;
use uuid::Uuid;

api_case!(
    an_admin_creates_a_subscription_and_sees_the_secret_once,
    bad_subscriptions_are_422_with_pointers,
    the_allow_list_setting_lets_a_range_in_on_purpose,
    only_admin_keys_manage_webhooks_and_limited_keys_see_their_structures,
    deliveries_page_by_seq_and_filter_by_status,
    unknown_ids_are_404_and_bad_ones_422,
);

const HOOK: &str = "https://hooks.example.com/kinema/in";

/// The app (default settings unless `allow` is given), an admin token, and structures
/// `BRIDGE-1` and `DAM-2`.
async fn start(b: Backend, allow: Option<&str>) -> (App, String) {
    let app = match allow {
        None => App::start(b, Limits::default()).await,
        Some(allow) => {
            let webhooks = WebhookSettings {
                allow: allow.parse().expect("a valid allow-list"),
                ..WebhookSettings::default()
            };
            App::start_with(
                b,
                Settings {
                    webhooks,
                    ..Settings::default()
                },
            )
            .await
        }
    };
    let admin = app.key(Scope::Admin, None).await;
    for id in ["BRIDGE-1", "DAM-2"] {
        let r = app
            .call(
                Method::PUT,
                &format!("/v1/structures/{id}"),
                Some(&admin),
                Some(local_2d("Invented")),
            )
            .await;
        assert_eq!(r.status, 201, "{}", r.json);
    }
    (app, admin)
}

async fn create(app: &App, token: &str, body: serde_json::Value) -> api_support::Resp {
    app.call(Method::POST, "/v1/webhooks", Some(token), Some(body))
        .await
}

async fn an_admin_creates_a_subscription_and_sees_the_secret_once(b: Backend) {
    let (app, admin) = start(b, None).await;
    let r = create(
        &app,
        &admin,
        json!({
            "url": HOOK,
            "events": ["alert.raised", "alert.cleared"],
            "structure_id": "BRIDGE-1",
            "description": "site office dashboard"
        }),
    )
    .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let sub = r.json["subscription"].clone();
    let id = sub["id"].as_str().expect("id").to_owned();
    assert_eq!(r.headers["location"], format!("/v1/webhooks/{id}"));
    assert_eq!(sub["url"], HOOK);
    assert_eq!(sub["events"], json!(["alert.raised", "alert.cleared"]));
    assert_eq!(sub["structure_id"], "BRIDGE-1");
    assert_eq!(sub["description"], "site office dashboard");
    assert!(sub.get("secret").is_none(), "{sub}");
    let secret = r.json["secret"].as_str().expect("secret").to_owned();
    assert!(secret.starts_with(SECRET_PREFIX) && secret.len() == SECRET_PREFIX.len() + 64);
    // A second subscription, for every structure, gets another secret.
    let all = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["analysis.failed"]}),
    )
    .await;
    assert_eq!(all.status, 201, "{}", all.json);
    assert!(all.json["subscription"]["structure_id"].is_null());
    assert_ne!(all.json["secret"], secret.as_str());
    // Get, list and the filtered list never show a secret.
    let got = app
        .call(
            Method::GET,
            &format!("/v1/webhooks/{id}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(got.status, 200, "{}", got.json);
    assert_eq!(got.json, sub);
    let list = app
        .call(Method::GET, "/v1/webhooks", Some(&admin), None)
        .await;
    assert_eq!(list.status, 200, "{}", list.json);
    assert_eq!(list.json.as_array().map(Vec::len), Some(2));
    assert_eq!(list.json[0], sub, "oldest first");
    let only = app
        .call(
            Method::GET,
            "/v1/webhooks?structure_id=BRIDGE-1",
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(only.json, json!([sub]));
    let none = app
        .call(
            Method::GET,
            "/v1/webhooks?structure_id=DAM-2",
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(none.json, json!([]));
    for resp in [&got, &list, &only] {
        let text = String::from_utf8_lossy(&resp.bytes);
        assert!(
            !text.contains(&secret) && !text.contains(SECRET_PREFIX),
            "{text}"
        );
    }
    // Delete: 204, then 404.
    let del = app
        .call(
            Method::DELETE,
            &format!("/v1/webhooks/{id}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(del.status, 204, "{}", del.json);
    app.call(
        Method::GET,
        &format!("/v1/webhooks/{id}"),
        Some(&admin),
        None,
    )
    .await
    .problem(404);
    app.call(
        Method::DELETE,
        &format!("/v1/webhooks/{id}"),
        Some(&admin),
        None,
    )
    .await
    .problem(404);
    let list = app
        .call(Method::GET, "/v1/webhooks", Some(&admin), None)
        .await;
    assert_eq!(list.json.as_array().map(Vec::len), Some(1));
}

async fn bad_subscriptions_are_422_with_pointers(b: Backend) {
    let (app, admin) = start(b, None).await;
    let long = format!("https://example.com/{}", "a".repeat(2048));
    let cases = [
        (
            json!({"url": "not a url", "events": ["alert.raised"]}),
            "/url",
            "absolute URL",
        ),
        (
            json!({"url": "ftp://example.com/in", "events": ["alert.raised"]}),
            "/url",
            "http or https",
        ),
        (
            json!({"url": "https://me:pw@example.com/", "events": ["alert.raised"]}),
            "/url",
            "user name",
        ),
        (
            json!({"url": "https://example.com/#top", "events": ["alert.raised"]}),
            "/url",
            "fragment",
        ),
        (
            json!({"url": long, "events": ["alert.raised"]}),
            "/url",
            "at most 2048",
        ),
        (
            json!({"url": "http://127.0.0.1:8080/", "events": ["alert.raised"]}),
            "/url",
            "KINEMA_WEBHOOK_ALLOW",
        ),
        (
            json!({"url": "http://169.254.169.254/", "events": ["alert.raised"]}),
            "/url",
            "RFC 3927",
        ),
        (
            json!({"url": "http://[fd00::1]/", "events": ["alert.raised"]}),
            "/url",
            "RFC 4193",
        ),
        (
            json!({"url": "http://10.0.0.8/", "events": ["alert.raised"]}),
            "/url",
            "RFC 1918",
        ),
        (
            json!({"url": "http://localhost/", "events": ["alert.raised"]}),
            "/url",
            "KINEMA_WEBHOOK_ALLOW",
        ),
        (
            json!({"url": HOOK, "events": []}),
            "/events",
            "at least one",
        ),
        (
            json!({"url": HOOK, "events": ["alert.raised", "alert.risen"]}),
            "/events/1",
            "unknown event type",
        ),
        (
            json!({"url": HOOK, "events": ["alert.raised", "alert.raised"]}),
            "/events/1",
            "twice",
        ),
        (
            json!({"url": HOOK, "events": [7]}),
            "/events/0",
            "invalid type",
        ),
        (
            json!({"url": HOOK, "events": ["alert.raised"], "structure_id": "NOPE-9"}),
            "/structure_id",
            "does not exist",
        ),
        (
            json!({"url": HOOK, "events": ["alert.raised"], "structure_id": "bad id"}),
            "/structure_id",
            "only A-Z",
        ),
        (
            json!({"url": HOOK, "events": ["alert.raised"], "description": "d".repeat(501)}),
            "/description",
            "at most 500",
        ),
        (
            json!({"url": HOOK, "events": ["alert.raised"], "secret": "mine"}),
            "/secret",
            "unknown field",
        ),
        (
            json!({"events": ["alert.raised"]}),
            "/",
            "missing field `url`",
        ),
    ];
    for (body, pointer, text) in cases {
        let r = create(&app, &admin, body.clone()).await;
        let p = r.problem(422);
        assert_eq!(r.pointers(), [pointer], "{body}: {p}");
        assert!(
            p["errors"][0]["detail"]
                .as_str()
                .is_some_and(|d| d.contains(text)),
            "{body}: {p}"
        );
    }
    // Every bad field at once.
    let r = create(
        &app,
        &admin,
        json!({"url": "gopher://x", "events": [], "structure_id": "NOPE-9"}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/url", "/events", "/structure_id"]);
    // Nothing was stored.
    let list = app
        .call(Method::GET, "/v1/webhooks", Some(&admin), None)
        .await;
    assert_eq!(list.json, json!([]));
}

async fn the_allow_list_setting_lets_a_range_in_on_purpose(b: Backend) {
    let (app, admin) = start(b, Some("none,10.20.0.0/16,127.0.0.1/32")).await;
    for url in [
        "http://10.20.4.5:8080/in",
        "http://127.0.0.1:9000/",
        "http://localhost:9000/",
    ] {
        let r = create(
            &app,
            &admin,
            json!({"url": url, "events": ["alert.raised"]}),
        )
        .await;
        assert_eq!(r.status, 201, "{url}: {}", r.json);
    }
    // Outside the listed blocks: denied, public addresses too (`none`).
    for url in ["http://10.21.0.1/", "http://8.8.8.8/", "http://127.0.0.2/"] {
        let r = create(
            &app,
            &admin,
            json!({"url": url, "events": ["alert.raised"]}),
        )
        .await;
        let p = r.problem(422);
        assert_eq!(r.pointers(), ["/url"], "{url}: {p}");
        assert!(
            p["detail"]
                .as_str()
                .is_some_and(|d| d.contains("KINEMA_WEBHOOK_ALLOW")),
            "{p}"
        );
    }
}

async fn only_admin_keys_manage_webhooks_and_limited_keys_see_their_structures(b: Backend) {
    let (app, admin) = start(b, None).await;
    let global = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["alert.raised"]}),
    )
    .await;
    let global_id = global.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    let dam = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["alert.raised"], "structure_id": "DAM-2"}),
    )
    .await;
    let dam_id = dam.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    // Read and write keys: 403 everywhere.
    for scope in [Scope::Read, Scope::Write] {
        let t = app.key(scope, None).await;
        create(&app, &t, json!({"url": HOOK, "events": ["alert.raised"]}))
            .await
            .problem(403);
        for path in [
            "/v1/webhooks".to_owned(),
            format!("/v1/webhooks/{global_id}"),
            format!("/v1/webhooks/{global_id}/deliveries"),
        ] {
            app.call(Method::GET, &path, Some(&t), None)
                .await
                .problem(403);
        }
        app.call(
            Method::DELETE,
            &format!("/v1/webhooks/{global_id}"),
            Some(&t),
            None,
        )
        .await
        .problem(403);
    }
    app.call(Method::GET, "/v1/webhooks", None, None)
        .await
        .problem(401);
    // An admin key limited to BRIDGE-1.
    let limited = app.key(Scope::Admin, Some(&["BRIDGE-1"])).await;
    let r = create(
        &app,
        &limited,
        json!({"url": HOOK, "events": ["alert.raised"]}),
    )
    .await;
    assert!(
        r.problem(403)["detail"]
            .as_str()
            .is_some_and(|d| d.contains("structure_id"))
    );
    let r = create(
        &app,
        &limited,
        json!({"url": HOOK, "events": ["alert.raised"], "structure_id": "DAM-2"}),
    )
    .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/structure_id"]);
    let own = create(
        &app,
        &limited,
        json!({"url": HOOK, "events": ["alert.raised"], "structure_id": "BRIDGE-1"}),
    )
    .await;
    assert_eq!(own.status, 201, "{}", own.json);
    let own_id = own.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    let list = app
        .call(Method::GET, "/v1/webhooks", Some(&limited), None)
        .await;
    assert_eq!(list.json, json!([own.json["subscription"]]));
    for other in [&global_id, &dam_id] {
        app.call(
            Method::GET,
            &format!("/v1/webhooks/{other}"),
            Some(&limited),
            None,
        )
        .await
        .problem(404);
        app.call(
            Method::DELETE,
            &format!("/v1/webhooks/{other}"),
            Some(&limited),
            None,
        )
        .await
        .problem(404);
    }
    let del = app
        .call(
            Method::DELETE,
            &format!("/v1/webhooks/{own_id}"),
            Some(&limited),
            None,
        )
        .await;
    assert_eq!(del.status, 204);
    // The unrestricted admin still has the other two.
    let list = app
        .call(Method::GET, "/v1/webhooks", Some(&admin), None)
        .await;
    assert_eq!(list.json.as_array().map(Vec::len), Some(2));
}

fn no_rules(
    _: &Structure,
    _: &[AlertRuleRecord],
    _: &[AlertState],
    _: &Analysis,
    _: time::OffsetDateTime,
) -> Evaluation {
    Evaluation::default()
}

/// Queue `n` `analysis.failed` events of `structure` through the store (jobs with one
/// attempt that ends in an error).
async fn failed_jobs(app: &App, structure: &str, n: usize) {
    for i in 0..n {
        let job = NewJob {
            id: Uuid::new_v4(),
            structure_id: structure.to_owned(),
            origin: JobOrigin::Request,
            batch_id: None,
            request: json!({"kind": "epoch"}),
            max_attempts: 1,
            created_at: now_utc(),
        };
        app.store.enqueue_job(&job).await.expect("enqueue");
        let now = now_utc();
        let (_, lease) = app
            .store
            .claim_job("test-worker", now, now + time::Duration::minutes(1))
            .await
            .expect("claim")
            .expect("due");
        app.store
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
            .expect("complete");
    }
}

async fn deliveries_page_by_seq_and_filter_by_status(b: Backend) {
    let (app, admin) = start(b, None).await;
    let bridge = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["analysis.failed"], "structure_id": "BRIDGE-1"}),
    )
    .await;
    let id = bridge.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    // A subscription to other events and one to the other structure get nothing.
    let alerts = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["alert.raised"]}),
    )
    .await;
    let alerts_id = alerts.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    let dam = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["analysis.failed"], "structure_id": "DAM-2"}),
    )
    .await;
    let dam_id = dam.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    failed_jobs(&app, "BRIDGE-1", 3).await;
    let base = format!("/v1/webhooks/{id}/deliveries");
    let p1 = app
        .call(Method::GET, &format!("{base}?limit=2"), Some(&admin), None)
        .await;
    assert_eq!(p1.status, 200, "{}", p1.json);
    let items1 = p1.json["items"].as_array().expect("items").clone();
    assert_eq!(items1.len(), 2);
    let cursor = p1.json["next_cursor"]
        .as_str()
        .expect("a next page")
        .to_owned();
    let p2 = app
        .call(
            Method::GET,
            &format!("{base}?limit=2&cursor={cursor}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(p2.status, 200, "{}", p2.json);
    let items2 = p2.json["items"].as_array().expect("items").clone();
    assert_eq!(items2.len(), 1);
    assert!(p2.json.get("next_cursor").is_none(), "{}", p2.json);
    let all: Vec<_> = items1.iter().chain(items2.iter()).collect();
    let seqs: Vec<i64> = all
        .iter()
        .map(|d| d["seq"].as_i64().expect("seq"))
        .collect();
    assert!(seqs.windows(2).all(|w| w[0] < w[1]), "{seqs:?}");
    for d in &all {
        assert_eq!(d["subscription_id"], id.as_str());
        assert_eq!(d["event_type"], "analysis.failed");
        assert_eq!(d["status"], "pending");
        assert_eq!(d["attempts"], 0);
    }
    let pending = app
        .call(
            Method::GET,
            &format!("{base}?status=pending"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(pending.json["items"].as_array().map(Vec::len), Some(3));
    let delivered = app
        .call(
            Method::GET,
            &format!("{base}?status=delivered"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(delivered.json["items"], json!([]));
    for other in [&alerts_id, &dam_id] {
        let r = app
            .call(
                Method::GET,
                &format!("/v1/webhooks/{other}/deliveries"),
                Some(&admin),
                None,
            )
            .await;
        assert_eq!(r.json["items"], json!([]), "{other}");
    }
    // One delivery with its (empty) attempt log.
    let first = all[0]["id"].as_str().expect("id");
    let one = app
        .call(Method::GET, &format!("{base}/{first}"), Some(&admin), None)
        .await;
    assert_eq!(one.status, 200, "{}", one.json);
    assert_eq!(&one.json["delivery"], all[0]);
    assert_eq!(one.json["attempts"], json!([]));
    // Bad filters.
    for (q, pointer) in [
        ("status=lost", "/status"),
        ("limit=0", "/limit"),
        ("cursor=zz", "/cursor"),
    ] {
        let r = app
            .call(Method::GET, &format!("{base}?{q}"), Some(&admin), None)
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), [pointer], "{q}");
    }
    // A deleted subscription's deliveries go with it.
    app.call(
        Method::DELETE,
        &format!("/v1/webhooks/{id}"),
        Some(&admin),
        None,
    )
    .await;
    app.call(Method::GET, &base, Some(&admin), None)
        .await
        .problem(404);
}

async fn unknown_ids_are_404_and_bad_ones_422(b: Backend) {
    let (app, admin) = start(b, None).await;
    let r = create(
        &app,
        &admin,
        json!({"url": HOOK, "events": ["alert.raised"]}),
    )
    .await;
    let id = r.json["subscription"]["id"]
        .as_str()
        .expect("id")
        .to_owned();
    let unknown = Uuid::new_v4();
    for (method, path) in [
        (Method::GET, format!("/v1/webhooks/{unknown}")),
        (Method::DELETE, format!("/v1/webhooks/{unknown}")),
        (Method::GET, format!("/v1/webhooks/{unknown}/deliveries")),
        (
            Method::GET,
            format!("/v1/webhooks/{id}/deliveries/{unknown}"),
        ),
        (
            Method::POST,
            format!("/v1/webhooks/{id}/deliveries/{unknown}/replay"),
        ),
        (
            Method::POST,
            format!("/v1/webhooks/{unknown}/deliveries/{unknown}/replay"),
        ),
    ] {
        app.call(method, &path, Some(&admin), None)
            .await
            .problem(404);
    }
    for (method, path, pointer) in [
        (Method::GET, "/v1/webhooks/nope".to_owned(), "/webhook_id"),
        (
            Method::DELETE,
            "/v1/webhooks/nope".to_owned(),
            "/webhook_id",
        ),
        (
            Method::GET,
            format!("/v1/webhooks/{id}/deliveries/nope"),
            "/delivery_id",
        ),
        (
            Method::POST,
            format!("/v1/webhooks/{id}/deliveries/nope/replay"),
            "/delivery_id",
        ),
    ] {
        let r = app.call(method, &path, Some(&admin), None).await;
        r.problem(422);
        assert_eq!(r.pointers(), [pointer], "{path}");
    }
    let r = app
        .call(
            Method::GET,
            "/v1/webhooks?structure_id=bad%20id",
            Some(&admin),
            None,
        )
        .await;
    r.problem(422);
    assert_eq!(r.pointers(), ["/structure_id"]);
}
