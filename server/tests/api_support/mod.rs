//! The in-process API for tests: the real router (`kinema_server::api::app`) over a real
//! migrated store (an SQLite file or a fresh PostgreSQL schema), driven with
//! `tower::ServiceExt::oneshot`, and API keys inserted through the store.
//!
//! `api_case!(case, …)` makes one `#[tokio::test]` per case and backend; a case is
//! `async fn case(b: Backend)` and starts its app with [`App::start`] (so it can choose
//! the limits).
#![allow(dead_code)]

use axum::Router;
use axum::body::Body;
use axum::http::{HeaderMap, Method, Request, StatusCode, header};
use kinema_server::api::{self, AppState, Limits};
use kinema_server::keys;
use kinema_server::model::Scope;
use kinema_server::settings::Settings;
use kinema_server::store::{self, DynStore};
use kinema_tests::db::{PgSchema, sqlite_file};
use tower::ServiceExt;

/// Which database a case runs on.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Backend {
    /// An SQLite file in a temporary folder.
    Sqlite,
    /// A fresh PostgreSQL schema.
    Postgres,
}

/// What keeps a test database alive (PostgreSQL schemas are dropped by [`cleanup`]).
enum Guard {
    Sqlite(#[allow(dead_code)] tempfile::TempDir),
    Postgres,
}

thread_local! {
    /// PostgreSQL schemas made by this test (tokio's test runtime runs the test on its
    /// own thread), dropped by [`cleanup`].
    static SCHEMAS: std::cell::RefCell<Vec<PgSchema>> = const { std::cell::RefCell::new(Vec::new()) };
}

/// Drop the PostgreSQL schemas this test made. It runs after the case, in the test's
/// runtime, so that the store's connections can finish returning to their pool (and
/// roll back what they held) while the drop waits for its lock; a blocking drop would
/// wait for them forever.
pub async fn cleanup() {
    let list = SCHEMAS.with(|s| std::mem::take(&mut *s.borrow_mut()));
    for s in list {
        s.drop_schema().await;
    }
}

/// The application over a migrated store.
pub struct App {
    /// The router with every layer, as `kinema serve` runs it.
    pub router: Router,
    /// The store behind it.
    pub store: DynStore,
    /// The state the router runs with (for [`App::drain`]).
    pub state: AppState,
    _guard: Guard,
}

/// A response, with the body parsed as JSON when it is JSON (else `Value::Null`).
#[derive(Debug)]
pub struct Resp {
    /// Status.
    pub status: StatusCode,
    /// Headers.
    pub headers: HeaderMap,
    /// Raw body.
    pub bytes: Vec<u8>,
    /// Body as JSON (`Null` when it is not JSON).
    pub json: serde_json::Value,
}

impl Resp {
    /// The `Content-Type` header or `""`.
    pub fn content_type(&self) -> &str {
        self.headers
            .get(header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok())
            .unwrap_or("")
    }

    /// Assert that this is an RFC 9457 problem with `status`, and return it.
    #[track_caller]
    pub fn problem(&self, status: u16) -> &serde_json::Value {
        assert_eq!(
            self.status.as_u16(),
            status,
            "status; body: {}",
            String::from_utf8_lossy(&self.bytes)
        );
        assert_eq!(self.content_type(), "application/problem+json");
        for field in ["type", "title", "detail"] {
            assert!(
                self.json[field].as_str().is_some_and(|s| !s.is_empty()),
                "problem without {field}: {}",
                self.json
            );
        }
        assert_eq!(
            self.json["status"], status,
            "status member of {}",
            self.json
        );
        &self.json
    }

    /// The pointers of the problem's bad fields.
    pub fn pointers(&self) -> Vec<String> {
        self.json["errors"]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter_map(|e| e["pointer"].as_str().map(str::to_owned))
                    .collect()
            })
            .unwrap_or_default()
    }
}

impl App {
    /// The app on backend `b` with `limits`.
    pub async fn start(b: Backend, limits: Limits) -> Self {
        let (url, guard) = match b {
            Backend::Sqlite => {
                let (url, dir) = sqlite_file();
                (url, Guard::Sqlite(dir))
            }
            Backend::Postgres => {
                let s = PgSchema::create("api").await;
                let url = s.url.clone();
                SCHEMAS.with(|list| list.borrow_mut().push(s));
                (url, Guard::Postgres)
            }
        };
        let store = store::open(&url).await.expect("open the store");
        store.migrate().await.expect("migrate");
        Self::with_settings(store, limits, Settings::default(), guard)
    }

    /// The app on backend `b` with default limits and `settings`.
    pub async fn start_with(b: Backend, settings: Settings) -> Self {
        let mut app = Self::start(b, Limits::default()).await;
        app.state = AppState::with_settings(app.store.clone(), Limits::default(), settings);
        app.router = api::app(app.state.clone());
        app
    }

    fn with_settings(store: DynStore, limits: Limits, settings: Settings, guard: Guard) -> Self {
        let state = AppState::with_settings(store.clone(), limits, settings);
        let router = api::app(state.clone());
        Self {
            router,
            store,
            state,
            _guard: guard,
        }
    }

    /// Run every claimable job to its end, as the workers of `kinema serve` do; returns
    /// how many attempts ran.
    pub async fn drain(&self) -> usize {
        kinema_server::jobs::worker::drain(&self.state, "test-worker")
            .await
            .expect("run the jobs")
    }

    /// A new API key; returns its token.
    pub async fn key(&self, scope: Scope, structures: Option<&[&str]>) -> String {
        self.key_with_id(scope, structures).await.0
    }

    /// A new API key; returns its token and ID.
    pub async fn key_with_id(
        &self,
        scope: Scope,
        structures: Option<&[&str]>,
    ) -> (String, uuid::Uuid) {
        let list = structures.map(|s| s.iter().map(|x| (*x).to_owned()).collect());
        let (token, key) = keys::new_key("test", scope, list).expect("random source");
        self.store.insert_key(&key).await.expect("insert key");
        (token, key.id)
    }

    /// Send a request.
    pub async fn send(&self, req: Request<Body>) -> Resp {
        let resp = self
            .router
            .clone()
            .oneshot(req)
            .await
            .expect("the router is infallible");
        let status = resp.status();
        let headers = resp.headers().clone();
        let bytes = axum::body::to_bytes(resp.into_body(), usize::MAX)
            .await
            .expect("read the body")
            .to_vec();
        let json = serde_json::from_slice(&bytes).unwrap_or(serde_json::Value::Null);
        Resp {
            status,
            headers,
            bytes,
            json,
        }
    }

    /// `method path` with a bearer token (when given) and a JSON body (when given).
    pub async fn call(
        &self,
        method: Method,
        path: &str,
        token: Option<&str>,
        body: Option<serde_json::Value>,
    ) -> Resp {
        let mut b = Request::builder().method(method).uri(path);
        if let Some(t) = token {
            b = b.header(header::AUTHORIZATION, format!("Bearer {t}"));
        }
        let body = match body {
            Some(v) => {
                b = b.header(header::CONTENT_TYPE, "application/json");
                Body::from(v.to_string())
            }
            None => Body::empty(),
        };
        self.send(b.body(body).expect("a valid request")).await
    }

    /// `method path` with a raw body and content type.
    pub async fn raw(
        &self,
        method: Method,
        path: &str,
        token: &str,
        content_type: &str,
        body: impl Into<Body>,
    ) -> Resp {
        let req = Request::builder()
            .method(method)
            .uri(path)
            .header(header::AUTHORIZATION, format!("Bearer {token}"))
            .header(header::CONTENT_TYPE, content_type)
            .body(body.into())
            .expect("a valid request");
        self.send(req).await
    }
}

/// A 2D structure body in a local frame, millimetres.
pub fn local_2d(name: &str) -> serde_json::Value {
    serde_json::json!({
        "name": name,
        "dimension": 2,
        "frame": {"kind": "local"},
        "length_unit": "mm",
        "metadata": {"asset_ref": "invented-7"}
    })
}

/// `api_case!(case, …)`: one `#[tokio::test]` per case on each backend, in modules
/// `sqlite` and `postgres`.
#[macro_export]
macro_rules! api_case {
    ($($case:ident),* $(,)?) => {
        mod sqlite {
            $(
                #[tokio::test]
                async fn $case() {
                    super::$case($crate::api_support::Backend::Sqlite).await;
                }
            )*
        }
        mod postgres {
            $(
                #[tokio::test]
                async fn $case() {
                    super::$case($crate::api_support::Backend::Postgres).await;
                    $crate::api_support::cleanup().await;
                }
            )*
        }
    };
}
