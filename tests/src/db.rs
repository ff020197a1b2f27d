//! Databases for tests: an SQLite file in a temporary folder, and a fresh PostgreSQL
//! schema per test in the run's database.
//!
//! PostgreSQL comes from `KINEMA_TEST_DATABASE_URL` (`.ci/run` creates a database per
//! run and drops it afterwards); without it, `postgres://postgres@127.0.0.1:5432/postgres`.
//! An unreachable server is a loud failure, never a skip.

use std::sync::atomic::{AtomicU64, Ordering};

use sqlx::Connection;

/// The run's PostgreSQL database URL.
pub fn pg_base_url() -> String {
    std::env::var("KINEMA_TEST_DATABASE_URL")
        .unwrap_or_else(|_| "postgres://postgres@127.0.0.1:5432/postgres".to_owned())
}

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// A PostgreSQL schema made for one test; its URL puts it first on the search path.
#[derive(Debug)]
pub struct PgSchema {
    /// Connection URL whose `search_path` is the schema.
    pub url: String,
    /// The schema's name.
    pub schema: String,
}

impl PgSchema {
    /// Create a fresh, empty schema named after `tag` (letters, digits, `_`).
    ///
    /// # Panics
    /// When PostgreSQL cannot be reached or refuses.
    pub async fn create(tag: &str) -> Self {
        let base = pg_base_url();
        let n = COUNTER.fetch_add(1, Ordering::Relaxed);
        let nanos = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map_or(0, |d| d.subsec_nanos());
        let clean: String = tag
            .chars()
            .map(|c| {
                if c.is_ascii_alphanumeric() {
                    c.to_ascii_lowercase()
                } else {
                    '_'
                }
            })
            .take(30)
            .collect();
        let schema = format!("t_{clean}_{}_{n}_{nanos}", std::process::id());
        let mut conn = sqlx::PgConnection::connect(&base)
            .await
            .unwrap_or_else(|e| panic!("PostgreSQL at {base} is not reachable: {e}"));
        sqlx::raw_sql(sqlx::AssertSqlSafe(format!("CREATE SCHEMA \"{schema}\"")))
            .execute(&mut conn)
            .await
            .unwrap_or_else(|e| panic!("cannot create schema {schema}: {e}"));
        let _ = conn.close().await;
        let sep = if base.contains('?') { '&' } else { '?' };
        let url = format!("{base}{sep}options=-c%20search_path%3D{schema}");
        Self { url, schema }
    }

    /// Drop the schema and everything in it.
    pub async fn drop_schema(self) {
        if let Ok(mut conn) = sqlx::PgConnection::connect(&pg_base_url()).await {
            let _ = sqlx::raw_sql(sqlx::AssertSqlSafe(format!(
                "DROP SCHEMA IF EXISTS \"{}\" CASCADE",
                self.schema
            )))
            .execute(&mut conn)
            .await;
            let _ = conn.close().await;
        }
    }
}

/// An SQLite database file in a fresh temporary folder (removed when the guard drops).
pub fn sqlite_file() -> (String, tempfile::TempDir) {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("temp dir: {e}"));
    let url = format!("sqlite:{}", dir.path().join("kinema.db").display());
    (url, dir)
}
