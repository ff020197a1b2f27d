//! Structures, monitoring points and API keys in SQLite (the SQL is shared with
//! PostgreSQL: see `store::shared`).

crate::store::shared::common_sql!(
    store = super::SqliteStore,
    db = sqlx::Sqlite,
    pool = sqlx::SqlitePool,
    time = i64,
    lock = "",
    json_ids = "SELECT value FROM json_each(",
);
