//! Analyses in PostgreSQL.

use sqlx::types::Json;
use sqlx::{PgPool, Postgres, QueryBuilder};
use time::OffsetDateTime;
use uuid::Uuid;

use crate::model::{Analysis, AnalysisQuery};
use crate::store::StoreError;
use crate::store::rows::{AnalysisRow, analysis_columns, analysis_list_columns, check_analysis};

pub(super) async fn insert_analysis(pool: &PgPool, a: &Analysis) -> Result<(), StoreError> {
    check_analysis(a)?;
    let done = sqlx::query(
        "INSERT INTO analyses (id, structure_key, kind, status, method, epoch, baseline_epoch, \
         series_first, series_last, parameters, inputs, software_version, result, error, \
         created_at, duration_ms) \
         SELECT $1, s.key, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15 \
         FROM structures s WHERE s.id = $16",
    )
    .bind(a.id)
    .bind(a.kind.as_str())
    .bind(a.status.as_str())
    .bind(&a.method)
    .bind(a.epoch)
    .bind(a.baseline_epoch)
    .bind(a.series_first)
    .bind(a.series_last)
    .bind(Json(&a.parameters))
    .bind(Json(&a.inputs))
    .bind(&a.software_version)
    .bind(a.result.as_ref().map(Json))
    .bind(&a.error)
    .bind(a.created_at)
    .bind(i64::try_from(a.duration_ms).unwrap_or(i64::MAX))
    .bind(&a.structure_id)
    .execute(pool)
    .await
    .map_err(|e| {
        let e = StoreError::from(e);
        if e.is_unique_violation() {
            StoreError::Conflict(format!("analysis {} exists already", a.id))
        } else {
            e
        }
    })?;
    if done.rows_affected() == 0 {
        return Err(StoreError::NotFound(format!(
            "structure {} does not exist",
            a.structure_id
        )));
    }
    Ok(())
}

pub(super) async fn get_analysis(
    pool: &PgPool,
    structure: &str,
    id: Uuid,
) -> Result<Option<Analysis>, StoreError> {
    sqlx::query_as::<_, AnalysisRow<OffsetDateTime>>(concat!(
        "SELECT ",
        analysis_columns!(),
        " FROM analyses a JOIN structures s ON s.key = a.structure_key \
         WHERE s.id = $1 AND a.id = $2"
    ))
    .bind(structure)
    .bind(id)
    .fetch_optional(pool)
    .await?
    .map(AnalysisRow::into_analysis)
    .transpose()
}

pub(super) async fn list_analyses(
    pool: &PgPool,
    structure: &str,
    q: &AnalysisQuery,
) -> Result<Vec<Analysis>, StoreError> {
    let mut b = QueryBuilder::<Postgres>::new(concat!(
        "SELECT ",
        analysis_list_columns!(),
        " FROM analyses a JOIN structures s ON s.key = a.structure_key WHERE s.id = "
    ));
    b.push_bind(structure.to_owned());
    if let Some(from) = q.from {
        b.push(" AND a.created_at >= ").push_bind(from);
    }
    if let Some(to) = q.to {
        b.push(" AND a.created_at < ").push_bind(to);
    }
    if let Some(st) = q.status {
        b.push(" AND a.status = ").push_bind(st.as_str());
    }
    if let Some((t, id)) = q.after {
        b.push(" AND (a.created_at < ")
            .push_bind(t)
            .push(" OR (a.created_at = ")
            .push_bind(t)
            .push(" AND a.id < ")
            .push_bind(id)
            .push("))");
    }
    b.push(" ORDER BY a.created_at DESC, a.id DESC LIMIT ")
        .push_bind(i64::try_from(q.limit).unwrap_or(i64::MAX));
    b.build_query_as::<AnalysisRow<OffsetDateTime>>()
        .fetch_all(pool)
        .await?
        .into_iter()
        .map(AnalysisRow::into_analysis)
        .collect()
}
