//! API keys in PostgreSQL.

use sqlx::PgPool;
use sqlx::types::Json;
use time::OffsetDateTime;
use uuid::Uuid;

use crate::model::{ApiKey, now_utc};
use crate::store::StoreError;
use crate::store::rows::{KeyRow, key_columns};

pub(super) async fn insert_key(pool: &PgPool, k: &ApiKey) -> Result<(), StoreError> {
    sqlx::query(
        "INSERT INTO api_keys (id, label, prefix, token_sha256, scope, structures, created_at, \
         revoked_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $8)",
    )
    .bind(k.id)
    .bind(&k.label)
    .bind(&k.prefix)
    .bind(&k.token_sha256)
    .bind(k.scope.as_str())
    .bind(k.structures.as_ref().map(Json))
    .bind(k.created_at)
    .bind(k.revoked_at)
    .execute(pool)
    .await?;
    Ok(())
}

pub(super) async fn key_by_hash(
    pool: &PgPool,
    token_sha256: &str,
) -> Result<Option<ApiKey>, StoreError> {
    sqlx::query_as::<_, KeyRow<OffsetDateTime>>(concat!(
        "SELECT ",
        key_columns!(),
        " FROM api_keys WHERE token_sha256 = $1"
    ))
    .bind(token_sha256)
    .fetch_optional(pool)
    .await?
    .map(KeyRow::into_key)
    .transpose()
}

pub(super) async fn list_keys(pool: &PgPool) -> Result<Vec<ApiKey>, StoreError> {
    sqlx::query_as::<_, KeyRow<OffsetDateTime>>(concat!(
        "SELECT ",
        key_columns!(),
        " FROM api_keys ORDER BY created_at, id"
    ))
    .fetch_all(pool)
    .await?
    .into_iter()
    .map(KeyRow::into_key)
    .collect()
}

pub(super) async fn revoke_key(pool: &PgPool, id: Uuid) -> Result<bool, StoreError> {
    let done =
        sqlx::query("UPDATE api_keys SET revoked_at = $1 WHERE id = $2 AND revoked_at IS NULL")
            .bind(now_utc())
            .bind(id)
            .execute(pool)
            .await?;
    Ok(done.rows_affected() == 1)
}
