//! Analyses in SQLite (the SQL is shared with PostgreSQL: see `store::shared`).

crate::store::shared::analyses_sql!(db = sqlx::Sqlite, pool = sqlx::SqlitePool, time = i64);
