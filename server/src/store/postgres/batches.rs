//! Sensor batches and readings in PostgreSQL.
//!
//! A batch is one transaction that share-locks the structure row (`FOR SHARE`):
//! several batches of one structure may be written at once, but its points cannot
//! change meanwhile. Readings go in through `COPY … FROM STDIN` in PostgreSQL's binary
//! format, one `COPY` per chunk on the transaction's own connection: no SQL text per
//! row, no float formatting or parsing, and the rows still commit or roll back with the
//! batch record. A reading that is stored already fails the `COPY` with a unique
//! violation, which is turned into a conflict naming the point and epoch.

use std::collections::HashMap;
use std::sync::Arc;

use async_trait::async_trait;
use sqlx::types::Json;
use sqlx::{PgPool, Postgres, Transaction};
use time::OffsetDateTime;
use uuid::Uuid;

use super::PgStore;
use crate::model::{Batch, EpochSummary, IdempotentBatch, Reading, to_unix_micros};
use crate::store::rows::duplicate;
use crate::store::rows::{
    BatchRow, BatchTally, IdempotentRow, ReadingRow, batch_columns, reading_columns,
};
use crate::store::{BatchMeta, BatchWriter, NewReading, StoreError};

/// Most rows in one `COPY` (larger chunks are split); about 120 bytes each on the wire.
pub const ROWS_PER_COPY: usize = 10_000;

/// The binary `COPY` of readings; the column order is the order of [`encode_copy`].
const COPY_SQL: &str = "COPY readings (structure_key, point_key, epoch, ux, uy, uz, sigma_x, \
                        sigma_y, sigma_z, batch_id) FROM STDIN (FORMAT binary)";

/// Start of PostgreSQL's time scale: `timestamptz` travels as signed microseconds since
/// 2000-01-01T00:00:00Z (PostgreSQL documentation, "Binary Format" of COPY and the
/// `timestamptz` send function).
const PG_EPOCH: OffsetDateTime = time::macros::datetime!(2000-01-01 0:00 UTC);

/// `rows` as one binary `COPY` stream: the 11-byte signature `PGCOPY\n\xff\r\n\0`, a
/// 32-bit flags field and a 32-bit header-extension length (both zero), then per row a
/// 16-bit field count and per field a 32-bit byte length (−1 for NULL) and the value in
/// network byte order, then the 16-bit trailer −1 (PostgreSQL documentation, COPY,
/// "Binary Format").
fn encode_copy(
    rows: &[NewReading],
    structure_key: i64,
    batch_id: Uuid,
    three: bool,
) -> Result<Vec<u8>, StoreError> {
    const FIELDS: i16 = 10;
    let mut buf = Vec::with_capacity(19 + rows.len() * 142 + 2);
    buf.extend_from_slice(b"PGCOPY\n\xff\r\n\0");
    buf.extend_from_slice(&0i32.to_be_bytes());
    buf.extend_from_slice(&0i32.to_be_bytes());
    let int8 = |buf: &mut Vec<u8>, v: i64| {
        buf.extend_from_slice(&8i32.to_be_bytes());
        buf.extend_from_slice(&v.to_be_bytes());
    };
    let float8 = |buf: &mut Vec<u8>, v: Option<f64>| match v {
        Some(v) => {
            buf.extend_from_slice(&8i32.to_be_bytes());
            buf.extend_from_slice(&v.to_bits().to_be_bytes());
        }
        None => buf.extend_from_slice(&(-1i32).to_be_bytes()),
    };
    for r in rows {
        let micros = i64::try_from((r.epoch - PG_EPOCH).whole_microseconds())
            .map_err(|_| StoreError::corrupt(format!("epoch {} out of range", r.epoch)))?;
        buf.extend_from_slice(&FIELDS.to_be_bytes());
        int8(&mut buf, structure_key);
        int8(&mut buf, r.point_key);
        int8(&mut buf, micros);
        float8(&mut buf, Some(r.u[0]));
        float8(&mut buf, Some(r.u[1]));
        float8(&mut buf, three.then_some(r.u[2]));
        float8(&mut buf, r.sigma.map(|s| s[0]));
        float8(&mut buf, r.sigma.map(|s| s[1]));
        float8(&mut buf, r.sigma.filter(|_| three).map(|s| s[2]));
        buf.extend_from_slice(&16i32.to_be_bytes());
        buf.extend_from_slice(batch_id.as_bytes());
    }
    buf.extend_from_slice(&(-1i16).to_be_bytes());
    Ok(buf)
}

pub(super) async fn begin_batch(
    store: &PgStore,
    structure: &str,
    idempotency_key: Option<&str>,
) -> Result<Box<dyn BatchWriter>, StoreError> {
    let mut tx = store.pool.begin().await?;
    if let Some(key) = idempotency_key {
        // Requests with one structure and key queue here until the first one ends; the
        // lock goes with the transaction.
        sqlx::query("SELECT pg_advisory_xact_lock(hashtextextended($1, 0))")
            .bind(format!("kinema-batch\n{structure}\n{key}"))
            .execute(&mut *tx)
            .await?;
    }
    let found: Option<(i64, i16)> =
        sqlx::query_as("SELECT key, dimension FROM structures WHERE id = $1 FOR SHARE")
            .bind(structure)
            .fetch_optional(&mut *tx)
            .await?;
    let (structure_key, dim) = found
        .ok_or_else(|| StoreError::NotFound(format!("structure {structure} does not exist")))?;
    let dimension = u8::try_from(dim).map_err(StoreError::corrupt)?;
    let points: Vec<(String, i64)> =
        sqlx::query_as("SELECT id, key FROM points WHERE structure_key = $1")
            .bind(structure_key)
            .fetch_all(&mut *tx)
            .await?;
    Ok(Box::new(PgBatchWriter {
        tx,
        pool: store.pool.clone(),
        structure_key,
        structure_id: structure.to_owned(),
        dimension,
        points: Arc::new(points.into_iter().collect()),
        batch_id: Uuid::new_v4(),
        tally: BatchTally::default(),
    }))
}

/// The PostgreSQL [`BatchWriter`].
struct PgBatchWriter {
    tx: Transaction<'static, Postgres>,
    /// For finding the conflicting reading after the transaction has failed.
    pool: PgPool,
    structure_key: i64,
    structure_id: String,
    dimension: u8,
    points: Arc<HashMap<String, i64>>,
    batch_id: Uuid,
    tally: BatchTally,
}

impl PgBatchWriter {
    /// The stored reading that one of `chunk` collides with, as a conflict message.
    async fn conflict_in(&self, chunk: &[NewReading]) -> StoreError {
        let epochs: Vec<OffsetDateTime> = chunk.iter().map(|r| r.epoch).collect();
        let keys: Vec<i64> = chunk.iter().map(|r| r.point_key).collect();
        let hit: Result<Option<(String, OffsetDateTime)>, _> = sqlx::query_as(
            "SELECT p.id, r.epoch FROM readings r JOIN points p ON p.key = r.point_key \
             WHERE r.structure_key = $1 AND (r.epoch, r.point_key) IN \
             (SELECT * FROM UNNEST($2::timestamptz[], $3::int8[])) LIMIT 1",
        )
        .bind(self.structure_key)
        .bind(&epochs)
        .bind(&keys)
        .fetch_optional(&self.pool)
        .await;
        match hit {
            Ok(Some((point, epoch))) => duplicate(&point, epoch),
            _ => StoreError::Conflict(
                "a reading of this batch (point and epoch) is being stored by a concurrent batch"
                    .into(),
            ),
        }
    }
}

#[async_trait]
impl BatchWriter for PgBatchWriter {
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
        for rows in chunk.chunks(ROWS_PER_COPY) {
            let data = encode_copy(rows, self.structure_key, self.batch_id, three)?;
            let done = {
                let mut copy = self.tx.copy_in_raw(COPY_SQL).await?;
                let sent = copy.send(data).await.map(|_| ());
                match sent {
                    Ok(()) => copy.finish().await.map(|_| ()),
                    Err(e) => {
                        // The connection is unusable now; dropping `copy` queues a CopyFail.
                        drop(copy);
                        Err(e)
                    }
                }
            }
            .map_err(StoreError::from);
            match done {
                Ok(()) => {}
                Err(e) if e.is_unique_violation() => return Err(self.conflict_in(rows).await),
                Err(e) => return Err(e),
            }
        }
        for r in chunk {
            self.tally.add(r.point_key, to_unix_micros(r.epoch));
        }
        Ok(())
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
        .bind(batch.received_at)
        .bind(count(batch.readings))
        .bind(count(batch.points))
        .bind(count(batch.epochs))
        .bind(batch.first_epoch)
        .bind(batch.last_epoch)
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

pub(super) async fn list_batches(
    pool: &PgPool,
    structure: &str,
    after: Option<(OffsetDateTime, Uuid)>,
    limit: usize,
) -> Result<Vec<Batch>, StoreError> {
    sqlx::query_as::<_, BatchRow<OffsetDateTime>>(concat!(
        "SELECT ",
        batch_columns!(),
        " FROM batches b JOIN structures s ON s.key = b.structure_key \
         WHERE s.id = $1 AND ($2::timestamptz IS NULL OR (b.received_at, b.id) > ($2, $3)) \
         ORDER BY b.received_at, b.id LIMIT $4"
    ))
    .bind(structure)
    .bind(after.map(|a| a.0))
    .bind(after.map_or(Uuid::nil(), |a| a.1))
    .bind(count(limit))
    .fetch_all(pool)
    .await?
    .into_iter()
    .map(BatchRow::into_batch)
    .collect()
}

pub(super) async fn list_epochs(
    pool: &PgPool,
    structure: &str,
    from: Option<OffsetDateTime>,
    to: Option<OffsetDateTime>,
) -> Result<Vec<EpochSummary>, StoreError> {
    let rows: Vec<(OffsetDateTime, i64)> = sqlx::query_as(
        "SELECT r.epoch, count(*) FROM readings r JOIN structures s ON s.key = r.structure_key \
         WHERE s.id = $1 AND ($2::timestamptz IS NULL OR r.epoch >= $2) \
         AND ($3::timestamptz IS NULL OR r.epoch <= $3) GROUP BY r.epoch ORDER BY r.epoch",
    )
    .bind(structure)
    .bind(from)
    .bind(to)
    .fetch_all(pool)
    .await?;
    rows.into_iter()
        .map(|(epoch, n)| {
            Ok(EpochSummary {
                epoch,
                readings: u64::try_from(n).map_err(StoreError::corrupt)?,
            })
        })
        .collect()
}

crate::store::shared::batch_reads_sql!(
    pool = sqlx::PgPool,
    time = OffsetDateTime,
    id_order = " COLLATE \"C\"",
);
