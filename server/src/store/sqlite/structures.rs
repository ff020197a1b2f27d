//! Structures and monitoring points in SQLite.

use sqlx::types::Json;
use sqlx::{QueryBuilder, Sqlite, SqlitePool};

use super::SqliteStore;
use crate::model::{StoredPoint, Structure};
use crate::store::rows::{
    PointRow, StructureRow, check_point, point_columns, point_values, structure_columns,
};
use crate::store::{PointsWritten, StoreError, Written};

/// The internal key, dimension and point count of structure `id`.
async fn lookup<'e, E>(ex: E, id: &str) -> Result<Option<(i64, i16, i64)>, StoreError>
where
    E: sqlx::Executor<'e, Database = Sqlite>,
{
    Ok(sqlx::query_as(
        "SELECT s.key, s.dimension, (SELECT count(*) FROM points p WHERE p.structure_key = s.key) \
         FROM structures s WHERE s.id = $1",
    )
    .bind(id)
    .fetch_optional(ex)
    .await?)
}

pub(super) async fn put_structure(
    store: &SqliteStore,
    s: &Structure,
) -> Result<(Written, Structure), StoreError> {
    let mut tx = store.write_tx().await?;
    let existing = lookup(&mut *tx, &s.id).await?;
    let written = match existing {
        Some((key, dim, n_points)) => {
            if i16::from(s.dimension) != dim && n_points > 0 {
                return Err(StoreError::Conflict(format!(
                    "structure {} has {n_points} points in {dim}D; its dimension cannot change to {}D",
                    s.id, s.dimension
                )));
            }
            sqlx::query(
                "UPDATE structures SET name = $1, dimension = $2, frame = $3, length_unit = $4, \
                 material = $5, metadata = $6, updated_at = $7 WHERE key = $8",
            )
            .bind(&s.name)
            .bind(i16::from(s.dimension))
            .bind(Json(&s.frame))
            .bind(s.length_unit.label())
            .bind(s.material.as_ref().map(Json))
            .bind(Json(&s.metadata))
            .bind(crate::model::to_unix_micros(s.updated_at))
            .bind(key)
            .execute(&mut *tx)
            .await?;
            Written::Updated
        }
        None => {
            sqlx::query(
                "INSERT INTO structures (id, name, dimension, frame, length_unit, material, \
                 metadata, created_at, updated_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9)",
            )
            .bind(&s.id)
            .bind(&s.name)
            .bind(i16::from(s.dimension))
            .bind(Json(&s.frame))
            .bind(s.length_unit.label())
            .bind(s.material.as_ref().map(Json))
            .bind(Json(&s.metadata))
            .bind(crate::model::to_unix_micros(s.created_at))
            .bind(crate::model::to_unix_micros(s.updated_at))
            .execute(&mut *tx)
            .await?;
            Written::Created
        }
    };
    let stored = get_structure(&mut *tx, &s.id)
        .await?
        .ok_or_else(|| StoreError::corrupt("structure vanished inside its transaction"))?;
    tx.commit().await?;
    Ok((written, stored))
}

pub(super) async fn get_structure<'e, E>(ex: E, id: &str) -> Result<Option<Structure>, StoreError>
where
    E: sqlx::Executor<'e, Database = Sqlite>,
{
    sqlx::query_as::<_, StructureRow<i64>>(concat!(
        "SELECT ",
        structure_columns!(),
        " FROM structures s WHERE s.id = $1"
    ))
    .bind(id)
    .fetch_optional(ex)
    .await?
    .map(StructureRow::into_structure)
    .transpose()
}

pub(super) async fn list_structures(
    pool: &SqlitePool,
    after: Option<&str>,
    limit: usize,
    only: Option<&[String]>,
) -> Result<Vec<Structure>, StoreError> {
    let mut q = QueryBuilder::<Sqlite>::new(concat!(
        "SELECT ",
        structure_columns!(),
        " FROM structures s WHERE 1 = 1"
    ));
    if let Some(after) = after {
        q.push(" AND s.id > ").push_bind(after.to_owned());
    }
    if let Some(only) = only {
        q.push(" AND s.id IN (SELECT value FROM json_each(")
            .push_bind(Json(only.to_vec()))
            .push("))");
    }
    q.push(" ORDER BY s.id LIMIT ")
        .push_bind(i64::try_from(limit).unwrap_or(i64::MAX));
    q.build_query_as::<StructureRow<i64>>()
        .fetch_all(pool)
        .await?
        .into_iter()
        .map(StructureRow::into_structure)
        .collect()
}

pub(super) async fn delete_structure(store: &SqliteStore, id: &str) -> Result<bool, StoreError> {
    let mut tx = store.write_tx().await?;
    let Some((key, _, _)) = lookup(&mut *tx, id).await? else {
        return Ok(false);
    };
    for &sql in DELETE_CHILDREN {
        sqlx::query(sql).bind(key).execute(&mut *tx).await?;
    }
    sqlx::query("DELETE FROM structures WHERE key = $1")
        .bind(key)
        .execute(&mut *tx)
        .await?;
    tx.commit().await?;
    Ok(true)
}

/// Statements that delete a structure's rows in tables without a cascading foreign key
/// (each binds the structure's internal key as `$1`), run before the structure row.
pub(super) const DELETE_CHILDREN: &[&str] = &[
    // Readings have no foreign keys (ingestion speed; see 0002_batches_readings.sql).
    "DELETE FROM readings WHERE structure_key = $1",
];

pub(super) async fn put_points(
    store: &SqliteStore,
    structure: &str,
    points: &[StoredPoint],
) -> Result<PointsWritten, StoreError> {
    let mut tx = store.write_tx().await?;
    let (key, dim, before) = lookup(&mut *tx, structure)
        .await?
        .ok_or_else(|| StoreError::NotFound(format!("structure {structure} does not exist")))?;
    for p in points {
        check_point(p, dim)?;
        let (x, y, z, sx, sy, sz) = point_values(p);
        sqlx::query(
            "INSERT INTO points (structure_key, id, x, y, z, sigma_x, sigma_y, sigma_z) \
             VALUES ($1, $2, $3, $4, $5, $6, $7, $8) \
             ON CONFLICT (structure_key, id) DO UPDATE SET x = excluded.x, y = excluded.y, \
             z = excluded.z, sigma_x = excluded.sigma_x, sigma_y = excluded.sigma_y, \
             sigma_z = excluded.sigma_z",
        )
        .bind(key)
        .bind(&p.id)
        .bind(x)
        .bind(y)
        .bind(z)
        .bind(sx)
        .bind(sy)
        .bind(sz)
        .execute(&mut *tx)
        .await?;
    }
    let (_, _, after) = lookup(&mut *tx, structure)
        .await?
        .ok_or_else(|| StoreError::corrupt("structure vanished inside its transaction"))?;
    tx.commit().await?;
    let created = u64::try_from(after - before).unwrap_or(0);
    Ok(PointsWritten {
        created,
        updated: points.len() as u64 - created,
    })
}

pub(super) async fn list_points(
    pool: &SqlitePool,
    structure: &str,
) -> Result<Vec<StoredPoint>, StoreError> {
    let Some((key, dim, _)) = lookup(pool, structure).await? else {
        return Err(StoreError::NotFound(format!(
            "structure {structure} does not exist"
        )));
    };
    let dim = u8::try_from(dim).map_err(StoreError::corrupt)?;
    sqlx::query_as::<_, PointRow>(concat!(
        "SELECT ",
        point_columns!(),
        " FROM points p WHERE p.structure_key = $1 ORDER BY p.id"
    ))
    .bind(key)
    .fetch_all(pool)
    .await?
    .into_iter()
    .map(|r| r.into_point(dim))
    .collect()
}
