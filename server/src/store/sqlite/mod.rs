//! The SQLite store: one file, WAL journal, foreign keys on. Times are integer
//! microseconds since the Unix epoch (UTC); JSON is text; UUIDs are blobs.
//!
//! SQLite has one writer at a time: every write transaction starts with
//! `BEGIN IMMEDIATE` so that two writers queue on the busy timeout instead of failing
//! when a read transaction would have to upgrade.

mod analyses;
mod batches;
mod common;
mod monitor;

use std::str::FromStr;
use std::time::Duration;

use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use sqlx::{Sqlite, Transaction};

use super::StoreError;

/// The SQLite implementation of [`Store`].
#[derive(Debug, Clone)]
pub struct SqliteStore {
    pool: SqlitePool,
}

impl SqliteStore {
    /// Open (creating when missing) the database at `url`: `sqlite:PATH`,
    /// `sqlite://PATH` or a bare file path.
    pub async fn open(url: &str) -> Result<Self, StoreError> {
        let url = if url.starts_with("sqlite:") {
            url.to_owned()
        } else {
            format!("sqlite:{url}")
        };
        let opts = SqliteConnectOptions::from_str(&url)
            .map_err(|e| StoreError::Url(e.to_string()))?
            .create_if_missing(true)
            .journal_mode(SqliteJournalMode::Wal)
            .synchronous(SqliteSynchronous::Normal)
            .foreign_keys(true)
            .busy_timeout(Duration::from_secs(30));
        let pool = SqlitePoolOptions::new()
            .max_connections(8)
            .connect_with(opts)
            .await?;
        Ok(Self { pool })
    }

    /// The connection pool (for benchmarks and tests).
    pub fn pool(&self) -> &SqlitePool {
        &self.pool
    }

    /// A write transaction (`BEGIN IMMEDIATE`).
    pub(crate) async fn write_tx(&self) -> Result<Transaction<'static, Sqlite>, StoreError> {
        Ok(self.pool.begin_with("BEGIN IMMEDIATE").await?)
    }
}

crate::store::shared::impl_store!(
    store = SqliteStore,
    backend = Backend::Sqlite,
    migrations = "../migrations/sqlite",
);
