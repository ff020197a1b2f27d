//! Ingestion speed: 10^5 readings into PostgreSQL (a fresh schema) and SQLite (a temp
//! file) through the store's batch writer, against a baseline of one `INSERT`
//! statement per reading inside one transaction, in the same run. Prints readings/s
//! for each and the ratio. Run: `cargo bench -p kinema-server --bench ingest`.

use std::time::Instant;

use kinema_server::model::{Frame, StoredPoint, Structure, now_utc};
use kinema_server::store::{self, BatchMeta, DynStore, NewReading};
use kinema_server::units::LengthUnit;
use kinema_tests::db::{PgSchema, sqlite_file};
use time::Duration;

const READINGS: usize = 100_000;
const POINTS: usize = 100;

async fn setup(store: &DynStore, id: &str) {
    let t = now_utc();
    store
        .put_structure(&Structure {
            id: id.into(),
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
            id: format!("P{i}"),
            x: vec![i as f64, 0.0],
            sigma: None,
        })
        .collect();
    store.put_points(id, &pts).await.expect("points");
}

/// The readings, as the parser would hand them over.
fn readings(keys: &[i64], base: time::OffsetDateTime) -> Vec<NewReading> {
    (0..READINGS)
        .map(|i| NewReading {
            point_key: keys[i % keys.len()],
            epoch: base + Duration::seconds((i / keys.len()) as i64),
            u: [i as f64 * 1e-6, -(i as f64) * 1e-6, 0.0],
            sigma: Some([0.001, 0.001, 0.0]),
        })
        .collect()
}

/// Readings/s through the batch writer, in chunks of 10 000.
async fn writer(store: &DynStore, id: &str) -> f64 {
    let mut w = store.begin_batch(id).await.expect("begin");
    let pts = w.points();
    let mut keys: Vec<i64> = pts.values().copied().collect();
    keys.sort_unstable();
    let rows = readings(&keys, time::macros::datetime!(2026-01-01 0:00 UTC));
    let t0 = Instant::now();
    for chunk in rows.chunks(10_000) {
        w.write(chunk).await.expect("write");
    }
    w.commit(BatchMeta {
        received_at: now_utc(),
        media_type: "text/csv".into(),
        idempotency_key: None,
        body_sha256: "0".repeat(64),
    })
    .await
    .expect("commit");
    READINGS as f64 / t0.elapsed().as_secs_f64()
}

/// Readings/s with one INSERT per reading, in one transaction (the baseline).
async fn baseline_pg(pool: &sqlx::PgPool, id: &str) -> f64 {
    let (skey,): (i64,) = sqlx::query_as("SELECT key FROM structures WHERE id = $1")
        .bind(id)
        .fetch_one(pool)
        .await
        .expect("key");
    let keys: Vec<(i64,)> =
        sqlx::query_as("SELECT key FROM points WHERE structure_key = $1 ORDER BY key")
            .bind(skey)
            .fetch_all(pool)
            .await
            .expect("points");
    let keys: Vec<i64> = keys.into_iter().map(|k| k.0).collect();
    let rows = readings(&keys, time::macros::datetime!(2027-01-01 0:00 UTC));
    let batch = uuid::Uuid::new_v4();
    let t0 = Instant::now();
    let mut tx = pool.begin().await.expect("begin");
    for r in &rows {
        sqlx::query("INSERT INTO readings (structure_key, point_key, epoch, ux, uy, uz, sigma_x, sigma_y, sigma_z, batch_id) VALUES ($1, $2, $3, $4, $5, NULL, $6, $7, NULL, $8)")
            .bind(skey).bind(r.point_key).bind(r.epoch).bind(r.u[0]).bind(r.u[1])
            .bind(r.sigma.map(|s| s[0])).bind(r.sigma.map(|s| s[1])).bind(batch)
            .execute(&mut *tx).await.expect("insert");
    }
    tx.commit().await.expect("commit");
    READINGS as f64 / t0.elapsed().as_secs_f64()
}

async fn baseline_sqlite(pool: &sqlx::SqlitePool, id: &str) -> f64 {
    let (skey,): (i64,) = sqlx::query_as("SELECT key FROM structures WHERE id = $1")
        .bind(id)
        .fetch_one(pool)
        .await
        .expect("key");
    let keys: Vec<(i64,)> =
        sqlx::query_as("SELECT key FROM points WHERE structure_key = $1 ORDER BY key")
            .bind(skey)
            .fetch_all(pool)
            .await
            .expect("points");
    let keys: Vec<i64> = keys.into_iter().map(|k| k.0).collect();
    let rows = readings(&keys, time::macros::datetime!(2027-01-01 0:00 UTC));
    let batch = uuid::Uuid::new_v4();
    let t0 = Instant::now();
    let mut tx = pool.begin_with("BEGIN IMMEDIATE").await.expect("begin");
    for r in &rows {
        sqlx::query("INSERT INTO readings (structure_key, point_key, epoch, ux, uy, uz, sigma_x, sigma_y, sigma_z, batch_id) VALUES ($1, $2, $3, $4, $5, NULL, $6, $7, NULL, $8)")
            .bind(skey).bind(r.point_key).bind(kinema_server::model::to_unix_micros(r.epoch)).bind(r.u[0]).bind(r.u[1])
            .bind(r.sigma.map(|s| s[0])).bind(r.sigma.map(|s| s[1])).bind(batch)
            .execute(&mut *tx).await.expect("insert");
    }
    tx.commit().await.expect("commit");
    READINGS as f64 / t0.elapsed().as_secs_f64()
}

fn report(db: &str, w: f64, b: f64) {
    println!(
        "{db:<10} batch writer {w:>10.0} readings/s | one INSERT per row {b:>10.0} readings/s | ratio {:.1}x",
        w / b
    );
}

#[tokio::main]
async fn main() {
    println!("ingest: {READINGS} readings of {POINTS} points (2D, with sigma)");
    let schema = PgSchema::create("bench_ingest").await;
    let pg = store::postgres::PgStore::connect(&schema.url)
        .await
        .expect("pg");
    let pg_dyn: DynStore = std::sync::Arc::new(pg.clone());
    pg_dyn.migrate().await.expect("migrate pg");
    setup(&pg_dyn, "B").await;
    let w = writer(&pg_dyn, "B").await;
    let b = baseline_pg(pg.pool(), "B").await;
    report("postgres", w, b);
    schema.drop_schema().await;

    let (url, _dir) = sqlite_file();
    let sq = store::sqlite::SqliteStore::open(&url)
        .await
        .expect("sqlite");
    let sq_dyn: DynStore = std::sync::Arc::new(sq.clone());
    sq_dyn.migrate().await.expect("migrate sqlite");
    setup(&sq_dyn, "B").await;
    let w = writer(&sq_dyn, "B").await;
    let b = baseline_sqlite(sq.pool(), "B").await;
    report("sqlite", w, b);
}
