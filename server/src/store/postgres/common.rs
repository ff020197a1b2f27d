//! Structures, monitoring points and API keys in PostgreSQL (the SQL is shared with
//! SQLite: see `store::shared`). Writes lock the structure row (`FOR UPDATE`).

crate::store::shared::common_sql!(
    store = super::PgStore,
    db = sqlx::Postgres,
    pool = sqlx::PgPool,
    time = time::OffsetDateTime,
    lock = " FOR UPDATE",
    json_ids = "SELECT jsonb_array_elements_text(",
);
