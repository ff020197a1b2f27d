//! The cost of running analyses as durable jobs: N epoch analyses (Delaunay over
//! `KINEMA_BENCH_POINTS` points, default 400) on PostgreSQL (a fresh schema) and SQLite
//! (a temp file), against a baseline in the same run on the same data: the same
//! analyses computed and stored directly (`jobs::execute::execute` +
//! `Store::insert_analysis`, what the API did before analyses were jobs). The queued
//! side enqueues the N jobs and drains them with 1 and with 2 concurrent workers
//! (`jobs::worker::drain`, claim by claim: claim with a lease, renewal task, compute,
//! `complete_job` with alert evaluation and the outbox — no rules, no subscriptions).
//! Reports analyses/s of each and the ratio to the baseline.
//!
//! Run: `cargo bench -p kinema-server --bench jobs` (`KINEMA_BENCH_JOBS`, default 200;
//! `KINEMA_BENCH_ONLY=postgres|sqlite`).

use std::time::Instant;

use kinema_server::api::{AppState, Limits};
use kinema_server::jobs::execute::execute;
use kinema_server::jobs::request::AnalysisInput;
use kinema_server::jobs::worker::drain;
use kinema_server::model::{Frame, JobOrigin, NewJob, StoredPoint, Structure, now_utc};
use kinema_server::store::{self, BatchMeta, DynStore, NewReading};
use kinema_server::units::LengthUnit;
use kinema_tests::db::{PgSchema, sqlite_file};

const ID: &str = "J";

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn input() -> AnalysisInput {
    serde_json::from_value(serde_json::json!({
        "kind": "epoch", "epoch": "2026-01-01T00:00:00Z", "method": {"kind": "delaunay"}
    }))
    .expect("request")
}

async fn setup(store: &DynStore, n_points: usize) {
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
    let side = (n_points as f64).sqrt().ceil() as usize;
    // A jittered grid (deterministic), so that the triangulation is not degenerate.
    let pts: Vec<StoredPoint> = (0..n_points)
        .map(|i| {
            let (r, c) = ((i / side) as f64, (i % side) as f64);
            let j = ((i * 7919) % 100) as f64 / 400.0;
            StoredPoint {
                id: format!("P{i:05}"),
                x: vec![c * 5.0 + j, r * 5.0 - j],
                sigma: None,
            }
        })
        .collect();
    store.put_points(ID, &pts).await.expect("points");
    let mut w = store.begin_batch(ID, None).await.expect("begin");
    let keys = w.points();
    let epoch = time::macros::datetime!(2026-01-01 0:00 UTC);
    let rows: Vec<NewReading> = pts
        .iter()
        .map(|p| NewReading {
            point_key: keys[&p.id],
            epoch,
            u: [1e-4 * p.x[0] + 2e-5 * p.x[1], -3e-5 * p.x[1], 0.0],
            sigma: None,
        })
        .collect();
    w.write(&rows).await.expect("write");
    w.commit(BatchMeta {
        received_at: now_utc(),
        media_type: "application/json".into(),
        idempotency_key: None,
        body_sha256: "0".repeat(64),
        jobs: Vec::new(),
    })
    .await
    .expect("commit");
}

/// Analyses/s computed and stored directly.
async fn direct(store: &DynStore, n: usize) -> f64 {
    let req = input();
    let t0 = Instant::now();
    for _ in 0..n {
        let a = execute(store, ID, &req).await.expect("execute");
        store.insert_analysis(&a).await.expect("insert");
    }
    n as f64 / t0.elapsed().as_secs_f64()
}

/// Analyses/s through the queue with `workers` concurrent workers.
async fn queued(state: &AppState, n: usize, workers: usize) -> f64 {
    let request = serde_json::to_value(input()).expect("request");
    let t0 = Instant::now();
    for _ in 0..n {
        state
            .store
            .enqueue_job(&NewJob {
                id: uuid::Uuid::new_v4(),
                structure_id: ID.into(),
                origin: JobOrigin::Request,
                batch_id: None,
                request: request.clone(),
                max_attempts: 3,
                created_at: now_utc(),
            })
            .await
            .expect("enqueue");
    }
    let tasks: Vec<_> = (0..workers)
        .map(|k| {
            let state = state.clone();
            tokio::spawn(async move {
                drain(&state, &format!("bench-{k}"))
                    .await
                    .expect("run the jobs")
            })
        })
        .collect();
    let mut total = 0;
    for t in tasks {
        total += t.await.expect("worker");
    }
    assert_eq!(total, n, "every job ran once");
    n as f64 / t0.elapsed().as_secs_f64()
}

async fn bench(name: &str, store: DynStore, n: usize, n_points: usize) {
    store.migrate().await.expect("migrate");
    setup(&store, n_points).await;
    // Warm up both paths once.
    direct(&store, 2).await;
    let state = AppState::new(store.clone(), Limits::default());
    queued(&state, 2, 1).await;
    let base = direct(&store, n).await;
    let q1 = queued(&state, n, 1).await;
    let q2 = queued(&state, n, 2).await;
    println!(
        "{name:<9} {n} analyses of {n_points} points | direct (compute + insert) {base:>7.1}/s | \
         queued, 1 worker {q1:>7.1}/s (ratio {:.2}) | queued, 2 workers {q2:>7.1}/s (ratio {:.2})",
        q1 / base,
        q2 / base
    );
}

#[tokio::main]
async fn main() {
    let n = env_usize("KINEMA_BENCH_JOBS", 200);
    let n_points = env_usize("KINEMA_BENCH_POINTS", 400);
    let only = std::env::var("KINEMA_BENCH_ONLY").unwrap_or_default();
    if only.is_empty() || only == "postgres" {
        let schema = PgSchema::create("bench_jobs").await;
        let s = store::open(&schema.url).await.expect("open");
        bench("postgres", s, n, n_points).await;
        schema.drop_schema().await;
    }
    if only.is_empty() || only == "sqlite" {
        let (url, _dir) = sqlite_file();
        let s = store::open(&url).await.expect("open");
        bench("sqlite", s, n, n_points).await;
    }
}
