//! The SQL that is the same on both databases, written once: each backend's module
//! expands these macros with its own types (database, pool, how it keeps a time) and
//! the few words of SQL that differ.
//!
//! - `lock`: appended to the structure lookup of a write: `""` for SQLite (its write
//!   transactions are `BEGIN IMMEDIATE` already), `" FOR UPDATE"` for PostgreSQL;
//! - `json_ids`: a subquery head that turns a bound JSON array of strings into rows:
//!   `"SELECT value FROM json_each("` (SQLite), `"SELECT jsonb_array_elements_text("`
//!   (PostgreSQL).
//!
//! Every store type provides `write_tx()`, the transaction a write starts with.

/// Structures, monitoring points and API keys for one backend.
macro_rules! common_sql {
    (
        store = $Store:ty,
        db = $Db:ty,
        pool = $Pool:ty,
        time = $Time:ty,
        lock = $lock:literal,
        json_ids = $json_ids:literal $(,)?
    ) => {
        use sqlx::types::Json;
        use sqlx::QueryBuilder;
        use uuid::Uuid;

        use $crate::model::{ApiKey, StoredPoint, Structure, now_utc};
        use $crate::store::rows::{
            DbTime, KeyRow, PointRow, StructureRow, check_point, key_columns, point_columns,
            point_values, structure_columns,
        };
        use $crate::store::{PointsWritten, StoreError, Written};

        /// The internal key, dimension and point count of structure `id`.
        async fn lookup<'e, E>(ex: E, id: &str) -> Result<Option<(i64, i16, i64)>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            Ok(sqlx::query_as(concat!(
                "SELECT s.key, s.dimension, (SELECT count(*) FROM points p WHERE p.structure_key = s.key) \
                 FROM structures s WHERE s.id = $1",
                $lock
            ))
            .bind(id)
            .fetch_optional(ex)
            .await?)
        }

        pub(super) async fn put_structure(
            store: &$Store,
            s: &Structure,
        ) -> Result<(Written, Structure), StoreError> {
            let mut tx = store.write_tx().await?;
            // A concurrent request may create the same structure between the lookup and
            // the insert (PostgreSQL): the insert then does nothing and the loop updates the
            // row the other request created.
            let mut written = None;
            for _ in 0..2 {
                if let Some((key, dim, n_points)) = lookup(&mut *tx, &s.id).await? {
                    if n_points > 0 {
                        if i16::from(s.dimension) != dim {
                            return Err(StoreError::Conflict(format!(
                                "structure {} has {n_points} points in {dim}D; its dimension cannot change to {}D",
                                s.id, s.dimension
                            )));
                        }
                        let (frame,): (Json<$crate::model::Frame>,) =
                            sqlx::query_as("SELECT frame FROM structures WHERE key = $1")
                                .bind(key)
                                .fetch_one(&mut *tx)
                                .await?;
                        if frame.0 != s.frame {
                            return Err(StoreError::Conflict(format!(
                                "structure {} has {n_points} points in its frame; the frame cannot \
                                 change under them (their coordinates and readings would be \
                                 reinterpreted)",
                                s.id
                            )));
                        }
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
                    .bind(<$Time as DbTime>::from_time(s.updated_at))
                    .bind(key)
                    .execute(&mut *tx)
                    .await?;
                    written = Some(Written::Updated);
                    break;
                }
                let done = sqlx::query(
                    "INSERT INTO structures (id, name, dimension, frame, length_unit, material, \
                     metadata, created_at, updated_at) VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9) \
                     ON CONFLICT (id) DO NOTHING",
                )
                .bind(&s.id)
                .bind(&s.name)
                .bind(i16::from(s.dimension))
                .bind(Json(&s.frame))
                .bind(s.length_unit.label())
                .bind(s.material.as_ref().map(Json))
                .bind(Json(&s.metadata))
                .bind(<$Time as DbTime>::from_time(s.created_at))
                .bind(<$Time as DbTime>::from_time(s.updated_at))
                .execute(&mut *tx)
                .await?;
                if done.rows_affected() == 1 {
                    written = Some(Written::Created);
                    break;
                }
            }
            let written = written.ok_or_else(|| {
                StoreError::Conflict(format!(
                    "structure {} was created and deleted concurrently; retry",
                    s.id
                ))
            })?;
            let stored = get_structure(&mut *tx, &s.id)
                .await?
                .ok_or_else(|| StoreError::corrupt("structure vanished inside its transaction"))?;
            tx.commit().await?;
            Ok((written, stored))
        }

        pub(super) async fn get_structure<'e, E>(ex: E, id: &str) -> Result<Option<Structure>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            sqlx::query_as::<_, StructureRow<$Time>>(concat!(
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
            pool: &$Pool,
            after: Option<&str>,
            limit: usize,
            only: Option<&[String]>,
        ) -> Result<Vec<Structure>, StoreError> {
            let mut q = QueryBuilder::<$Db>::new(concat!(
                "SELECT ",
                structure_columns!(),
                " FROM structures s WHERE 1 = 1"
            ));
            if let Some(after) = after {
                q.push(" AND s.id > ").push_bind(after.to_owned());
            }
            if let Some(only) = only {
                q.push(concat!(" AND s.id IN (", $json_ids))
                    .push_bind(Json(only.to_vec()))
                    .push("))");
            }
            q.push(" ORDER BY s.id LIMIT ")
                .push_bind($crate::store::rows::big(limit));
            q.build_query_as::<StructureRow<$Time>>()
                .fetch_all(pool)
                .await?
                .into_iter()
                .map(StructureRow::into_structure)
                .collect()
        }

        pub(super) async fn delete_structure(store: &$Store, id: &str) -> Result<bool, StoreError> {
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
            store: &$Store,
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
            pool: &$Pool,
            structure: &str,
        ) -> Result<Vec<StoredPoint>, StoreError> {
            let found: Option<(i64, i16)> =
                sqlx::query_as("SELECT s.key, s.dimension FROM structures s WHERE s.id = $1")
                    .bind(structure)
                    .fetch_optional(pool)
                    .await?;
            let Some((key, dim)) = found else {
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

        pub(super) async fn insert_key(pool: &$Pool, k: &ApiKey) -> Result<(), StoreError> {
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
            .bind(<$Time as DbTime>::from_time(k.created_at))
            .bind(k.revoked_at.map(<$Time as DbTime>::from_time))
            .execute(pool)
            .await?;
            Ok(())
        }

        pub(super) async fn key_by_hash(
            pool: &$Pool,
            token_sha256: &str,
        ) -> Result<Option<ApiKey>, StoreError> {
            sqlx::query_as::<_, KeyRow<$Time>>(concat!(
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

        pub(super) async fn list_keys(pool: &$Pool) -> Result<Vec<ApiKey>, StoreError> {
            sqlx::query_as::<_, KeyRow<$Time>>(concat!(
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

        pub(super) async fn revoke_key(pool: &$Pool, id: Uuid) -> Result<bool, StoreError> {
            let done =
                sqlx::query("UPDATE api_keys SET revoked_at = $1 WHERE id = $2 AND revoked_at IS NULL")
                    .bind(<$Time as DbTime>::from_time(now_utc()))
                    .bind(id)
                    .execute(pool)
                    .await?;
            Ok(done.rows_affected() == 1)
        }
    };
}

pub(crate) use common_sql;

/// The `Store` implementation of one backend: every method delegates to the backend's
/// `common`, `batches`, `analyses` and `monitor` modules, which have the same function names and
/// signatures in both backends.
macro_rules! impl_store {
    (store = $Store:ty, backend = $backend:expr, migrations = $migrations:literal $(,)?) => {
        // In a block of its own, so that its imports do not clash with the module's.
        const _: () = {
            use time::OffsetDateTime;
            use uuid::Uuid;
            use $crate::model::{
                AlertEvent, AlertEventQuery, AlertRuleRecord, AlertState, Analysis, AnalysisQuery,
                ApiKey, Batch, Delivery, DeliveryAttempt, DeliveryNext, DeliveryQuery,
                DispatchBatch, EpochSummary, IdempotentBatch, Job, JobOutcome, JobQuery, Lease,
                NewJob, Reading, StoredPoint, Structure, Subscription,
            };
            use $crate::store::{
                Backend, BatchWriter, Completed, Evaluator, PointsWritten, StoreError, Written,
            };

            #[async_trait::async_trait]
            impl $crate::store::Store for $Store {
                fn backend(&self) -> Backend {
                    $backend
                }

                async fn migrate(&self) -> Result<(), StoreError> {
                    sqlx::migrate!($migrations).run(&self.pool).await?;
                    Ok(())
                }

                async fn ping(&self) -> Result<(), StoreError> {
                    sqlx::query("SELECT 1").execute(&self.pool).await?;
                    Ok(())
                }

                async fn put_structure(
                    &self,
                    s: &Structure,
                ) -> Result<(Written, Structure), StoreError> {
                    common::put_structure(self, s).await
                }

                async fn get_structure(&self, id: &str) -> Result<Option<Structure>, StoreError> {
                    common::get_structure(&self.pool, id).await
                }

                async fn list_structures(
                    &self,
                    after: Option<&str>,
                    limit: usize,
                    only: Option<&[String]>,
                ) -> Result<Vec<Structure>, StoreError> {
                    common::list_structures(&self.pool, after, limit, only).await
                }

                async fn delete_structure(&self, id: &str) -> Result<bool, StoreError> {
                    common::delete_structure(self, id).await
                }

                async fn put_points(
                    &self,
                    structure: &str,
                    points: &[StoredPoint],
                ) -> Result<PointsWritten, StoreError> {
                    common::put_points(self, structure, points).await
                }

                async fn list_points(
                    &self,
                    structure: &str,
                ) -> Result<Vec<StoredPoint>, StoreError> {
                    common::list_points(&self.pool, structure).await
                }

                async fn insert_key(&self, key: &ApiKey) -> Result<(), StoreError> {
                    common::insert_key(&self.pool, key).await
                }

                async fn key_by_hash(
                    &self,
                    token_sha256: &str,
                ) -> Result<Option<ApiKey>, StoreError> {
                    common::key_by_hash(&self.pool, token_sha256).await
                }

                async fn list_keys(&self) -> Result<Vec<ApiKey>, StoreError> {
                    common::list_keys(&self.pool).await
                }

                async fn revoke_key(&self, id: Uuid) -> Result<bool, StoreError> {
                    common::revoke_key(&self.pool, id).await
                }

                async fn begin_batch(
                    &self,
                    structure: &str,
                    idempotency_key: Option<&str>,
                ) -> Result<Box<dyn BatchWriter>, StoreError> {
                    batches::begin_batch(self, structure, idempotency_key).await
                }

                async fn get_batch(
                    &self,
                    structure: &str,
                    id: Uuid,
                ) -> Result<Option<Batch>, StoreError> {
                    batches::get_batch(&self.pool, structure, id).await
                }

                async fn list_batches(
                    &self,
                    structure: &str,
                    after: Option<(OffsetDateTime, Uuid)>,
                    limit: usize,
                ) -> Result<Vec<Batch>, StoreError> {
                    batches::list_batches(&self.pool, structure, after, limit).await
                }

                async fn batch_by_idempotency_key(
                    &self,
                    structure: &str,
                    key: &str,
                ) -> Result<Option<IdempotentBatch>, StoreError> {
                    batches::batch_by_idempotency_key(&self.pool, structure, key).await
                }

                async fn list_epochs(
                    &self,
                    structure: &str,
                    from: Option<OffsetDateTime>,
                    to: Option<OffsetDateTime>,
                ) -> Result<Vec<EpochSummary>, StoreError> {
                    batches::list_epochs(&self.pool, structure, from, to).await
                }

                async fn first_epoch(
                    &self,
                    structure: &str,
                ) -> Result<Option<OffsetDateTime>, StoreError> {
                    batches::first_epoch(&self.pool, structure).await
                }

                async fn epoch_before(
                    &self,
                    structure: &str,
                    before: OffsetDateTime,
                ) -> Result<Option<OffsetDateTime>, StoreError> {
                    batches::epoch_before(&self.pool, structure, before).await
                }

                async fn readings_at(
                    &self,
                    structure: &str,
                    epoch: OffsetDateTime,
                ) -> Result<Vec<Reading>, StoreError> {
                    batches::readings_at(&self.pool, structure, epoch).await
                }

                async fn insert_analysis(&self, a: &Analysis) -> Result<(), StoreError> {
                    analyses::insert_analysis(&self.pool, a).await
                }

                async fn get_analysis(
                    &self,
                    structure: &str,
                    id: Uuid,
                ) -> Result<Option<Analysis>, StoreError> {
                    analyses::get_analysis(&self.pool, structure, id).await
                }

                async fn list_analyses(
                    &self,
                    structure: &str,
                    q: &AnalysisQuery,
                ) -> Result<Vec<Analysis>, StoreError> {
                    analyses::list_analyses(&self.pool, structure, q).await
                }

                async fn enqueue_job(&self, job: &NewJob) -> Result<Job, StoreError> {
                    monitor::enqueue_job(self, job).await
                }

                async fn get_job(&self, id: Uuid) -> Result<Option<Job>, StoreError> {
                    monitor::get_job(&self.pool, id).await
                }

                async fn list_jobs(
                    &self,
                    structure: &str,
                    q: &JobQuery,
                ) -> Result<Vec<Job>, StoreError> {
                    monitor::list_jobs(&self.pool, structure, q).await
                }

                async fn claim_job(
                    &self,
                    worker: &str,
                    now: OffsetDateTime,
                    lease_until: OffsetDateTime,
                ) -> Result<Option<(Job, Lease)>, StoreError> {
                    monitor::claim_job(self, worker, now, lease_until).await
                }

                async fn renew_lease(
                    &self,
                    lease: &Lease,
                    lease_until: OffsetDateTime,
                ) -> Result<(), StoreError> {
                    monitor::renew_lease(self, lease, lease_until).await
                }

                async fn complete_job(
                    &self,
                    lease: &Lease,
                    outcome: &JobOutcome,
                    evaluate: &Evaluator,
                    now: OffsetDateTime,
                ) -> Result<Completed, StoreError> {
                    monitor::complete_job(self, lease, outcome, evaluate, now).await
                }

                async fn put_auto_analysis(
                    &self,
                    structure: &str,
                    config: Option<&serde_json::Value>,
                ) -> Result<(), StoreError> {
                    monitor::put_auto_analysis(self, structure, config).await
                }

                async fn get_auto_analysis(
                    &self,
                    structure: &str,
                ) -> Result<Option<serde_json::Value>, StoreError> {
                    monitor::get_auto_analysis(&self.pool, structure).await
                }

                async fn put_alert_rule(&self, r: &AlertRuleRecord) -> Result<Written, StoreError> {
                    monitor::put_alert_rule(self, r).await
                }

                async fn get_alert_rule(
                    &self,
                    structure: &str,
                    id: Uuid,
                ) -> Result<Option<AlertRuleRecord>, StoreError> {
                    monitor::get_alert_rule(&self.pool, structure, id).await
                }

                async fn list_alert_rules(
                    &self,
                    structure: &str,
                ) -> Result<Vec<AlertRuleRecord>, StoreError> {
                    monitor::list_alert_rules(&self.pool, structure).await
                }

                async fn delete_alert_rule(
                    &self,
                    structure: &str,
                    id: Uuid,
                ) -> Result<bool, StoreError> {
                    monitor::delete_alert_rule(self, structure, id).await
                }

                async fn list_alert_states(
                    &self,
                    structure: &str,
                ) -> Result<Vec<AlertState>, StoreError> {
                    monitor::list_alert_states(&self.pool, structure).await
                }

                async fn list_alert_events(
                    &self,
                    structure: &str,
                    q: &AlertEventQuery,
                ) -> Result<Vec<AlertEvent>, StoreError> {
                    monitor::list_alert_events(&self.pool, structure, q).await
                }

                async fn insert_subscription(&self, s: &Subscription) -> Result<(), StoreError> {
                    monitor::insert_subscription(self, s).await
                }

                async fn get_subscription(
                    &self,
                    id: Uuid,
                ) -> Result<Option<Subscription>, StoreError> {
                    monitor::get_subscription(&self.pool, id).await
                }

                async fn list_subscriptions(
                    &self,
                    structure: Option<&str>,
                ) -> Result<Vec<Subscription>, StoreError> {
                    monitor::list_subscriptions(&self.pool, structure).await
                }

                async fn delete_subscription(&self, id: Uuid) -> Result<bool, StoreError> {
                    monitor::delete_subscription(self, id).await
                }

                async fn list_deliveries(
                    &self,
                    subscription: Uuid,
                    q: &DeliveryQuery,
                ) -> Result<Vec<Delivery>, StoreError> {
                    monitor::list_deliveries(&self.pool, subscription, q).await
                }

                async fn get_delivery(
                    &self,
                    subscription: Uuid,
                    id: Uuid,
                ) -> Result<Option<(Delivery, Vec<DeliveryAttempt>)>, StoreError> {
                    monitor::get_delivery(&self.pool, subscription, id).await
                }

                async fn replay_delivery(
                    &self,
                    subscription: Uuid,
                    id: Uuid,
                    now: OffsetDateTime,
                ) -> Result<Option<Delivery>, StoreError> {
                    monitor::replay_delivery(self, subscription, id, now).await
                }

                async fn claim_dispatch(
                    &self,
                    worker: &str,
                    now: OffsetDateTime,
                    lease_until: OffsetDateTime,
                    max: usize,
                ) -> Result<Option<DispatchBatch>, StoreError> {
                    monitor::claim_dispatch(self, worker, now, lease_until, max).await
                }

                async fn record_attempt(
                    &self,
                    worker: &str,
                    attempt: &DeliveryAttempt,
                    next: DeliveryNext,
                ) -> Result<(), StoreError> {
                    monitor::record_attempt(self, worker, attempt, next).await
                }

                async fn release_dispatch(
                    &self,
                    worker: &str,
                    subscription: Uuid,
                ) -> Result<(), StoreError> {
                    monitor::release_dispatch(self, worker, subscription).await
                }
            }
        };
    };
}

pub(crate) use impl_store;

/// Analyses for one backend (the same SQL on both; times in the backend's form).
macro_rules! analyses_sql {
    (db = $Db:ty, pool = $Pool:ty, time = $Time:ty $(,)?) => {
        use sqlx::QueryBuilder;
        use sqlx::types::Json;
        use uuid::Uuid;

        use $crate::model::{Analysis, AnalysisQuery};
        use $crate::store::StoreError;
        use $crate::store::rows::{
            AnalysisRow, DbTime, analysis_columns, analysis_list_columns, check_analysis,
        };

        /// Store analysis `a` through `ex` (the pool, or an open transaction such as
        /// `complete_job`'s).
        pub(super) async fn insert_analysis<'e, E>(ex: E, a: &Analysis) -> Result<(), StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
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
            .bind(a.epoch.map(<$Time as DbTime>::from_time))
            .bind(a.baseline_epoch.map(<$Time as DbTime>::from_time))
            .bind(a.series_first.map(<$Time as DbTime>::from_time))
            .bind(a.series_last.map(<$Time as DbTime>::from_time))
            .bind(Json(&a.parameters))
            .bind(Json(&a.inputs))
            .bind(&a.software_version)
            .bind(a.result.as_ref().map(Json))
            .bind(&a.error)
            .bind(<$Time as DbTime>::from_time(a.created_at))
            .bind($crate::store::rows::big(a.duration_ms))
            .bind(&a.structure_id)
            .execute(ex)
            .await
            .map_err(|e| {
                StoreError::unique_as_conflict(e, || format!("analysis {} exists already", a.id))
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
            pool: &$Pool,
            structure: &str,
            id: Uuid,
        ) -> Result<Option<Analysis>, StoreError> {
            sqlx::query_as::<_, AnalysisRow<$Time>>(concat!(
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
            pool: &$Pool,
            structure: &str,
            q: &AnalysisQuery,
        ) -> Result<Vec<Analysis>, StoreError> {
            let mut b = QueryBuilder::<$Db>::new(concat!(
                "SELECT ",
                analysis_list_columns!(),
                " FROM analyses a JOIN structures s ON s.key = a.structure_key WHERE s.id = "
            ));
            b.push_bind(structure.to_owned());
            if let Some(from) = q.from {
                b.push(" AND a.created_at >= ")
                    .push_bind(<$Time as DbTime>::from_time(from));
            }
            if let Some(to) = q.to {
                b.push(" AND a.created_at < ").push_bind(<$Time as DbTime>::from_time(to));
            }
            if let Some(st) = q.status {
                b.push(" AND a.status = ").push_bind(st.as_str());
            }
            if let Some((t, id)) = q.after {
                let t = <$Time as DbTime>::from_time(t);
                b.push(" AND (a.created_at < ")
                    .push_bind(t)
                    .push(" OR (a.created_at = ")
                    .push_bind(t)
                    .push(" AND a.id < ")
                    .push_bind(id)
                    .push("))");
            }
            b.push(" ORDER BY a.created_at DESC, a.id DESC LIMIT ")
                .push_bind($crate::store::rows::big(q.limit));
            b.build_query_as::<AnalysisRow<$Time>>()
                .fetch_all(pool)
                .await?
                .into_iter()
                .map(AnalysisRow::into_analysis)
                .collect()
        }
    };
}

pub(crate) use analyses_sql;

/// The reads of stored batches and readings for one backend. `id_order` makes point IDs
/// sort by their bytes: `""` in SQLite (BINARY is its default), `" COLLATE \"C\""` in
/// PostgreSQL (whose default collation follows the locale).
macro_rules! batch_reads_sql {
    (pool = $Pool:ty, time = $Time:ty, id_order = $id_order:literal $(,)?) => {
        /// One epoch bound over the readings' primary key (structure_key, epoch, …):
        /// an indexed lookup, not a scan. `sql` selects `MIN`/`MAX(r.epoch)` with `$1` the
        /// structure ID and `$2` (if used) a time.
        async fn epoch_bound(
            pool: &$Pool,
            sql: &'static str,
            structure: &str,
            t: Option<OffsetDateTime>,
        ) -> Result<Option<OffsetDateTime>, StoreError> {
            use $crate::store::rows::DbTime;
            let mut q = sqlx::query_as::<_, (Option<$Time>,)>(sql).bind(structure);
            if let Some(t) = t {
                q = q.bind(<$Time as DbTime>::from_time(t));
            }
            let (found,) = q.fetch_one(pool).await?;
            found.map(DbTime::into_time).transpose()
        }

        pub(super) async fn first_epoch(
            pool: &$Pool,
            structure: &str,
        ) -> Result<Option<OffsetDateTime>, StoreError> {
            epoch_bound(
                pool,
                "SELECT MIN(r.epoch) FROM readings r JOIN structures s ON s.key = r.structure_key \
                 WHERE s.id = $1",
                structure,
                None,
            )
            .await
        }

        pub(super) async fn epoch_before(
            pool: &$Pool,
            structure: &str,
            before: OffsetDateTime,
        ) -> Result<Option<OffsetDateTime>, StoreError> {
            epoch_bound(
                pool,
                "SELECT MAX(r.epoch) FROM readings r JOIN structures s ON s.key = r.structure_key \
                 WHERE s.id = $1 AND r.epoch < $2",
                structure,
                Some(before),
            )
            .await
        }

        pub(super) async fn get_batch(
            pool: &$Pool,
            structure: &str,
            id: Uuid,
        ) -> Result<Option<Batch>, StoreError> {
            sqlx::query_as::<_, BatchRow<$Time>>(concat!(
                "SELECT ",
                batch_columns!(),
                " FROM batches b JOIN structures s ON s.key = b.structure_key \
                 WHERE s.id = $1 AND b.id = $2"
            ))
            .bind(structure)
            .bind(id)
            .fetch_optional(pool)
            .await?
            .map(BatchRow::into_batch)
            .transpose()
        }

        pub(super) async fn batch_by_idempotency_key(
            pool: &$Pool,
            structure: &str,
            key: &str,
        ) -> Result<Option<IdempotentBatch>, StoreError> {
            sqlx::query_as::<_, IdempotentRow<$Time>>(concat!(
                "SELECT ",
                batch_columns!(),
                ", b.body_sha256, b.response FROM batches b JOIN structures s ON s.key = b.structure_key \
                 WHERE s.id = $1 AND b.idempotency_key = $2"
            ))
            .bind(structure)
            .bind(key)
            .fetch_optional(pool)
            .await?
            .map(IdempotentRow::into_idempotent)
            .transpose()
        }

        pub(super) async fn readings_at(
            pool: &$Pool,
            structure: &str,
            epoch: OffsetDateTime,
        ) -> Result<Vec<Reading>, StoreError> {
            let dim: Option<(i16,)> = sqlx::query_as("SELECT dimension FROM structures WHERE id = $1")
                .bind(structure)
                .fetch_optional(pool)
                .await?;
            let Some((dim,)) = dim else {
                return Ok(Vec::new());
            };
            let dim = u8::try_from(dim).map_err(StoreError::corrupt)?;
            sqlx::query_as::<_, ReadingRow<$Time>>(concat!(
                "SELECT ",
                reading_columns!(),
                " FROM readings r JOIN structures s ON s.key = r.structure_key \
                 JOIN points p ON p.key = r.point_key \
                 WHERE s.id = $1 AND r.epoch = $2 ORDER BY p.id",
                $id_order
            ))
            .bind(structure)
            .bind(<$Time as $crate::store::rows::DbTime>::from_time(epoch))
            .fetch_all(pool)
            .await?
            .into_iter()
            .map(|r| r.into_reading(dim))
            .collect()
        }
    };
}

pub(crate) use batch_reads_sql;
