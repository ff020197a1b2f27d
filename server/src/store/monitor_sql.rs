//! The SQL of the monitoring loop (jobs, automatic analysis, alerts, webhooks), the
//! same on both databases, written once like `store::shared`.
//!
//! - `lock`: `""` (SQLite) or `" FOR UPDATE"` (PostgreSQL);
//! - `skip_locked`: `""` (SQLite, one writer at a time) or `" FOR UPDATE SKIP LOCKED"`.
//!
//! Locking queries read one table only, so that a lock on a job or a subscription never
//! takes the structure row with it (batch writers hold that row `FOR SHARE`). The
//! structure row is locked on its own where the trait says so (`complete_job`).
//!
//! Events are written with their deliveries in the transaction that causes them (the
//! outbox): one delivery per subscription of the event's structure or of every
//! structure whose event types contain the event's type.

/// The oldest claimable job (`$1` = now): queued and due, or running with an expired
/// lease; jobs queued by batches one at a time per structure, in the order they were
/// queued. One text for the plain probe and the locking claim.
macro_rules! claimable_job {
    () => {
        "SELECT j.id FROM jobs j WHERE ((j.status = 'queued' AND j.run_after <= $1) \
         OR (j.status = 'running' AND j.lease_expires_at < $1)) \
         AND (j.origin <> 'batch' OR NOT EXISTS (SELECT 1 FROM jobs o \
              WHERE o.structure_key = j.structure_key AND o.origin = 'batch' \
              AND o.status IN ('queued', 'running') \
              AND (o.created_at < j.created_at \
                   OR (o.created_at = j.created_at AND o.id < j.id)))) \
         ORDER BY j.run_after, j.created_at, j.id LIMIT 1"
    };
}

/// The subscription with the oldest due pending head and no live claim (`$1` = now).
/// One text for the plain probe and the locking claim.
macro_rules! dispatchable_subscription {
    () => {
        "SELECT w.id FROM webhook_subscriptions w \
         WHERE (w.dispatch_until IS NULL OR w.dispatch_until < $1) \
         AND (SELECT h.next_attempt_at FROM deliveries h WHERE h.subscription_id = w.id \
              AND h.status = 'pending' ORDER BY h.seq LIMIT 1) <= $1 \
         ORDER BY (SELECT h.seq FROM deliveries h WHERE h.subscription_id = w.id \
              AND h.status = 'pending' ORDER BY h.seq LIMIT 1) LIMIT 1"
    };
}

pub(crate) use {claimable_job, dispatchable_subscription};

/// Jobs, automatic analysis, alerts and webhooks for one backend.
macro_rules! monitor_sql {
    (
        store = $Store:ty,
        db = $Db:ty,
        pool = $Pool:ty,
        time = $Time:ty,
        lock = $lock:literal,
        skip_locked = $skip_locked:literal $(,)?
    ) => {
        use sqlx::QueryBuilder;
        use sqlx::types::Json;
        use time::OffsetDateTime;
        use uuid::Uuid;

        use $crate::model::{
            AlertEvent, AlertEventQuery, AlertRuleRecord, AlertState, AnalysisStatus, Delivery,
            DeliveryAttempt, DeliveryNext, DeliveryQuery, DispatchBatch, Evaluation, EventType, Job,
            JobAttemptError, JobOutcome, JobQuery, JobStatus, Lease, NewAlertEvent, NewEvent,
            NewJob, Subscription, now_utc,
        };
        use $crate::store::monitor_rows::{
            AlertEventRow, AlertRuleRow, AlertStateRow, AttemptRow, DeliveryRow, DispatchRow,
            JobRow, SubscriptionRow, alert_event_columns, alert_rule_columns,
            alert_state_columns, delivery_columns, dispatch_columns, int, job_columns,
            subscription_columns,
        };
        use $crate::store::rows::{DbTime, StructureRow, structure_columns};
        use $crate::store::{Completed, Evaluator, StoreError, Written};

        /// The connection of an open transaction.
        type Conn = <$Db as sqlx::Database>::Connection;

        /// How many exhausted jobs one claim fails (each in its own transaction) before
        /// it gives up for this call.
        const CLAIM_ROUNDS: usize = 32;

        /// A time as this database keeps it.
        fn db_time(t: OffsetDateTime) -> $Time {
            <$Time as DbTime>::from_time(t)
        }

        use $crate::store::rows::big as limit;

        /// The internal key of structure `id`, or [`StoreError::NotFound`].
        async fn structure_key(c: &mut Conn, id: &str) -> Result<i64, StoreError> {
            let found: Option<(i64,)> = sqlx::query_as("SELECT key FROM structures WHERE id = $1")
                .bind(id)
                .fetch_optional(&mut *c)
                .await?;
            found
                .map(|(k,)| k)
                .ok_or_else(|| StoreError::NotFound(format!("structure {id} does not exist")))
        }

        // ---------------------------------------------------------------- jobs

        /// Queue `jobs` of the structure with internal key `key` and asset ID `structure`
        /// (the batch writers call this inside their transaction).
        pub(super) async fn insert_jobs(
            c: &mut Conn,
            key: i64,
            structure: &str,
            jobs: &[NewJob],
        ) -> Result<(), StoreError> {
            for j in jobs {
                if j.structure_id != structure || j.max_attempts == 0 {
                    return Err(StoreError::Invalid(format!(
                        "job {} (structure {}, max_attempts {}) does not fit structure {structure} \
                         with at least one attempt",
                        j.id, j.structure_id, j.max_attempts
                    )));
                }
                sqlx::query(
                    "INSERT INTO jobs (id, structure_key, status, origin, batch_id, request, \
                     attempts, max_attempts, run_after, errors, created_at) \
                     VALUES ($1, $2, 'queued', $3, $4, $5, 0, $6, $7, $8, $7)",
                )
                .bind(j.id)
                .bind(key)
                .bind(j.origin.as_str())
                .bind(j.batch_id)
                .bind(Json(&j.request))
                .bind(int(j.max_attempts))
                .bind(db_time(j.created_at))
                .bind(Json(Vec::<JobAttemptError>::new()))
                .execute(&mut *c)
                .await
                .map_err(|e| StoreError::unique_as_conflict(e, || format!("job {} exists already", j.id)))?;
            }
            Ok(())
        }

        async fn load_job<'e, E>(ex: E, id: Uuid) -> Result<Option<Job>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            sqlx::query_as::<_, JobRow<$Time>>(concat!(
                "SELECT ",
                job_columns!(),
                " FROM jobs j JOIN structures s ON s.key = j.structure_key WHERE j.id = $1"
            ))
            .bind(id)
            .fetch_optional(ex)
            .await?
            .map(JobRow::into_job)
            .transpose()
        }

        /// A job that must exist (it was just written or locked in this transaction).
        async fn reload_job(c: &mut Conn, id: Uuid) -> Result<Job, StoreError> {
            load_job(&mut *c, id).await?.ok_or_else(|| {
                StoreError::corrupt(format!("job {id} vanished inside its transaction"))
            })
        }

        pub(super) async fn enqueue_job(store: &$Store, job: &NewJob) -> Result<Job, StoreError> {
            let mut tx = store.write_tx().await?;
            let key = structure_key(&mut tx, &job.structure_id).await?;
            insert_jobs(&mut tx, key, &job.structure_id, std::slice::from_ref(job)).await?;
            let stored = reload_job(&mut tx, job.id).await?;
            tx.commit().await?;
            Ok(stored)
        }

        pub(super) async fn get_job(pool: &$Pool, id: Uuid) -> Result<Option<Job>, StoreError> {
            load_job(pool, id).await
        }

        pub(super) async fn list_jobs(
            pool: &$Pool,
            structure: &str,
            q: &JobQuery,
        ) -> Result<Vec<Job>, StoreError> {
            let mut b = QueryBuilder::<$Db>::new(concat!(
                "SELECT ",
                job_columns!(),
                " FROM jobs j JOIN structures s ON s.key = j.structure_key WHERE s.id = "
            ));
            b.push_bind(structure.to_owned());
            if let Some(st) = q.status {
                b.push(" AND j.status = ").push_bind(st.as_str());
            }
            if let Some((t, id)) = q.after {
                let t = db_time(t);
                b.push(" AND (j.created_at < ")
                    .push_bind(t)
                    .push(" OR (j.created_at = ")
                    .push_bind(t)
                    .push(" AND j.id < ")
                    .push_bind(id)
                    .push("))");
            }
            b.push(" ORDER BY j.created_at DESC, j.id DESC LIMIT ")
                .push_bind(limit(q.limit));
            b.build_query_as::<JobRow<$Time>>()
                .fetch_all(pool)
                .await?
                .into_iter()
                .map(JobRow::into_job)
                .collect()
        }

        /// The oldest claimable job, locked (PostgreSQL skips jobs other claims hold).
        /// Jobs queued by batches run one at a time per structure, in the order they
        /// were queued (`created_at`, then ID), so that the alert states of a structure
        /// follow its epochs in order; requested analyses run in any order.
        /// `locked`: in a write transaction, locking the row (PostgreSQL skips rows
        /// other claims hold); else a plain read (the idle poll's probe).
        async fn next_claimable<'e, E>(
            ex: E,
            now: OffsetDateTime,
            locked: bool,
        ) -> Result<Option<Uuid>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            let sql = if locked {
                concat!($crate::store::monitor_sql::claimable_job!(), $skip_locked)
            } else {
                $crate::store::monitor_sql::claimable_job!()
            };
            let found: Option<(Uuid,)> = sqlx::query_as(sql)
                .bind(db_time(now))
                .fetch_optional(ex)
                .await?;
            Ok(found.map(|(id,)| id))
        }

        /// Write a job's errors.
        async fn set_errors(c: &mut Conn, job: &Job) -> Result<(), StoreError> {
            sqlx::query("UPDATE jobs SET errors = $1 WHERE id = $2")
                .bind(Json(&job.errors))
                .bind(job.id)
                .execute(&mut *c)
                .await?;
            Ok(())
        }

        /// Fail a job that has used all its attempts (its errors as in `job`), with an
        /// `analysis.failed` event; returns the job as stored and how many deliveries
        /// were queued.
        async fn exhaust(
            c: &mut Conn,
            key: i64,
            job: &Job,
            now: OffsetDateTime,
        ) -> Result<(Job, u64), StoreError> {
            set_errors(c, job).await?;
            sqlx::query(
                "UPDATE jobs SET status = 'failed', finished_at = $1, lease_expires_at = NULL \
                 WHERE id = $2",
            )
            .bind(db_time(now))
            .bind(job.id)
            .execute(&mut *c)
            .await?;
            let failed = reload_job(c, job.id).await?;
            let event = NewEvent::for_exhausted_job(&failed, now);
            let deliveries = record_events(c, key, &[event], now).await?;
            Ok((failed, deliveries))
        }

        /// Start an attempt of a claimable job for `worker`.
        async fn start_attempt(
            c: &mut Conn,
            job: &Job,
            worker: &str,
            now: OffsetDateTime,
            lease_until: OffsetDateTime,
        ) -> Result<(Job, Lease), StoreError> {
            let attempt = job.attempts + 1;
            sqlx::query(
                "UPDATE jobs SET status = 'running', attempts = $1, worker = $2, \
                 lease_expires_at = $3, started_at = COALESCE(started_at, $4), errors = $5 \
                 WHERE id = $6",
            )
            .bind(int(attempt))
            .bind(worker)
            .bind(db_time(lease_until))
            .bind(db_time(now))
            .bind(Json(&job.errors))
            .bind(job.id)
            .execute(&mut *c)
            .await?;
            let lease = Lease {
                job_id: job.id,
                worker: worker.to_owned(),
                attempt,
            };
            Ok((reload_job(c, job.id).await?, lease))
        }

        pub(super) async fn claim_job(
            store: &$Store,
            worker: &str,
            now: OffsetDateTime,
            lease_until: OffsetDateTime,
        ) -> Result<Option<(Job, Lease)>, StoreError> {
            // A plain read first: an idle worker's poll opens no write transaction (on
            // SQLite that would take the one write lock from batch writers).
            if next_claimable(&store.pool, now, false).await?.is_none() {
                return Ok(None);
            }
            for _ in 0..CLAIM_ROUNDS {
                let mut tx = store.write_tx().await?;
                let Some(id) = next_claimable(&mut *tx, now, true).await? else {
                    // Ended here: a dropped transaction is rolled back in the background,
                    // keeping its locks a moment longer.
                    tx.rollback().await?;
                    return Ok(None);
                };
                let mut job = reload_job(&mut tx, id).await?;
                if job.status == JobStatus::Running {
                    job.errors.push(JobAttemptError {
                        attempt: job.attempts,
                        at: now,
                        worker: job.worker.clone().unwrap_or_default(),
                        error: "lease expired".into(),
                    });
                }
                if job.attempts >= job.max_attempts {
                    let key = structure_key(&mut tx, &job.structure_id).await?;
                    exhaust(&mut tx, key, &job, now).await?;
                    tx.commit().await?;
                    continue;
                }
                let claimed = start_attempt(&mut tx, &job, worker, now, lease_until).await?;
                tx.commit().await?;
                return Ok(Some(claimed));
            }
            Ok(None)
        }

        /// The conflict of a lease that is not current.
        fn stale(lease: &Lease) -> StoreError {
            StoreError::Conflict(format!(
                "the lease of worker {} on attempt {} of job {} is not current: the job was \
                 claimed again or has ended",
                lease.worker, lease.attempt, lease.job_id
            ))
        }

        pub(super) async fn renew_lease(
            store: &$Store,
            lease: &Lease,
            lease_until: OffsetDateTime,
        ) -> Result<(), StoreError> {
            let done = sqlx::query(
                "UPDATE jobs SET lease_expires_at = $1 WHERE id = $2 AND status = 'running' \
                 AND worker = $3 AND attempts = $4",
            )
            .bind(db_time(lease_until))
            .bind(lease.job_id)
            .bind(&lease.worker)
            .bind(int(lease.attempt))
            .execute(&store.pool)
            .await?;
            if done.rows_affected() == 1 { Ok(()) } else { Err(stale(lease)) }
        }

        /// The job of a current lease, locked; [`StoreError::Conflict`] otherwise.
        async fn leased_job(c: &mut Conn, lease: &Lease) -> Result<Job, StoreError> {
            let found: Option<(Uuid,)> = sqlx::query_as(concat!(
                "SELECT id FROM jobs WHERE id = $1 AND status = 'running' AND worker = $2 \
                 AND attempts = $3",
                $lock
            ))
            .bind(lease.job_id)
            .bind(&lease.worker)
            .bind(int(lease.attempt))
            .fetch_optional(&mut *c)
            .await?;
            match found {
                Some(_) => reload_job(c, lease.job_id).await,
                None => Err(stale(lease)),
            }
        }

        pub(super) async fn complete_job(
            store: &$Store,
            lease: &Lease,
            outcome: &JobOutcome,
            evaluate: &Evaluator,
            now: OffsetDateTime,
        ) -> Result<Completed, StoreError> {
            let mut tx = store.write_tx().await?;
            // Lock order: the structure row before the job row, as `delete_structure`
            // (whose cascade reaches the job) takes them; the other order could deadlock.
            let owner: Option<(i64,)> =
                sqlx::query_as("SELECT structure_key FROM jobs WHERE id = $1")
                    .bind(lease.job_id)
                    .fetch_optional(&mut *tx)
                    .await?;
            let Some((key,)) = owner else {
                return Err(stale(lease));
            };
            let r = end_attempt(&mut tx, key, lease, outcome, evaluate, now).await;
            settle(tx, r).await
        }

        async fn end_attempt(
            tx: &mut Conn,
            key: i64,
            lease: &Lease,
            outcome: &JobOutcome,
            evaluate: &Evaluator,
            now: OffsetDateTime,
        ) -> Result<Completed, StoreError> {
            let structure = locked_structure(tx, key).await?;
            let job = leased_job(tx, lease).await?;
            match outcome {
                JobOutcome::Analysis(a) => {
                    store_result(tx, key, &structure, &job, a, evaluate, now).await
                }
                JobOutcome::Error { error, retry_at } => {
                    fail_attempt(tx, key, job, lease, error, *retry_at, now).await
                }
            }
        }

        /// Commit when `r` is `Ok`, and roll back at once otherwise: a dropped sqlx
        /// transaction is rolled back in the background, and keeps its row locks (which
        /// `SKIP LOCKED` claims then skip) until then (seen as a flaky claim in tests).
        async fn settle<T>(
            tx: sqlx::Transaction<'static, $Db>,
            r: Result<T, StoreError>,
        ) -> Result<T, StoreError> {
            match r {
                Ok(v) => {
                    tx.commit().await?;
                    Ok(v)
                }
                Err(e) => {
                    let _ = tx.rollback().await;
                    Err(e)
                }
            }
        }

        /// Record a failed attempt: queue the job again, or fail it when it has used all
        /// its attempts.
        async fn fail_attempt(
            c: &mut Conn,
            key: i64,
            mut job: Job,
            lease: &Lease,
            error: &str,
            retry_at: OffsetDateTime,
            now: OffsetDateTime,
        ) -> Result<Completed, StoreError> {
            job.errors.push(JobAttemptError {
                attempt: lease.attempt,
                at: now,
                worker: lease.worker.clone(),
                error: error.to_owned(),
            });
            let (job, deliveries) = if job.attempts >= job.max_attempts {
                exhaust(c, key, &job, now).await?
            } else {
                set_errors(c, &job).await?;
                sqlx::query(
                    "UPDATE jobs SET status = 'queued', run_after = $1, lease_expires_at = NULL \
                     WHERE id = $2",
                )
                .bind(db_time(retry_at))
                .bind(job.id)
                .execute(&mut *c)
                .await?;
                (reload_job(c, job.id).await?, 0)
            };
            Ok(Completed {
                job,
                alert_events: Vec::new(),
                deliveries,
            })
        }

        /// Store a job's analysis, end the job, evaluate the alert rules and record the
        /// events.
        #[allow(clippy::too_many_arguments)]
        async fn store_result(
            c: &mut Conn,
            key: i64,
            structure: &$crate::model::Structure,
            job: &Job,
            a: &$crate::model::Analysis,
            evaluate: &Evaluator,
            now: OffsetDateTime,
        ) -> Result<Completed, StoreError> {
            if a.structure_id != job.structure_id {
                return Err(StoreError::Invalid(format!(
                    "analysis {} is of structure {}, job {} of structure {}",
                    a.id, a.structure_id, job.id, job.structure_id
                )));
            }
            super::analyses::insert_analysis(&mut *c, a).await?;
            let status = match a.status {
                AnalysisStatus::Succeeded => JobStatus::Succeeded,
                AnalysisStatus::Failed => JobStatus::Failed,
            };
            sqlx::query(
                "UPDATE jobs SET status = $1, analysis_id = $2, finished_at = $3, \
                 lease_expires_at = NULL WHERE id = $4",
            )
            .bind(status.as_str())
            .bind(a.id)
            .bind(db_time(now))
            .bind(job.id)
            .execute(&mut *c)
            .await?;
            let job = reload_job(c, job.id).await?;
            let rules = rules_of(&mut *c, &job.structure_id).await?;
            let states = states_of(&mut *c, &job.structure_id).await?;
            let evaluation = evaluate(structure, &rules, &states, a, now);
            let alert_events =
                apply_evaluation(c, key, &job.structure_id, &rules, &evaluation, a.id, now)
                    .await?;
            let mut events = vec![NewEvent::for_analysis(&job, a, now)];
            events.extend(alert_events.iter().filter_map(NewEvent::for_alert));
            let deliveries = record_events(c, key, &events, now).await?;
            Ok(Completed {
                job,
                alert_events,
                deliveries,
            })
        }

        /// The structure with internal key `key`, its row locked (PostgreSQL) so that
        /// evaluations of one structure do not interleave.
        async fn locked_structure(
            c: &mut Conn,
            key: i64,
        ) -> Result<$crate::model::Structure, StoreError> {
            sqlx::query_as::<_, StructureRow<$Time>>(concat!(
                "SELECT ",
                structure_columns!(),
                " FROM structures s WHERE s.key = $1",
                $lock
            ))
            .bind(key)
            .fetch_optional(&mut *c)
            .await?
            .ok_or_else(|| StoreError::NotFound(format!("structure key {key} does not exist")))?
            .into_structure()
        }

        /// Refuse an evaluation that names a rule the structure does not have.
        fn check_evaluation(
            structure: &str,
            rules: &[AlertRuleRecord],
            ev: &Evaluation,
        ) -> Result<(), StoreError> {
            let named = ev
                .states
                .iter()
                .map(|s| s.rule_id)
                .chain(ev.events.iter().map(|e| e.rule_id));
            for id in named {
                if !rules.iter().any(|r| r.id == id) {
                    return Err(StoreError::Invalid(format!(
                        "the alert evaluation names rule {id}, which is not a rule of structure \
                         {structure}"
                    )));
                }
            }
            Ok(())
        }

        /// Write an evaluation's states and alert events (of analysis `analysis`).
        #[allow(clippy::too_many_arguments)]
        async fn apply_evaluation(
            c: &mut Conn,
            key: i64,
            structure: &str,
            rules: &[AlertRuleRecord],
            ev: &Evaluation,
            analysis: Uuid,
            now: OffsetDateTime,
        ) -> Result<Vec<AlertEvent>, StoreError> {
            check_evaluation(structure, rules, ev)?;
            for s in &ev.states {
                upsert_state(c, s).await?;
            }
            let mut stored = Vec::with_capacity(ev.events.len());
            for e in &ev.events {
                stored.push(insert_alert_event(c, key, structure, e, analysis, now).await?);
            }
            Ok(stored)
        }

        async fn upsert_state(c: &mut Conn, s: &AlertState) -> Result<(), StoreError> {
            sqlx::query(
                "INSERT INTO alert_states (rule_id, region, level, data, updated_at) \
                 VALUES ($1, $2, $3, $4, $5) ON CONFLICT (rule_id, region) DO UPDATE SET \
                 level = excluded.level, data = excluded.data, updated_at = excluded.updated_at",
            )
            .bind(s.rule_id)
            .bind(&s.region)
            .bind(int(s.level))
            .bind(Json(&s.data))
            .bind(db_time(s.updated_at))
            .execute(&mut *c)
            .await?;
            Ok(())
        }

        async fn insert_alert_event(
            c: &mut Conn,
            key: i64,
            structure: &str,
            e: &NewAlertEvent,
            analysis: Uuid,
            now: OffsetDateTime,
        ) -> Result<AlertEvent, StoreError> {
            let (seq,): (i64,) = sqlx::query_as(
                "INSERT INTO alert_events (id, structure_key, rule_id, region, kind, from_level, \
                 to_level, analysis_id, evidence, created_at) \
                 VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10) RETURNING seq",
            )
            .bind(e.id)
            .bind(key)
            .bind(e.rule_id)
            .bind(&e.region)
            .bind(e.kind.as_str())
            .bind(int(e.from_level))
            .bind(int(e.to_level))
            .bind(analysis)
            .bind(Json(&e.evidence))
            .bind(db_time(now))
            .fetch_one(&mut *c)
            .await
            .map_err(|err| {
                StoreError::unique_as_conflict(err, || format!("alert event {} exists already", e.id))
            })?;
            Ok(AlertEvent {
                id: e.id,
                seq,
                structure_id: structure.to_owned(),
                rule_id: e.rule_id,
                region: e.region.clone(),
                kind: e.kind,
                from_level: e.from_level,
                to_level: e.to_level,
                analysis_id: analysis,
                evidence: e.evidence.clone(),
                created_at: now,
            })
        }

        // ---------------------------------------------------------------- events

        /// Record `events` of structure `structure`, each with one pending delivery (due
        /// at `now`) per matching subscription; returns how many deliveries were queued.
        async fn record_events(
            c: &mut Conn,
            key: i64,
            events: &[NewEvent],
            now: OffsetDateTime,
        ) -> Result<u64, StoreError> {
            if events.is_empty() {
                return Ok(0);
            }
            let subscribers: Vec<(Uuid, Json<Vec<EventType>>)> = sqlx::query_as(
                "SELECT w.id, w.events FROM webhook_subscriptions w WHERE w.structure_key IS NULL \
                 OR w.structure_key = $1 ORDER BY w.created_at, w.id",
            )
            .bind(key)
            .fetch_all(&mut *c)
            .await?;
            let mut queued = 0;
            for e in events {
                insert_event(c, key, e).await?;
                let wanted = subscribers
                    .iter()
                    .filter(|(_, types)| types.0.contains(&e.event_type));
                for (subscription, _) in wanted {
                    insert_delivery(c, *subscription, e.id, now).await?;
                    queued += 1;
                }
            }
            Ok(queued)
        }

        async fn insert_event(c: &mut Conn, key: i64, e: &NewEvent) -> Result<(), StoreError> {
            sqlx::query(
                "INSERT INTO events (id, structure_key, type, occurred_at, body) \
                 VALUES ($1, $2, $3, $4, $5)",
            )
            .bind(e.id)
            .bind(key)
            .bind(e.event_type.as_str())
            .bind(db_time(e.occurred_at))
            .bind(Json(&e.body))
            .execute(&mut *c)
            .await
            .map_err(|err| StoreError::unique_as_conflict(err, || format!("event {} exists already", e.id)))?;
            Ok(())
        }

        /// Queue a new pending delivery of event `event` to `subscription`, due at `now`.
        async fn insert_delivery(
            c: &mut Conn,
            subscription: Uuid,
            event: Uuid,
            now: OffsetDateTime,
        ) -> Result<Uuid, StoreError> {
            let id = Uuid::new_v4();
            sqlx::query(
                "INSERT INTO deliveries (id, subscription_id, event_id, status, attempts, \
                 next_attempt_at, created_at) VALUES ($1, $2, $3, 'pending', 0, $4, $4)",
            )
            .bind(id)
            .bind(subscription)
            .bind(event)
            .bind(db_time(now))
            .execute(&mut *c)
            .await?;
            Ok(id)
        }

        // ---------------------------------------------------------------- automatic analysis

        pub(super) async fn put_auto_analysis(
            store: &$Store,
            structure: &str,
            config: Option<&serde_json::Value>,
        ) -> Result<(), StoreError> {
            let mut tx = store.write_tx().await?;
            let key = structure_key(&mut tx, structure).await?;
            match config {
                Some(config) => {
                    sqlx::query(
                        "INSERT INTO auto_analyses (structure_key, config, updated_at) \
                         VALUES ($1, $2, $3) ON CONFLICT (structure_key) DO UPDATE SET \
                         config = excluded.config, updated_at = excluded.updated_at",
                    )
                    .bind(key)
                    .bind(Json(config))
                    .bind(db_time(now_utc()))
                    .execute(&mut *tx)
                    .await?;
                }
                None => {
                    sqlx::query("DELETE FROM auto_analyses WHERE structure_key = $1")
                        .bind(key)
                        .execute(&mut *tx)
                        .await?;
                }
            }
            tx.commit().await?;
            Ok(())
        }

        pub(super) async fn get_auto_analysis(
            pool: &$Pool,
            structure: &str,
        ) -> Result<Option<serde_json::Value>, StoreError> {
            let found: Option<(Json<serde_json::Value>,)> = sqlx::query_as(
                "SELECT a.config FROM auto_analyses a JOIN structures s ON s.key = a.structure_key \
                 WHERE s.id = $1",
            )
            .bind(structure)
            .fetch_optional(pool)
            .await?;
            Ok(found.map(|(c,)| c.0))
        }

        // ---------------------------------------------------------------- alerts

        pub(super) async fn put_alert_rule(
            store: &$Store,
            r: &AlertRuleRecord,
        ) -> Result<Written, StoreError> {
            let mut tx = store.write_tx().await?;
            let key = structure_key(&mut tx, &r.structure_id).await?;
            let existing: Option<(i64,)> = sqlx::query_as(concat!(
                "SELECT structure_key FROM alert_rules WHERE id = $1",
                $lock
            ))
            .bind(r.id)
            .fetch_optional(&mut *tx)
            .await?;
            let written = match existing {
                Some((k,)) if k != key => {
                    return Err(StoreError::Conflict(format!(
                        "alert rule {} belongs to another structure",
                        r.id
                    )));
                }
                Some(_) => {
                    sqlx::query(
                        "UPDATE alert_rules SET definition = $1, updated_at = $2 WHERE id = $3",
                    )
                    .bind(Json(&r.definition))
                    .bind(db_time(r.updated_at))
                    .bind(r.id)
                    .execute(&mut *tx)
                    .await?;
                    Written::Updated
                }
                None => {
                    sqlx::query(
                        "INSERT INTO alert_rules (id, structure_key, definition, created_at, \
                         updated_at) VALUES ($1, $2, $3, $4, $5)",
                    )
                    .bind(r.id)
                    .bind(key)
                    .bind(Json(&r.definition))
                    .bind(db_time(r.created_at))
                    .bind(db_time(r.updated_at))
                    .execute(&mut *tx)
                    .await
                    .map_err(|e| {
                        StoreError::unique_as_conflict(e, || {
                            format!("alert rule {} was created meanwhile", r.id)
                        })
                    })?;
                    Written::Created
                }
            };
            tx.commit().await?;
            Ok(written)
        }

        pub(super) async fn get_alert_rule(
            pool: &$Pool,
            structure: &str,
            id: Uuid,
        ) -> Result<Option<AlertRuleRecord>, StoreError> {
            sqlx::query_as::<_, AlertRuleRow<$Time>>(concat!(
                "SELECT ",
                alert_rule_columns!(),
                " FROM alert_rules r JOIN structures s ON s.key = r.structure_key \
                 WHERE s.id = $1 AND r.id = $2"
            ))
            .bind(structure)
            .bind(id)
            .fetch_optional(pool)
            .await?
            .map(AlertRuleRow::into_rule)
            .transpose()
        }

        /// The rules of structure `structure`, oldest first.
        async fn rules_of<'e, E>(ex: E, structure: &str) -> Result<Vec<AlertRuleRecord>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            sqlx::query_as::<_, AlertRuleRow<$Time>>(concat!(
                "SELECT ",
                alert_rule_columns!(),
                " FROM alert_rules r JOIN structures s ON s.key = r.structure_key \
                 WHERE s.id = $1 ORDER BY r.created_at, r.id"
            ))
            .bind(structure)
            .fetch_all(ex)
            .await?
            .into_iter()
            .map(AlertRuleRow::into_rule)
            .collect()
        }

        pub(super) async fn list_alert_rules(
            pool: &$Pool,
            structure: &str,
        ) -> Result<Vec<AlertRuleRecord>, StoreError> {
            rules_of(pool, structure).await
        }

        pub(super) async fn delete_alert_rule(
            store: &$Store,
            structure: &str,
            id: Uuid,
        ) -> Result<bool, StoreError> {
            let mut tx = store.write_tx().await?;
            // The rule's states go with it (ON DELETE CASCADE); its events stay.
            let done = sqlx::query(
                "DELETE FROM alert_rules WHERE id = $1 \
                 AND structure_key = (SELECT key FROM structures WHERE id = $2)",
            )
            .bind(id)
            .bind(structure)
            .execute(&mut *tx)
            .await?;
            tx.commit().await?;
            Ok(done.rows_affected() == 1)
        }

        /// The alert states of structure `structure` by rule (oldest rule first), then
        /// by region in byte order (sorted here, as the databases' collations differ).
        async fn states_of<'e, E>(ex: E, structure: &str) -> Result<Vec<AlertState>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            let mut states = sqlx::query_as::<_, AlertStateRow<$Time>>(concat!(
                "SELECT ",
                alert_state_columns!(),
                " FROM alert_states st JOIN alert_rules r ON r.id = st.rule_id \
                 JOIN structures s ON s.key = r.structure_key \
                 WHERE s.id = $1 ORDER BY r.created_at, r.id"
            ))
            .bind(structure)
            .fetch_all(ex)
            .await?
            .into_iter()
            .map(AlertStateRow::into_state)
            .collect::<Result<Vec<_>, _>>()?;
            for rule in states.chunk_by_mut(|a, b| a.rule_id == b.rule_id) {
                rule.sort_by(|a, b| a.region.as_bytes().cmp(b.region.as_bytes()));
            }
            Ok(states)
        }

        pub(super) async fn list_alert_states(
            pool: &$Pool,
            structure: &str,
        ) -> Result<Vec<AlertState>, StoreError> {
            states_of(pool, structure).await
        }

        pub(super) async fn list_alert_events(
            pool: &$Pool,
            structure: &str,
            q: &AlertEventQuery,
        ) -> Result<Vec<AlertEvent>, StoreError> {
            let mut b = QueryBuilder::<$Db>::new(concat!(
                "SELECT ",
                alert_event_columns!(),
                " FROM alert_events ae JOIN structures s ON s.key = ae.structure_key WHERE s.id = "
            ));
            b.push_bind(structure.to_owned());
            if let Some(rule) = q.rule_id {
                b.push(" AND ae.rule_id = ").push_bind(rule);
            }
            if let Some(region) = &q.region {
                b.push(" AND ae.region = ").push_bind(region.clone());
            }
            if let Some(seq) = q.after_seq {
                b.push(" AND ae.seq > ").push_bind(seq);
            }
            b.push(" ORDER BY ae.seq LIMIT ").push_bind(limit(q.limit));
            b.build_query_as::<AlertEventRow<$Time>>()
                .fetch_all(pool)
                .await?
                .into_iter()
                .map(AlertEventRow::into_event)
                .collect()
        }

        // ---------------------------------------------------------------- webhooks

        pub(super) async fn insert_subscription(
            store: &$Store,
            s: &Subscription,
        ) -> Result<(), StoreError> {
            if s.events.is_empty() {
                return Err(StoreError::Invalid(format!(
                    "subscription {} needs at least one event type",
                    s.id
                )));
            }
            let mut tx = store.write_tx().await?;
            let key = match &s.structure_id {
                Some(id) => Some(structure_key(&mut tx, id).await?),
                None => None,
            };
            sqlx::query(
                "INSERT INTO webhook_subscriptions (id, structure_key, url, events, description, \
                 secret, created_at) VALUES ($1, $2, $3, $4, $5, $6, $7)",
            )
            .bind(s.id)
            .bind(key)
            .bind(&s.url)
            .bind(Json(&s.events))
            .bind(&s.description)
            .bind(&s.secret)
            .bind(db_time(s.created_at))
            .execute(&mut *tx)
            .await
            .map_err(|e| {
                StoreError::unique_as_conflict(e, || format!("subscription {} exists already", s.id))
            })?;
            tx.commit().await?;
            Ok(())
        }

        async fn load_subscription<'e, E>(
            ex: E,
            id: Uuid,
        ) -> Result<Option<Subscription>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            sqlx::query_as::<_, SubscriptionRow<$Time>>(concat!(
                "SELECT ",
                subscription_columns!(),
                " FROM webhook_subscriptions w LEFT JOIN structures s ON s.key = w.structure_key \
                 WHERE w.id = $1"
            ))
            .bind(id)
            .fetch_optional(ex)
            .await?
            .map(SubscriptionRow::into_subscription)
            .transpose()
        }

        pub(super) async fn get_subscription(
            pool: &$Pool,
            id: Uuid,
        ) -> Result<Option<Subscription>, StoreError> {
            load_subscription(pool, id).await
        }

        pub(super) async fn list_subscriptions(
            pool: &$Pool,
            structure: Option<&str>,
        ) -> Result<Vec<Subscription>, StoreError> {
            let mut b = QueryBuilder::<$Db>::new(concat!(
                "SELECT ",
                subscription_columns!(),
                " FROM webhook_subscriptions w LEFT JOIN structures s ON s.key = w.structure_key"
            ));
            if let Some(id) = structure {
                b.push(" WHERE s.id = ").push_bind(id.to_owned());
            }
            b.push(" ORDER BY w.created_at, w.id");
            b.build_query_as::<SubscriptionRow<$Time>>()
                .fetch_all(pool)
                .await?
                .into_iter()
                .map(SubscriptionRow::into_subscription)
                .collect()
        }

        pub(super) async fn delete_subscription(
            store: &$Store,
            id: Uuid,
        ) -> Result<bool, StoreError> {
            let mut tx = store.write_tx().await?;
            // Its deliveries and their attempts go with it (ON DELETE CASCADE).
            let done = sqlx::query("DELETE FROM webhook_subscriptions WHERE id = $1")
                .bind(id)
                .execute(&mut *tx)
                .await?;
            tx.commit().await?;
            Ok(done.rows_affected() == 1)
        }

        pub(super) async fn list_deliveries(
            pool: &$Pool,
            subscription: Uuid,
            q: &DeliveryQuery,
        ) -> Result<Vec<Delivery>, StoreError> {
            let mut b = QueryBuilder::<$Db>::new(concat!(
                "SELECT ",
                delivery_columns!(),
                " FROM deliveries d JOIN events e ON e.id = d.event_id WHERE d.subscription_id = "
            ));
            b.push_bind(subscription);
            if let Some(st) = q.status {
                b.push(" AND d.status = ").push_bind(st.as_str());
            }
            if let Some(seq) = q.after_seq {
                b.push(" AND d.seq > ").push_bind(seq);
            }
            b.push(" ORDER BY d.seq LIMIT ").push_bind(limit(q.limit));
            b.build_query_as::<DeliveryRow<$Time>>()
                .fetch_all(pool)
                .await?
                .into_iter()
                .map(DeliveryRow::into_delivery)
                .collect()
        }

        async fn load_delivery<'e, E>(
            ex: E,
            subscription: Uuid,
            id: Uuid,
        ) -> Result<Option<Delivery>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            sqlx::query_as::<_, DeliveryRow<$Time>>(concat!(
                "SELECT ",
                delivery_columns!(),
                " FROM deliveries d JOIN events e ON e.id = d.event_id \
                 WHERE d.subscription_id = $1 AND d.id = $2"
            ))
            .bind(subscription)
            .bind(id)
            .fetch_optional(ex)
            .await?
            .map(DeliveryRow::into_delivery)
            .transpose()
        }

        pub(super) async fn get_delivery(
            pool: &$Pool,
            subscription: Uuid,
            id: Uuid,
        ) -> Result<Option<(Delivery, Vec<DeliveryAttempt>)>, StoreError> {
            let Some(delivery) = load_delivery(pool, subscription, id).await? else {
                return Ok(None);
            };
            let attempts = sqlx::query_as::<_, AttemptRow<$Time>>(
                "SELECT delivery_id, attempt, at, worker, status_code, error, duration_ms \
                 FROM delivery_attempts WHERE delivery_id = $1 ORDER BY attempt",
            )
            .bind(id)
            .fetch_all(pool)
            .await?
            .into_iter()
            .map(AttemptRow::into_attempt)
            .collect::<Result<Vec<_>, _>>()?;
            Ok(Some((delivery, attempts)))
        }

        pub(super) async fn replay_delivery(
            store: &$Store,
            subscription: Uuid,
            id: Uuid,
            now: OffsetDateTime,
        ) -> Result<Option<Delivery>, StoreError> {
            let mut tx = store.write_tx().await?;
            let found: Option<(Uuid,)> = sqlx::query_as(
                "SELECT event_id FROM deliveries WHERE subscription_id = $1 AND id = $2",
            )
            .bind(subscription)
            .bind(id)
            .fetch_optional(&mut *tx)
            .await?;
            let Some((event,)) = found else {
                return Ok(None);
            };
            let new_id = insert_delivery(&mut tx, subscription, event, now).await?;
            let replayed = load_delivery(&mut *tx, subscription, new_id).await?;
            tx.commit().await?;
            Ok(replayed)
        }

        /// The subscription whose head pending delivery (lowest `seq`) is due at `now` and
        /// that no dispatcher holds, oldest head first; locked (PostgreSQL skips the
        /// subscriptions other claims hold).
        /// As [`next_claimable`], for subscriptions with due deliveries.
        async fn next_dispatchable<'e, E>(
            ex: E,
            now: OffsetDateTime,
            locked: bool,
        ) -> Result<Option<Uuid>, StoreError>
        where
            E: sqlx::Executor<'e, Database = $Db>,
        {
            let sql = if locked {
                concat!($crate::store::monitor_sql::dispatchable_subscription!(), $skip_locked)
            } else {
                $crate::store::monitor_sql::dispatchable_subscription!()
            };
            let found: Option<(Uuid,)> = sqlx::query_as(sql)
                .bind(db_time(now))
                .fetch_optional(ex)
                .await?;
            Ok(found.map(|(id,)| id))
        }

        pub(super) async fn claim_dispatch(
            store: &$Store,
            worker: &str,
            now: OffsetDateTime,
            lease_until: OffsetDateTime,
            max: usize,
        ) -> Result<Option<DispatchBatch>, StoreError> {
            // A plain read first: an idle dispatcher's poll opens no write transaction.
            if next_dispatchable(&store.pool, now, false).await?.is_none() {
                return Ok(None);
            }
            let mut tx = store.write_tx().await?;
            let Some(id) = next_dispatchable(&mut *tx, now, true).await? else {
                tx.rollback().await?;
                return Ok(None);
            };
            sqlx::query(
                "UPDATE webhook_subscriptions SET dispatch_worker = $1, dispatch_until = $2 \
                 WHERE id = $3",
            )
            .bind(worker)
            .bind(db_time(lease_until))
            .bind(id)
            .execute(&mut *tx)
            .await?;
            let subscription = load_subscription(&mut *tx, id).await?.ok_or_else(|| {
                StoreError::corrupt(format!("subscription {id} vanished inside its transaction"))
            })?;
            let items = sqlx::query_as::<_, DispatchRow<$Time>>(concat!(
                "SELECT ",
                dispatch_columns!(),
                " FROM deliveries d JOIN events e ON e.id = d.event_id \
                 JOIN structures es ON es.key = e.structure_key \
                 WHERE d.subscription_id = $1 AND d.status = 'pending' ORDER BY d.seq LIMIT $2"
            ))
            .bind(id)
            .bind(limit(max))
            .fetch_all(&mut *tx)
            .await?
            .into_iter()
            .map(DispatchRow::into_pair)
            .collect::<Result<Vec<_>, _>>()?;
            tx.commit().await?;
            Ok(Some(DispatchBatch { subscription, items }))
        }

        /// What `last_error` of a delivery becomes after an attempt: `NULL` once
        /// delivered, else the attempt's error or its HTTP status.
        fn last_error(attempt: &DeliveryAttempt, next: DeliveryNext) -> Option<String> {
            match next {
                DeliveryNext::Delivered => None,
                _ => Some(attempt.error.clone().unwrap_or_else(|| {
                    attempt
                        .status_code
                        .map_or_else(|| "failed".to_owned(), |c| format!("HTTP {c}"))
                })),
            }
        }

        pub(super) async fn record_attempt(
            store: &$Store,
            worker: &str,
            attempt: &DeliveryAttempt,
            next: DeliveryNext,
        ) -> Result<(), StoreError> {
            let mut tx = store.write_tx().await?;
            let r = record_attempt_in(&mut tx, worker, attempt, next).await;
            settle(tx, r).await
        }

        async fn record_attempt_in(
            tx: &mut Conn,
            worker: &str,
            attempt: &DeliveryAttempt,
            next: DeliveryNext,
        ) -> Result<(), StoreError> {
            let id = attempt.delivery_id;
            let found: Option<(Uuid, String, Option<String>)> = sqlx::query_as(concat!(
                "SELECT d.subscription_id, d.status, w.dispatch_worker FROM deliveries d \
                 JOIN webhook_subscriptions w ON w.id = d.subscription_id WHERE d.id = $1",
                $lock
            ))
            .bind(id)
            .fetch_optional(&mut *tx)
            .await?;
            let (subscription, status, holder) =
                found.ok_or_else(|| StoreError::NotFound(format!("delivery {id} does not exist")))?;
            if holder.as_deref() != Some(worker) {
                return Err(StoreError::Conflict(format!(
                    "dispatcher {worker} does not hold subscription {subscription}"
                )));
            }
            if status != "pending" {
                return Err(StoreError::Conflict(format!("delivery {id} is {status}, not pending")));
            }
            insert_attempt(tx, attempt).await?;
            let (status, next_at, delivered_at) = match next {
                DeliveryNext::Delivered => ("delivered", None, Some(attempt.at)),
                DeliveryNext::RetryAt(t) => ("pending", Some(t), None),
                DeliveryNext::GiveUp => ("failed", None, None),
            };
            sqlx::query(
                "UPDATE deliveries SET status = $1, attempts = $2, last_error = $3, \
                 next_attempt_at = COALESCE($4, next_attempt_at), delivered_at = $5 WHERE id = $6",
            )
            .bind(status)
            .bind(int(attempt.attempt))
            .bind(last_error(attempt, next))
            .bind(next_at.map(db_time))
            .bind(delivered_at.map(db_time))
            .bind(id)
            .execute(&mut *tx)
            .await?;
            Ok(())
        }

        async fn insert_attempt(c: &mut Conn, a: &DeliveryAttempt) -> Result<(), StoreError> {
            sqlx::query(
                "INSERT INTO delivery_attempts (delivery_id, attempt, at, worker, status_code, \
                 error, duration_ms) VALUES ($1, $2, $3, $4, $5, $6, $7)",
            )
            .bind(a.delivery_id)
            .bind(int(a.attempt))
            .bind(db_time(a.at))
            .bind(&a.worker)
            .bind(a.status_code.map(i32::from))
            .bind(&a.error)
            .bind(limit(a.duration_ms))
            .execute(&mut *c)
            .await
            .map_err(|e| {
                StoreError::unique_as_conflict(e, || {
                    format!("attempt {} of delivery {} is logged already", a.attempt, a.delivery_id)
                })
            })?;
            Ok(())
        }

        pub(super) async fn release_dispatch(
            store: &$Store,
            worker: &str,
            subscription: Uuid,
        ) -> Result<(), StoreError> {
            sqlx::query(
                "UPDATE webhook_subscriptions SET dispatch_worker = NULL, dispatch_until = NULL \
                 WHERE id = $1 AND dispatch_worker = $2",
            )
            .bind(subscription)
            .bind(worker)
            .execute(&store.pool)
            .await?;
            Ok(())
        }
    };
}

pub(crate) use monitor_sql;
