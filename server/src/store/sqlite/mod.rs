//! The SQLite store: one file, WAL journal, foreign keys on. Times are integer
//! microseconds since the Unix epoch (UTC); JSON is text; UUIDs are blobs.
//!
//! SQLite has one writer at a time: every write transaction starts with
//! `BEGIN IMMEDIATE` so that two writers queue on the busy timeout instead of failing
//! when a read transaction would have to upgrade.

mod analyses;
mod batches;
mod keys;
mod structures;

use std::str::FromStr;
use std::time::Duration;

use async_trait::async_trait;
use sqlx::sqlite::{
    SqliteConnectOptions, SqliteJournalMode, SqlitePool, SqlitePoolOptions, SqliteSynchronous,
};
use sqlx::{Sqlite, Transaction};
use uuid::Uuid;

use time::OffsetDateTime;

use super::{Backend, BatchWriter, PointsWritten, Store, StoreError, Written};
use crate::model::{
    Analysis, AnalysisQuery, ApiKey, Batch, EpochSummary, IdempotentBatch, Reading, StoredPoint,
    Structure,
};

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

#[async_trait]
impl Store for SqliteStore {
    fn backend(&self) -> Backend {
        Backend::Sqlite
    }

    async fn migrate(&self) -> Result<(), StoreError> {
        sqlx::migrate!("../migrations/sqlite")
            .run(&self.pool)
            .await?;
        Ok(())
    }

    async fn ping(&self) -> Result<(), StoreError> {
        sqlx::query("SELECT 1").execute(&self.pool).await?;
        Ok(())
    }

    async fn put_structure(&self, s: &Structure) -> Result<(Written, Structure), StoreError> {
        structures::put_structure(self, s).await
    }

    async fn get_structure(&self, id: &str) -> Result<Option<Structure>, StoreError> {
        structures::get_structure(&self.pool, id).await
    }

    async fn list_structures(
        &self,
        after: Option<&str>,
        limit: usize,
        only: Option<&[String]>,
    ) -> Result<Vec<Structure>, StoreError> {
        structures::list_structures(&self.pool, after, limit, only).await
    }

    async fn delete_structure(&self, id: &str) -> Result<bool, StoreError> {
        structures::delete_structure(self, id).await
    }

    async fn put_points(
        &self,
        structure: &str,
        points: &[StoredPoint],
    ) -> Result<PointsWritten, StoreError> {
        structures::put_points(self, structure, points).await
    }

    async fn list_points(&self, structure: &str) -> Result<Vec<StoredPoint>, StoreError> {
        structures::list_points(&self.pool, structure).await
    }

    async fn insert_key(&self, key: &ApiKey) -> Result<(), StoreError> {
        keys::insert_key(&self.pool, key).await
    }

    async fn key_by_hash(&self, token_sha256: &str) -> Result<Option<ApiKey>, StoreError> {
        keys::key_by_hash(&self.pool, token_sha256).await
    }

    async fn list_keys(&self) -> Result<Vec<ApiKey>, StoreError> {
        keys::list_keys(&self.pool).await
    }

    async fn revoke_key(&self, id: Uuid) -> Result<bool, StoreError> {
        keys::revoke_key(&self.pool, id).await
    }

    async fn begin_batch(&self, structure: &str) -> Result<Box<dyn BatchWriter>, StoreError> {
        batches::begin_batch(self, structure).await
    }

    async fn get_batch(&self, structure: &str, id: Uuid) -> Result<Option<Batch>, StoreError> {
        batches::get_batch(&self.pool, structure, id).await
    }

    async fn list_batches(
        &self,
        structure: &str,
        after: Option<(OffsetDateTime, Uuid)>,
        limit: usize,
    ) -> Result<Vec<Batch>, StoreError> {
        batches::list_batches(&self.pool, structure, after, limit).await
    }

    async fn batch_by_idempotency_key(
        &self,
        structure: &str,
        key: &str,
    ) -> Result<Option<IdempotentBatch>, StoreError> {
        batches::batch_by_idempotency_key(&self.pool, structure, key).await
    }

    async fn list_epochs(
        &self,
        structure: &str,
        from: Option<OffsetDateTime>,
        to: Option<OffsetDateTime>,
    ) -> Result<Vec<EpochSummary>, StoreError> {
        batches::list_epochs(&self.pool, structure, from, to).await
    }

    async fn readings_at(
        &self,
        structure: &str,
        epoch: OffsetDateTime,
    ) -> Result<Vec<Reading>, StoreError> {
        batches::readings_at(&self.pool, structure, epoch).await
    }

    async fn insert_analysis(&self, a: &Analysis) -> Result<(), StoreError> {
        analyses::insert_analysis(&self.pool, a).await
    }

    async fn get_analysis(
        &self,
        structure: &str,
        id: Uuid,
    ) -> Result<Option<Analysis>, StoreError> {
        analyses::get_analysis(&self.pool, structure, id).await
    }

    async fn list_analyses(
        &self,
        structure: &str,
        q: &AnalysisQuery,
    ) -> Result<Vec<Analysis>, StoreError> {
        analyses::list_analyses(&self.pool, structure, q).await
    }
}
