//! Ingestion speed: readings into PostgreSQL (a fresh schema) and SQLite (a temp file)
//! through the store's batch writer, against a baseline in the same run on the same
//! data: one `INSERT` statement per reading (a prepared one-row statement, reused),
//! all inside one transaction. Before every measurement the readings and batches
//! tables are emptied, so each one starts from the same state. Each side runs
//! `KINEMA_BENCH_RUNS` times (default 2); the best readings/s is reported with the
//! spread (worst vs best) and the ratio of the bests.
//!
//! Run: `cargo bench -p kinema-server --bench ingest`; `KINEMA_BENCH_READINGS=1000000`
//! for a batch of 10^6 readings (default 10^5).

use std::time::Instant;

use kinema_server::model::{Frame, StoredPoint, Structure, now_utc, to_unix_micros};
use kinema_server::store::{self, BatchMeta, DynStore, NewReading};
use kinema_server::units::LengthUnit;
use kinema_tests::db::{PgSchema, sqlite_file};
use time::{Duration, OffsetDateTime};

/// Points of the bench structure; readings cycle through them, one epoch per round.
const POINTS: usize = 100;
/// Readings handed to the writer per `write` call (as the parser's chunks).
const CHUNK: usize = 10_000;
/// The bench structure.
const ID: &str = "B";

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

async fn setup(store: &DynStore) {
    let t = now_utc();
    store
        .put_structure(&Structure {
            id: ID.into(),
            name: "bench".into(),
            dimension: 2,
            frame: Frame::Local,
            length_unit: LengthUnit::Metre,
            material: None,
            metadata: serde_json::json!({}),
            created_at: t,
            updated_at: t,
        })
        .await
        .expect("structure");
    let pts: Vec<StoredPoint> = (0..POINTS)
        .map(|i| StoredPoint {
            id: format!("P{i:03}"),
            x: vec![i as f64, 0.0],
            sigma: None,
        })
        .collect();
    store.put_points(ID, &pts).await.expect("points");
}

/// The readings, as the parser would hand them over (epoch by epoch, points in key order).
fn readings(keys: &[i64], n: usize) -> Vec<NewReading> {
    let base = time::macros::datetime!(2026-01-01 0:00 UTC);
    (0..n)
        .map(|i| NewReading {
            point_key: keys[i % keys.len()],
            epoch: base + Duration::seconds((i / keys.len()) as i64),
            u: [i as f64 * 1e-6, -(i as f64) * 1e-7, 0.0],
            sigma: Some([0.001, 0.0015, 0.0]),
        })
        .collect()
}

/// Readings/s through the batch writer, in chunks of [`CHUNK`], commit included.
async fn writer(store: &DynStore, rows: &[NewReading]) -> f64 {
    let t0 = Instant::now();
    let mut w = store.begin_batch(ID, None).await.expect("begin");
    for chunk in rows.chunks(CHUNK) {
        w.write(chunk).await.expect("write");
    }
    w.commit(BatchMeta {
        received_at: now_utc(),
        media_type: "text/csv".into(),
        idempotency_key: None,
        body_sha256: "0".repeat(64),
        jobs: Vec::new(),
    })
    .await
    .expect("commit");
    rows.len() as f64 / t0.elapsed().as_secs_f64()
}

const BASELINE_SQL: &str = "INSERT INTO readings (structure_key, point_key, epoch, ux, uy, uz, \
     sigma_x, sigma_y, sigma_z, batch_id) VALUES ($1, $2, $3, $4, $5, NULL, $6, $7, NULL, $8)";

/// Readings/s with one `INSERT` statement per reading, in one transaction.
async fn baseline_pg(pool: &sqlx::PgPool, skey: i64, rows: &[NewReading]) -> f64 {
    let batch = uuid::Uuid::new_v4();
    let t0 = Instant::now();
    let mut tx = pool.begin().await.expect("begin");
    for r in rows {
        sqlx::query(BASELINE_SQL)
            .bind(skey)
            .bind(r.point_key)
            .bind(r.epoch)
            .bind(r.u[0])
            .bind(r.u[1])
            .bind(r.sigma.map(|s| s[0]))
            .bind(r.sigma.map(|s| s[1]))
            .bind(batch)
            .execute(&mut *tx)
            .await
            .expect("insert");
    }
    tx.commit().await.expect("commit");
    rows.len() as f64 / t0.elapsed().as_secs_f64()
}

/// Readings/s with one `INSERT` statement per reading, in one `BEGIN IMMEDIATE`
/// transaction.
async fn baseline_sqlite(pool: &sqlx::SqlitePool, skey: i64, rows: &[NewReading]) -> f64 {
    let batch = uuid::Uuid::new_v4();
    let t0 = Instant::now();
    let mut tx = pool.begin_with("BEGIN IMMEDIATE").await.expect("begin");
    for r in rows {
        sqlx::query(BASELINE_SQL)
            .bind(skey)
            .bind(r.point_key)
            .bind(to_unix_micros(r.epoch))
            .bind(r.u[0])
            .bind(r.u[1])
            .bind(r.sigma.map(|s| s[0]))
            .bind(r.sigma.map(|s| s[1]))
            .bind(batch)
            .execute(&mut *tx)
            .await
            .expect("insert");
    }
    tx.commit().await.expect("commit");
    rows.len() as f64 / t0.elapsed().as_secs_f64()
}

/// Best and spread ((best − worst) / best, per cent) of `runs`.
fn best(runs: &[f64]) -> (f64, f64) {
    let hi = runs.iter().copied().fold(f64::MIN, f64::max);
    let lo = runs.iter().copied().fold(f64::MAX, f64::min);
    (hi, 100.0 * (hi - lo) / hi)
}

fn report(db: &str, w: &[f64], b: &[f64]) {
    let (wb, ws) = best(w);
    let (bb, bs) = best(b);
    println!(
        "{db:<9} batch writer {wb:>9.0} readings/s (spread {ws:>4.1} %) | baseline, one INSERT \
         statement per reading in one transaction {bb:>9.0} readings/s (spread {bs:>4.1} %) | \
         ratio {:.2}x",
        wb / bb
    );
}

/// The key of the bench structure and its point keys in key order.
async fn keys_pg(pool: &sqlx::PgPool) -> (i64, Vec<i64>) {
    let (skey,): (i64,) = sqlx::query_as("SELECT key FROM structures WHERE id = $1")
        .bind(ID)
        .fetch_one(pool)
        .await
        .expect("key");
    let keys: Vec<(i64,)> =
        sqlx::query_as("SELECT key FROM points WHERE structure_key = $1 ORDER BY key")
            .bind(skey)
            .fetch_all(pool)
            .await
            .expect("points");
    (skey, keys.into_iter().map(|k| k.0).collect())
}

async fn keys_sqlite(pool: &sqlx::SqlitePool) -> (i64, Vec<i64>) {
    let (skey,): (i64,) = sqlx::query_as("SELECT key FROM structures WHERE id = $1")
        .bind(ID)
        .fetch_one(pool)
        .await
        .expect("key");
    let keys: Vec<(i64,)> =
        sqlx::query_as("SELECT key FROM points WHERE structure_key = $1 ORDER BY key")
            .bind(skey)
            .fetch_all(pool)
            .await
            .expect("points");
    (skey, keys.into_iter().map(|k| k.0).collect())
}

async fn clear_pg(pool: &sqlx::PgPool) {
    sqlx::query("TRUNCATE readings, batches")
        .execute(pool)
        .await
        .expect("truncate");
}

async fn clear_sqlite(pool: &sqlx::SqlitePool) {
    for sql in ["DELETE FROM readings", "DELETE FROM batches"] {
        sqlx::query(sql).execute(pool).await.expect("delete");
    }
    sqlx::query("PRAGMA wal_checkpoint(TRUNCATE)")
        .execute(pool)
        .await
        .expect("checkpoint");
}

fn epoch_count(rows: &[NewReading]) -> usize {
    let mut e: Vec<OffsetDateTime> = rows.iter().map(|r| r.epoch).collect();
    e.dedup();
    e.len()
}

#[tokio::main]
async fn main() {
    let n = env_usize("KINEMA_BENCH_READINGS", 100_000);
    let runs = env_usize("KINEMA_BENCH_RUNS", 2).max(1);
    let only = std::env::var("KINEMA_BENCH_ONLY").unwrap_or_default();

    if only.is_empty() || only == "postgres" {
        let schema = PgSchema::create("bench_ingest").await;
        let pg = store::postgres::PgStore::connect(&schema.url)
            .await
            .expect("pg");
        let pg_dyn: DynStore = std::sync::Arc::new(pg.clone());
        pg_dyn.migrate().await.expect("migrate pg");
        setup(&pg_dyn).await;
        let (skey, keys) = keys_pg(pg.pool()).await;
        let rows = readings(&keys, n);
        println!(
            "ingest: {n} readings of {POINTS} points at {} epochs (2D, with sigma), one batch, \
             {runs} runs each",
            epoch_count(&rows)
        );
        let (mut w, mut b) = (Vec::new(), Vec::new());
        for _ in 0..runs {
            clear_pg(pg.pool()).await;
            w.push(writer(&pg_dyn, &rows).await);
            clear_pg(pg.pool()).await;
            b.push(baseline_pg(pg.pool(), skey, &rows).await);
        }
        report("postgres", &w, &b);
        schema.drop_schema().await;
    }

    if only.is_empty() || only == "sqlite" {
        let (url, _dir) = sqlite_file();
        let sq = store::sqlite::SqliteStore::open(&url)
            .await
            .expect("sqlite");
        let sq_dyn: DynStore = std::sync::Arc::new(sq.clone());
        sq_dyn.migrate().await.expect("migrate sqlite");
        setup(&sq_dyn).await;
        let (skey, keys) = keys_sqlite(sq.pool()).await;
        let rows = readings(&keys, n);
        let (mut w, mut b) = (Vec::new(), Vec::new());
        for _ in 0..runs {
            clear_sqlite(sq.pool()).await;
            w.push(writer(&sq_dyn, &rows).await);
            clear_sqlite(sq.pool()).await;
            b.push(baseline_sqlite(sq.pool(), skey, &rows).await);
        }
        report("sqlite", &w, &b);
    }
}
