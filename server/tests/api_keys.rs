//! `/v1/keys`: key management over HTTP, for an unrestricted admin key only, in
//! process on both backends.
//! - create answers 201 with `Location` and the token once; the token works at once
//!   with its scope and structure list;
//! - the list never holds a token or its hash;
//! - revoke answers 204, the key then gets 401; an unknown ID 404, a bad one 422;
//! - read and write keys, and an admin key limited to some structures, get 403;
//! - bad fields are 422 with their pointer.

mod api_support;

use api_support::{App, Backend, local_2d};
use axum::http::Method;
use kinema_server::api::Limits;
use kinema_server::keys::token_hash;
use kinema_server::model::Scope;
use serde_json::json;

api_case!(
    an_admin_creates_a_key_that_works_with_its_scope_and_list,
    the_list_never_shows_tokens_or_hashes,
    a_revoked_key_gets_401,
    only_an_unrestricted_admin_manages_keys,
    bad_key_requests_are_422_or_404,
);

async fn an_admin_creates_a_key_that_works_with_its_scope_and_list(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let admin = app.key(Scope::Admin, None).await;
    let r = app
        .call(
            Method::POST,
            "/v1/keys",
            Some(&admin),
            Some(json!({"label": "logger A", "scope": "write", "structures": ["WALL-1"]})),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let id = r.json["key"]["id"].as_str().expect("id").to_owned();
    assert_eq!(r.headers["location"], format!("/v1/keys/{id}"));
    let token = r.json["token"].as_str().expect("token").to_owned();
    // The Location answers with the key, without its token.
    let got = app
        .call(Method::GET, &format!("/v1/keys/{id}"), Some(&admin), None)
        .await;
    assert_eq!(got.status, 200, "{}", got.json);
    assert_eq!(got.json, r.json["key"]);
    assert!(!String::from_utf8_lossy(&got.bytes).contains(&token));
    assert_eq!(r.json["key"]["scope"], "write");
    assert_eq!(r.json["key"]["structures"], json!(["WALL-1"]));
    // The new key writes its own structure and sees no other.
    let put = app
        .call(
            Method::PUT,
            "/v1/structures/WALL-1",
            Some(&token),
            Some(local_2d("W")),
        )
        .await;
    assert_eq!(put.status, 201, "{}", put.json);
    let other = app
        .call(
            Method::PUT,
            "/v1/structures/OTHER",
            Some(&token),
            Some(local_2d("O")),
        )
        .await;
    other.problem(404);
    // Write is below admin: it cannot manage keys.
    app.call(Method::GET, "/v1/keys", Some(&token), None)
        .await
        .problem(403);
}

async fn the_list_never_shows_tokens_or_hashes(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let admin = app.key(Scope::Admin, None).await;
    let r = app
        .call(
            Method::POST,
            "/v1/keys",
            Some(&admin),
            Some(json!({"scope": "read"})),
        )
        .await;
    assert_eq!(r.status, 201, "{}", r.json);
    let token = r.json["token"].as_str().expect("token").to_owned();
    let list = app.call(Method::GET, "/v1/keys", Some(&admin), None).await;
    assert_eq!(list.status, 200);
    let text = String::from_utf8_lossy(&list.bytes).into_owned();
    assert_eq!(list.json.as_array().map(Vec::len), Some(2), "{text}");
    for secret in [
        token.clone(),
        token_hash(&token),
        admin.clone(),
        token_hash(&admin),
    ] {
        assert!(!text.contains(&secret), "the list shows a secret: {text}");
    }
    assert!(text.contains(&token[..10]), "the prefix identifies the key");
}

async fn a_revoked_key_gets_401(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let admin = app.key(Scope::Admin, None).await;
    let (reader, id) = app.key_with_id(Scope::Read, None).await;
    assert_eq!(
        app.call(Method::GET, "/v1/structures", Some(&reader), None)
            .await
            .status,
        200
    );
    let r = app
        .call(
            Method::DELETE,
            &format!("/v1/keys/{id}"),
            Some(&admin),
            None,
        )
        .await;
    assert_eq!(r.status, 204, "{}", r.json);
    app.call(Method::GET, "/v1/structures", Some(&reader), None)
        .await
        .problem(401);
    // Revoking again: no valid key has this ID.
    app.call(
        Method::DELETE,
        &format!("/v1/keys/{id}"),
        Some(&admin),
        None,
    )
    .await
    .problem(404);
}

async fn only_an_unrestricted_admin_manages_keys(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let limited_admin = app.key(Scope::Admin, Some(&["WALL-1"])).await;
    for token in [
        app.key(Scope::Read, None).await,
        app.key(Scope::Write, None).await,
        limited_admin,
    ] {
        app.call(Method::GET, "/v1/keys", Some(&token), None)
            .await
            .problem(403);
        app.call(
            Method::POST,
            "/v1/keys",
            Some(&token),
            Some(json!({"scope": "admin"})),
        )
        .await
        .problem(403);
    }
    app.call(Method::GET, "/v1/keys", None, None)
        .await
        .problem(401);
}

async fn bad_key_requests_are_422_or_404(b: Backend) {
    let app = App::start(b, Limits::default()).await;
    let admin = app.key(Scope::Admin, None).await;
    for (body, pointer) in [
        (json!({"scope": "root"}), "/scope"),
        (json!({"scope": "read", "structures": []}), "/structures"),
        (
            json!({"scope": "read", "structures": ["bad id"]}),
            "/structures/0",
        ),
        (json!({"scope": "read", "label": "x".repeat(201)}), "/label"),
        (json!({"scope": "read", "extra": 1}), "/extra"),
    ] {
        let r = app
            .call(Method::POST, "/v1/keys", Some(&admin), Some(body.clone()))
            .await;
        r.problem(422);
        assert_eq!(r.pointers(), [pointer], "{body}: {}", r.json);
    }
    let unknown = uuid::Uuid::new_v4();
    app.call(
        Method::DELETE,
        &format!("/v1/keys/{unknown}"),
        Some(&admin),
        None,
    )
    .await
    .problem(404);
    // Nothing was created by the refused requests: only the admin key exists.
    let list = app.call(Method::GET, "/v1/keys", Some(&admin), None).await;
    assert_eq!(list.json.as_array().map(Vec::len), Some(1), "{}", list.json);
}
