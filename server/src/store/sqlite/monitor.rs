//! Jobs, automatic analysis, alerts and webhooks in SQLite (the SQL is shared with
//! PostgreSQL: see `store::monitor_sql`). One writer at a time: claims are plain
//! updates inside `BEGIN IMMEDIATE`.

crate::store::monitor_sql::monitor_sql!(
    store = super::SqliteStore,
    db = sqlx::Sqlite,
    pool = sqlx::SqlitePool,
    time = i64,
    lock = "",
    skip_locked = "",
);
