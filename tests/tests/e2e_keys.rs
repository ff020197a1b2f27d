//! End-to-end checks of `kinema keys` (create, list, revoke) with the real binary on
//! an SQLite file and a PostgreSQL schema, and of the keys against a running server.

use kinema_tests::e2e;
use kinema_tests::http::Request;
use kinema_tests::server::{Server, TestDb, create_key, kinema, kinema_ok};

e2e!(
    create_prints_the_token_alone_on_the_last_line,
    list_never_prints_tokens_or_hashes,
    revoked_keys_are_refused_by_the_server,
    bad_scopes_and_ids_exit_2,
    structure_limited_keys_over_http,
);

/// Whether `s` holds a run of at least `n` hexadecimal digits (a token is `kn_` + 64,
/// a SHA-256 is 64; UUIDs have at most 12 in a row).
fn has_hex_run(s: &str, n: usize) -> bool {
    let mut run = 0;
    for c in s.chars() {
        if c.is_ascii_hexdigit() {
            run += 1;
            if run >= n {
                return true;
            }
        } else {
            run = 0;
        }
    }
    false
}

fn create_prints_the_token_alone_on_the_last_line(db: &TestDb) {
    let out = kinema_ok(&[
        "keys",
        "create",
        "--scope",
        "admin",
        "--database-url",
        &db.url,
    ]);
    let last = out.lines().last().expect("output");
    assert!(out.ends_with('\n'));
    assert_eq!(last.len(), 3 + 64, "{last:?}");
    assert!(last.starts_with("kn_"), "{last:?}");
    assert!(
        last[3..]
            .chars()
            .all(|c| c.is_ascii_hexdigit() && !c.is_ascii_uppercase())
    );
    // The token appears once, and only there.
    assert_eq!(out.matches(last).count(), 1, "{out}");
    // And it works.
    let server = Server::start(&db.url);
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(last));
    assert_eq!(r.status, 200);
}

fn list_never_prints_tokens_or_hashes(db: &TestDb) {
    let a = create_key(&db.url, "read", &[]);
    let b = create_key(&db.url, "write", &["WALL-1", "DAM-2"]);
    let out = kinema_ok(&["keys", "list", "--database-url", &db.url]);
    for k in [&a, &b] {
        assert!(out.contains(&k.id), "{out}");
        assert!(!out.contains(&k.token), "a token is listed:\n{out}");
        assert!(
            !out.contains(&k.token[3..20]),
            "part of a token is listed:\n{out}"
        );
        // The recognisable prefix is shown.
        assert!(out.contains(&k.token[..10]), "{out}");
    }
    assert!(!has_hex_run(&out, 20), "a token or hash is listed:\n{out}");
    assert!(out.contains("WALL-1,DAM-2"), "{out}");
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(lines.len(), 3, "header and two keys:\n{out}");
    assert!(lines[0].starts_with("id\t"));
}

fn revoked_keys_are_refused_by_the_server(db: &TestDb) {
    let server = Server::start(&db.url);
    let k = create_key(&db.url, "admin", &[]);
    let other = create_key(&db.url, "read", &[]);
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(&k.token));
    assert_eq!(r.status, 200);
    let out = kinema_ok(&["keys", "revoke", &k.id, "--database-url", &db.url]);
    assert!(out.contains(&k.id));
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(&k.token));
    assert_eq!(r.status, 401);
    assert_eq!(r.header("content-type"), Some("application/problem+json"));
    assert!(
        r.header("www-authenticate")
            .is_some_and(|v| v.starts_with("Bearer"))
    );
    // Other keys keep working; the list shows the revocation time.
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(&other.token));
    assert_eq!(r.status, 200);
    let list = kinema_ok(&["keys", "list", "--database-url", &db.url]);
    let line = list.lines().find(|l| l.starts_with(&k.id)).expect("listed");
    let revoked_at = line.split('\t').nth(5).expect("revoked_at column");
    assert_ne!(revoked_at, "-", "{line}");
    // Revoking again, or an unknown ID, exits 2.
    let again = kinema(&["keys", "revoke", &k.id, "--database-url", &db.url]);
    assert_eq!(again.status.code(), Some(2));
    // No Authorization at all: 401 with a challenge.
    let r = server.get("/v1/structures");
    assert_eq!(r.status, 401);
    assert!(r.header("www-authenticate").is_some());
}

fn bad_scopes_and_ids_exit_2(db: &TestDb) {
    let out = kinema(&[
        "keys",
        "create",
        "--scope",
        "bogus",
        "--database-url",
        &db.url,
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(out.stdout.is_empty(), "no token for a refused key");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("scope"), "{err}");
    let out = kinema(&[
        "keys",
        "create",
        "--scope",
        "read",
        "--structure",
        "no spaces",
        "--database-url",
        &db.url,
    ]);
    assert_eq!(out.status.code(), Some(2));
    let out = kinema(&["keys", "revoke", "not-a-uuid", "--database-url", &db.url]);
    assert_eq!(out.status.code(), Some(2));
    // Nothing was created.
    let list = kinema_ok(&["keys", "list", "--database-url", &db.url]);
    assert_eq!(list.lines().count(), 1, "{list}");
}

fn structure_limited_keys_over_http(db: &TestDb) {
    let server = Server::start(&db.url);
    let admin = create_key(&db.url, "admin", &[]);
    let body = |name: &str| serde_json::json!({"name": name, "dimension": 2, "frame": {"kind": "local"}, "length_unit": "m"});
    for id in ["A-1", "B-1"] {
        let r = server.send(
            &Request::new("PUT", &format!("/v1/structures/{id}"))
                .bearer(&admin.token)
                .json(&body(id)),
        );
        assert_eq!(r.status, 201);
    }
    let only_a = create_key(&db.url, "write", &["A-1"]);
    let hidden = server.send(&Request::new("GET", "/v1/structures/B-1").bearer(&only_a.token));
    let missing = server.send(&Request::new("GET", "/v1/structures/C-1").bearer(&only_a.token));
    assert_eq!(hidden.status, 404);
    assert_eq!(
        hidden.text().replace("B-1", "{id}"),
        missing.text().replace("C-1", "{id}")
    );
    let r = server.send(&Request::new("GET", "/v1/structures").bearer(&only_a.token));
    let items = r.json()["items"].clone();
    assert_eq!(items.as_array().map(Vec::len), Some(1));
    assert_eq!(items[0]["id"], "A-1");
    // A read key on a write route: 403.
    let read = create_key(&db.url, "read", &[]);
    let r = server.send(
        &Request::new("PUT", "/v1/structures/A-1")
            .bearer(&read.token)
            .json(&body("x")),
    );
    assert_eq!(r.status, 403);
}
