//! Sensor batches and readings in SQLite.
//!
//! A batch is one `BEGIN IMMEDIATE` transaction. Readings go in through one prepared
//! multi-row `INSERT` of [`ROWS_PER_INSERT`] rows (the statement is prepared once per
//! connection and cached by sqlx) with anonymous `?` placeholders (see `insert_sql`
//! for why); the rest of a chunk goes row by row through a one-row statement.

use std::borrow::Cow;
use std::collections::HashMap;
use std::sync::{Arc, OnceLock};

use async_trait::async_trait;
use sqlx::types::Json;
use sqlx::{AssertSqlSafe, Sqlite, SqlitePool, Transaction};
use time::OffsetDateTime;
use uuid::Uuid;

use super::SqliteStore;
use crate::model::{
    Batch, EpochSummary, IdempotentBatch, Reading, from_unix_micros, to_unix_micros,
};
use crate::store::rows::{
    BatchRow, BatchTally, IdempotentRow, ReadingRow, batch_columns, duplicate, reading_columns,
};
use crate::store::{BatchMeta, BatchWriter, NewReading, StoreError};

/// Rows of the multi-row insert: 10 bound values each, well under SQLite's limit of
/// 32 766 variables. Measured (benches/ingest.rs, 10^5 readings): 50 and 200 rows are
/// alike; 1 000 rows per statement is slower, as binding grows with statement width.
pub const ROWS_PER_INSERT: usize = 200;

/// `INSERT INTO readings … VALUES (?, …), (?, …), …` for `rows` rows, 10 anonymous
/// parameters per row (in column order). Anonymous `?` on purpose: sqlx looks up the
/// name of every parameter before binding it, and for numbered `?NNN` parameters
/// SQLite answers by scanning the statement's parameter list, which makes binding a
/// wide statement quadratic in its parameter count. Built from constants only.
fn insert_sql(rows: usize) -> String {
    let mut sql = String::from(
        "INSERT INTO readings (structure_key, point_key, epoch, ux, uy, uz, sigma_x, sigma_y, \
         sigma_z, batch_id) VALUES ",
    );
    for r in 0..rows {
        if r > 0 {
            sql.push_str(", ");
        }
        sql.push_str("(?, ?, ?, ?, ?, ?, ?, ?, ?, ?)");
    }
    sql
}

fn many_sql() -> &'static str {
    static SQL: OnceLock<String> = OnceLock::new();
    SQL.get_or_init(|| insert_sql(ROWS_PER_INSERT))
}

fn one_sql() -> &'static str {
    static SQL: OnceLock<String> = OnceLock::new();
    SQL.get_or_init(|| insert_sql(1))
}

/// The internal key, dimension and ID-ordered point keys of structure `id`.
async fn structure_of(
    tx: &mut Transaction<'static, Sqlite>,
    id: &str,
) -> Result<(i64, u8, HashMap<String, i64>), StoreError> {
    let found: Option<(i64, i16)> =
        sqlx::query_as("SELECT key, dimension FROM structures WHERE id = $1")
            .bind(id)
            .fetch_optional(&mut **tx)
            .await?;
    let (key, dim) =
        found.ok_or_else(|| StoreError::NotFound(format!("structure {id} does not exist")))?;
    let dim = u8::try_from(dim).map_err(StoreError::corrupt)?;
    let points: Vec<(String, i64)> =
        sqlx::query_as("SELECT id, key FROM points WHERE structure_key = $1")
            .bind(key)
            .fetch_all(&mut **tx)
            .await?;
    Ok((key, dim, points.into_iter().collect()))
}

pub(super) async fn begin_batch(
    store: &SqliteStore,
    structure: &str,
    // BEGIN IMMEDIATE already serialises every writer, whatever its key.
    _idempotency_key: Option<&str>,
) -> Result<Box<dyn BatchWriter>, StoreError> {
    let mut tx = store.write_tx().await?;
    let (structure_key, dimension, points) = structure_of(&mut tx, structure).await?;
    Ok(Box::new(SqliteBatchWriter {
        tx,
        structure_key,
        structure_id: structure.to_owned(),
        dimension,
        points: Arc::new(points),
        batch_id: Uuid::new_v4(),
        tally: BatchTally::default(),
    }))
}

/// The SQLite [`BatchWriter`].
struct SqliteBatchWriter {
    tx: Transaction<'static, Sqlite>,
    structure_key: i64,
    structure_id: String,
    dimension: u8,
    points: Arc<HashMap<String, i64>>,
    batch_id: Uuid,
    tally: BatchTally,
}

impl SqliteBatchWriter {
    /// The reading of this chunk that is stored already, as a conflict message.
    async fn conflict_in(&mut self, chunk: &[NewReading]) -> StoreError {
        for r in chunk {
            let hit: Result<Option<(String,)>, _> = sqlx::query_as(
                "SELECT p.id FROM readings r JOIN points p ON p.key = r.point_key \
                 WHERE r.structure_key = $1 AND r.epoch = $2 AND r.point_key = $3 \
                 AND r.batch_id <> $4",
            )
            .bind(self.structure_key)
            .bind(to_unix_micros(r.epoch))
            .bind(r.point_key)
            .bind(self.batch_id)
            .fetch_optional(&mut *self.tx)
            .await;
            if let Ok(Some((point,))) = hit {
                return duplicate(&point, r.epoch);
            }
        }
        StoreError::Conflict("a reading of this batch is already stored (point and epoch)".into())
    }
}

#[async_trait]
impl BatchWriter for SqliteBatchWriter {
    fn batch_id(&self) -> Uuid {
        self.batch_id
    }

    fn dimension(&self) -> u8 {
        self.dimension
    }

    fn points(&self) -> Arc<HashMap<String, i64>> {
        self.points.clone()
    }

    async fn write(&mut self, chunk: &[NewReading]) -> Result<(), StoreError> {
        let three = self.dimension == 3;
        let mut many = chunk.chunks_exact(ROWS_PER_INSERT);
        let mut result = Ok(());
        for rows in many.by_ref() {
            let mut q = sqlx::query(AssertSqlSafe(Cow::Borrowed(many_sql())));
            for r in rows {
                q = bind_row(q, self.structure_key, self.batch_id, r, three);
            }
            if let Err(e) = q.execute(&mut *self.tx).await {
                result = Err(e);
                break;
            }
        }
        if result.is_ok() {
            for r in many.remainder() {
                let q = sqlx::query(AssertSqlSafe(Cow::Borrowed(one_sql())));
                let q = bind_row(q, self.structure_key, self.batch_id, r, three);
                if let Err(e) = q.execute(&mut *self.tx).await {
                    result = Err(e);
                    break;
                }
            }
        }
        match result {
            Ok(()) => {
                for r in chunk {
                    self.tally.add(r.point_key, to_unix_micros(r.epoch));
                }
                Ok(())
            }
            Err(e) => {
                let e = StoreError::from(e);
                if e.is_unique_violation() {
                    Err(self.conflict_in(chunk).await)
                } else {
                    Err(e)
                }
            }
        }
    }

    async fn commit(mut self: Box<Self>, meta: BatchMeta) -> Result<Batch, StoreError> {
        let batch = self
            .tally
            .summary(self.batch_id, &self.structure_id, meta.received_at)?;
        let response = serde_json::to_value(&batch).map_err(StoreError::corrupt)?;
        let inserted = sqlx::query(
            "INSERT INTO batches (id, structure_key, received_at, readings, points, epochs, \
             first_epoch, last_epoch, media_type, idempotency_key, body_sha256, response) \
             VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12)",
        )
        .bind(batch.id)
        .bind(self.structure_key)
        .bind(to_unix_micros(batch.received_at))
        .bind(count(batch.readings))
        .bind(count(batch.points))
        .bind(count(batch.epochs))
        .bind(to_unix_micros(batch.first_epoch))
        .bind(to_unix_micros(batch.last_epoch))
        .bind(&meta.media_type)
        .bind(&meta.idempotency_key)
        .bind(&meta.body_sha256)
        .bind(Json(&response))
        .execute(&mut *self.tx)
        .await
        .map_err(StoreError::from);
        match inserted {
            Err(e) if e.is_unique_violation() => {
                return Err(StoreError::Conflict(
                    "another request with this Idempotency-Key was stored meanwhile".into(),
                ));
            }
            other => {
                other?;
            }
        }
        // The structure's automatic analysis of this batch, queued with it.
        super::monitor::insert_jobs(
            &mut self.tx,
            self.structure_key,
            &self.structure_id,
            &meta.jobs,
        )
        .await?;
        self.tx.commit().await?;
        Ok(batch)
    }
}

use crate::store::rows::big as count;

type Query<'q> = sqlx::query::Query<'q, Sqlite, sqlx::sqlite::SqliteArguments>;

/// Bind the 10 values of one reading row, in the column order of [`insert_sql`].
fn bind_row<'q>(
    q: Query<'q>,
    structure_key: i64,
    batch_id: Uuid,
    r: &NewReading,
    three: bool,
) -> Query<'q> {
    let s = r.sigma;
    q.bind(structure_key)
        .bind(r.point_key)
        .bind(to_unix_micros(r.epoch))
        .bind(r.u[0])
        .bind(r.u[1])
        .bind(three.then_some(r.u[2]))
        .bind(s.map(|s| s[0]))
        .bind(s.map(|s| s[1]))
        .bind(s.filter(|_| three).map(|s| s[2]))
        .bind(batch_id)
}

pub(super) async fn list_batches(
    pool: &SqlitePool,
    structure: &str,
    after: Option<(OffsetDateTime, Uuid)>,
    limit: usize,
) -> Result<Vec<Batch>, StoreError> {
    let (t, id) = after.map_or((i64::MIN, Uuid::nil()), |(t, id)| (to_unix_micros(t), id));
    let strict = after.is_some();
    sqlx::query_as::<_, BatchRow<i64>>(concat!(
        "SELECT ",
        batch_columns!(),
        " FROM batches b JOIN structures s ON s.key = b.structure_key \
         WHERE s.id = $1 AND (NOT $2 OR b.received_at > $3 OR (b.received_at = $3 AND b.id > $4)) \
         ORDER BY b.received_at, b.id LIMIT $5"
    ))
    .bind(structure)
    .bind(strict)
    .bind(t)
    .bind(id)
    .bind(count(limit))
    .fetch_all(pool)
    .await?
    .into_iter()
    .map(BatchRow::into_batch)
    .collect()
}

pub(super) async fn list_epochs(
    pool: &SqlitePool,
    structure: &str,
    from: Option<OffsetDateTime>,
    to: Option<OffsetDateTime>,
) -> Result<Vec<EpochSummary>, StoreError> {
    let rows: Vec<(i64, i64)> = sqlx::query_as(
        "SELECT r.epoch, count(*) FROM readings r JOIN structures s ON s.key = r.structure_key \
         WHERE s.id = $1 AND r.epoch >= $2 AND r.epoch <= $3 GROUP BY r.epoch ORDER BY r.epoch",
    )
    .bind(structure)
    .bind(from.map_or(i64::MIN, to_unix_micros))
    .bind(to.map_or(i64::MAX, to_unix_micros))
    .fetch_all(pool)
    .await?;
    rows.into_iter()
        .map(|(us, n)| {
            Ok(EpochSummary {
                epoch: from_unix_micros(us)
                    .ok_or_else(|| StoreError::corrupt(format!("epoch {us} µs")))?,
                readings: u64::try_from(n).map_err(StoreError::corrupt)?,
            })
        })
        .collect()
}

crate::store::shared::batch_reads_sql!(pool = sqlx::SqlitePool, time = i64, id_order = "",);
