//! Jobs, automatic analysis, alerts and webhooks in PostgreSQL (the SQL is shared with
//! SQLite: see `store::monitor_sql`).

crate::store::monitor_sql::monitor_sql!(
    store = super::PgStore,
    db = sqlx::Postgres,
    pool = sqlx::PgPool,
    time = time::OffsetDateTime,
    lock = " FOR UPDATE",
    skip_locked = " FOR UPDATE SKIP LOCKED",
);
