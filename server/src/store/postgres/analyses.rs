//! Analyses in PostgreSQL (the SQL is shared with SQLite: see `store::shared`).

crate::store::shared::analyses_sql!(
    db = sqlx::Postgres,
    pool = sqlx::PgPool,
    time = time::OffsetDateTime,
);
