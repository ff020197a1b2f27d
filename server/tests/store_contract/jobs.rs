//! Durable analysis jobs (queue, claims and leases, completion), the automatic analysis
//! of a structure, and jobs queued by a batch commit. The helpers here are shared with
//! the alert and webhook cases.

use kinema_server::model::{
    Analysis, AnalysisKind, AnalysisQuery, AnalysisStatus, DeliveryQuery, Evaluation, EventType,
    Job, JobOrigin, JobOutcome, JobQuery, JobStatus, Lease, NewJob, Structure, Subscription,
};
use kinema_server::store::{BatchMeta, Completed, DynStore, Evaluator, NewReading, StoreError};
use serde_json::json;
use time::macros::datetime;
use time::{Duration, OffsetDateTime};
use uuid::Uuid;

use crate::structures::{point, structure};

crate::contract!(
    jobs_enqueue_get_and_list_newest_first_with_filters,
    enqueue_refuses_unknown_structure_duplicate_and_zero_attempts,
    claim_takes_the_oldest_due_job_and_nothing_when_none_is_due,
    renew_extends_only_the_current_lease,
    complete_stores_exactly_one_analysis_linked_to_the_job,
    a_failed_analysis_fails_the_job_with_an_analysis_failed_event,
    an_analysis_of_another_structure_writes_nothing,
    a_stale_lease_cannot_complete_and_the_job_keeps_one_result,
    error_outcomes_requeue_then_fail_with_an_analysis_failed_event,
    an_expired_last_attempt_fails_the_job_at_the_next_claim,
    batch_commit_queues_its_jobs_and_a_rolled_back_batch_none,
    auto_analysis_is_set_replaced_and_removed,
    delete_structure_removes_jobs_rules_events_and_deliveries,
);

/// The start of the invented monitoring scenario of these cases.
pub const T0: OffsetDateTime = datetime!(2026-11-30 06:00:00 UTC);

/// `T0` plus `m` minutes.
pub fn at(m: i64) -> OffsetDateTime {
    T0 + Duration::minutes(m)
}

/// A 2D structure `id` with points P1, P2.
pub async fn setup(store: &DynStore, id: &str) {
    store
        .put_structure(&structure(id, 2))
        .await
        .expect("structure");
    store
        .put_points(id, &[point("P1", 0.0, 0.0), point("P2", 1.0, 0.0)])
        .await
        .expect("points");
}

/// A job of `structure` queued at `created`.
pub fn new_job(structure: &str, created: OffsetDateTime, max_attempts: u32) -> NewJob {
    NewJob {
        id: Uuid::new_v4(),
        structure_id: structure.into(),
        origin: JobOrigin::Request,
        batch_id: None,
        request: json!({"kind": "epoch", "method": {"kind": "delaunay"}}),
        max_attempts,
        created_at: created,
    }
}

/// An analysis a worker computed for `job`, with `result` as its document when it
/// succeeded.
pub fn analysis_for(job: &Job, status: AnalysisStatus, result: serde_json::Value) -> Analysis {
    Analysis {
        id: Uuid::new_v4(),
        structure_id: job.structure_id.clone(),
        kind: AnalysisKind::Epoch,
        status,
        method: "delaunay".into(),
        epoch: Some(job.created_at),
        baseline_epoch: None,
        series_first: None,
        series_last: None,
        parameters: json!({"method": {"kind": "delaunay"}}),
        inputs: json!({"points_used": 2}),
        software_version: "0.1.0".into(),
        result: (status == AnalysisStatus::Succeeded).then_some(result),
        error: (status == AnalysisStatus::Failed).then(|| "collinear points".to_owned()),
        created_at: job.created_at,
        duration_ms: 7,
    }
}

/// An evaluator for cases without alert rules: it changes nothing.
pub fn no_alerts(
    _: &Structure,
    _: &[kinema_server::model::AlertRuleRecord],
    _: &[kinema_server::model::AlertState],
    _: &Analysis,
    _: OffsetDateTime,
) -> Evaluation {
    Evaluation::default()
}

/// Claim the next job at `now` for `worker` with a lease of 5 minutes.
pub async fn claim(store: &DynStore, worker: &str, now: OffsetDateTime) -> Option<(Job, Lease)> {
    store
        .claim_job(worker, now, now + Duration::minutes(5))
        .await
        .expect("claim")
}

/// Queue a job of `structure` at `now`, claim it and complete it with a succeeded
/// analysis whose document is `result`, evaluated by `evaluate`.
pub async fn run_job(
    store: &DynStore,
    structure: &str,
    now: OffsetDateTime,
    result: serde_json::Value,
    evaluate: &Evaluator,
) -> (Analysis, Completed) {
    let queued = store
        .enqueue_job(&new_job(structure, now, 3))
        .await
        .expect("enqueue");
    let (job, lease) = claim(store, "w1", now).await.expect("a due job");
    assert_eq!(job.id, queued.id, "the only due job is claimed");
    let a = analysis_for(&job, AnalysisStatus::Succeeded, result);
    let done = store
        .complete_job(
            &lease,
            &JobOutcome::Analysis(Box::new(a.clone())),
            evaluate,
            now,
        )
        .await
        .expect("complete");
    (a, done)
}

/// A subscription to `events` of `structure` (`None` = every structure).
pub fn subscription(structure: Option<&str>, events: &[EventType], created: i64) -> Subscription {
    Subscription {
        id: Uuid::new_v4(),
        structure_id: structure.map(str::to_owned),
        url: "https://receiver.example/kinema".into(),
        events: events.to_vec(),
        description: "site office".into(),
        secret: format!("whsec-{}", Uuid::new_v4()),
        created_at: at(created),
    }
}

fn q(status: Option<JobStatus>, after: Option<&Job>, limit: usize) -> JobQuery {
    JobQuery {
        status,
        after: after.map(|j| (j.created_at, j.id)),
        limit,
    }
}

fn ids(jobs: &[Job]) -> Vec<Uuid> {
    jobs.iter().map(|j| j.id).collect()
}

async fn jobs_enqueue_get_and_list_newest_first_with_filters(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    let mut queued = Vec::new();
    for m in 0..3 {
        let j = store
            .enqueue_job(&new_job("W1", at(m), 3))
            .await
            .expect("enqueue");
        queued.push(j);
    }
    store
        .enqueue_job(&new_job("W2", at(9), 3))
        .await
        .expect("enqueue");
    let a = &queued[0];
    assert_eq!(a.status, JobStatus::Queued);
    assert_eq!((a.attempts, a.max_attempts), (0, 3));
    assert_eq!(
        a.run_after, a.created_at,
        "first run_after is the queue time"
    );
    assert_eq!(a.created_at, at(0));
    assert!(a.errors.is_empty() && a.worker.is_none() && a.lease_expires_at.is_none());
    assert!(a.analysis_id.is_none() && a.finished_at.is_none());
    assert_eq!(a.structure_id, "W1");
    assert_eq!(a.request["method"]["kind"], "delaunay");
    assert_eq!(
        store.get_job(a.id).await.expect("get").as_ref(),
        Some(a),
        "what is stored is what enqueue returned"
    );
    assert_eq!(store.get_job(Uuid::new_v4()).await.expect("get"), None);

    let all = store
        .list_jobs("W1", &q(None, None, 10))
        .await
        .expect("list");
    assert_eq!(ids(&all), [queued[2].id, queued[1].id, queued[0].id]);
    let page = store
        .list_jobs("W1", &q(None, Some(&queued[2]), 1))
        .await
        .expect("page");
    assert_eq!(ids(&page), [queued[1].id]);
    let rest = store
        .list_jobs("W1", &q(None, Some(&page[0]), 10))
        .await
        .expect("page");
    assert_eq!(ids(&rest), [queued[0].id]);

    // The oldest due job is claimed: it is running, the others are still queued.
    let (running, _) = claim(&store, "w1", at(5)).await.expect("claim");
    assert_eq!(running.id, queued[0].id);
    let q_running = store
        .list_jobs("W1", &q(Some(JobStatus::Running), None, 10))
        .await
        .expect("list");
    assert_eq!(ids(&q_running), [queued[0].id]);
    let q_queued = store
        .list_jobs("W1", &q(Some(JobStatus::Queued), None, 10))
        .await
        .expect("list");
    assert_eq!(ids(&q_queued), [queued[2].id, queued[1].id]);
    assert!(
        store
            .list_jobs("NOPE", &q(None, None, 10))
            .await
            .expect("list")
            .is_empty()
    );
}

async fn enqueue_refuses_unknown_structure_duplicate_and_zero_attempts(store: DynStore) {
    assert!(matches!(
        store.enqueue_job(&new_job("NOPE", at(0), 3)).await,
        Err(StoreError::NotFound(_))
    ));
    setup(&store, "W1").await;
    let j = new_job("W1", at(0), 3);
    store.enqueue_job(&j).await.expect("enqueue");
    assert!(matches!(
        store.enqueue_job(&j).await,
        Err(StoreError::Conflict(_))
    ));
    assert!(matches!(
        store.enqueue_job(&new_job("W1", at(0), 0)).await,
        Err(StoreError::Invalid(_))
    ));
    let listed = store
        .list_jobs("W1", &q(None, None, 10))
        .await
        .expect("list");
    assert_eq!(ids(&listed), [j.id], "the refused jobs left nothing");
}

async fn claim_takes_the_oldest_due_job_and_nothing_when_none_is_due(store: DynStore) {
    setup(&store, "W1").await;
    let second = store
        .enqueue_job(&new_job("W1", at(1), 3))
        .await
        .expect("enqueue");
    let first = store
        .enqueue_job(&new_job("W1", at(0), 3))
        .await
        .expect("enqueue");
    let later = store
        .enqueue_job(&new_job("W1", at(10), 3))
        .await
        .expect("enqueue");
    assert!(
        claim(&store, "w1", at(0) - Duration::seconds(1))
            .await
            .is_none(),
        "nothing is due before the first run_after"
    );
    let now = at(5);
    let (job, lease) = claim(&store, "w1", now).await.expect("first");
    assert_eq!(job.id, first.id, "oldest run_after first");
    assert_eq!(job.status, JobStatus::Running);
    assert_eq!(job.attempts, 1);
    assert_eq!(job.worker.as_deref(), Some("w1"));
    assert_eq!(job.lease_expires_at, Some(now + Duration::minutes(5)));
    assert_eq!(
        lease,
        Lease {
            job_id: first.id,
            worker: "w1".into(),
            attempt: 1
        }
    );
    assert_eq!(store.get_job(first.id).await.expect("get"), Some(job));
    let (job, _) = claim(&store, "w2", now).await.expect("second");
    assert_eq!(job.id, second.id);
    assert_eq!(job.worker.as_deref(), Some("w2"));
    assert!(
        claim(&store, "w3", now).await.is_none(),
        "the third is not due, the others run under live leases"
    );
    let (job, _) = claim(&store, "w3", at(10)).await.expect("third");
    assert_eq!(job.id, later.id);
}

async fn renew_extends_only_the_current_lease(store: DynStore) {
    setup(&store, "W1").await;
    store
        .enqueue_job(&new_job("W1", at(0), 3))
        .await
        .expect("enqueue");
    let (job, lease) = claim(&store, "w1", at(0)).await.expect("claim");
    store.renew_lease(&lease, at(30)).await.expect("renew");
    let stored = store.get_job(job.id).await.expect("get").expect("job");
    assert_eq!(stored.lease_expires_at, Some(at(30)));
    assert!(
        claim(&store, "w2", at(20)).await.is_none(),
        "a renewed lease has not expired"
    );
    let other_worker = Lease {
        worker: "w2".into(),
        ..lease.clone()
    };
    assert!(matches!(
        store.renew_lease(&other_worker, at(40)).await,
        Err(StoreError::Conflict(_))
    ));
    let other_attempt = Lease {
        attempt: 2,
        ..lease.clone()
    };
    assert!(matches!(
        store.renew_lease(&other_attempt, at(40)).await,
        Err(StoreError::Conflict(_))
    ));
    let a = analysis_for(&job, AnalysisStatus::Succeeded, json!({"elements": []}));
    store
        .complete_job(
            &lease,
            &JobOutcome::Analysis(Box::new(a)),
            &no_alerts,
            at(1),
        )
        .await
        .expect("complete");
    assert!(
        matches!(
            store.renew_lease(&lease, at(40)).await,
            Err(StoreError::Conflict(_))
        ),
        "an ended job has no lease to renew"
    );
    let stored = store.get_job(job.id).await.expect("get").expect("job");
    assert_eq!(
        stored.lease_expires_at, None,
        "the refused renewals wrote nothing"
    );
}

async fn complete_stores_exactly_one_analysis_linked_to_the_job(store: DynStore) {
    setup(&store, "W1").await;
    let all = subscription(None, &EventType::ALL, 0);
    store.insert_subscription(&all).await.expect("subscription");
    let (a, done) = run_job(
        &store,
        "W1",
        at(0),
        json!({"elements": [{"label": "E1"}]}),
        &no_alerts,
    )
    .await;
    let job = done.job;
    assert_eq!(job.status, JobStatus::Succeeded);
    assert_eq!(job.analysis_id, Some(a.id));
    assert_eq!(job.finished_at, Some(at(0)));
    assert_eq!(job.lease_expires_at, None);
    assert!(done.alert_events.is_empty());
    assert_eq!(
        done.deliveries, 1,
        "one analysis.finished to the subscription"
    );
    assert_eq!(store.get_job(job.id).await.expect("get"), Some(job.clone()));
    assert_eq!(
        store.get_analysis("W1", a.id).await.expect("get"),
        Some(a.clone())
    );
    let listed = store
        .list_analyses(
            "W1",
            &AnalysisQuery {
                limit: 10,
                ..AnalysisQuery::default()
            },
        )
        .await
        .expect("list");
    assert_eq!(listed.iter().map(|x| x.id).collect::<Vec<_>>(), [a.id]);
    let deliveries = store
        .list_deliveries(
            all.id,
            &DeliveryQuery {
                limit: 10,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("deliveries");
    assert_eq!(deliveries.len(), 1);
    assert_eq!(deliveries[0].event_type, EventType::AnalysisFinished);
    let lease = Lease {
        job_id: job.id,
        worker: "w1".into(),
        attempt: 1,
    };
    let again = analysis_for(&job, AnalysisStatus::Succeeded, json!({}));
    assert!(
        matches!(
            store
                .complete_job(
                    &lease,
                    &JobOutcome::Analysis(Box::new(again)),
                    &no_alerts,
                    at(1)
                )
                .await,
            Err(StoreError::Conflict(_))
        ),
        "a job completes once"
    );
    let listed = store
        .list_analyses(
            "W1",
            &AnalysisQuery {
                limit: 10,
                ..AnalysisQuery::default()
            },
        )
        .await
        .expect("list");
    assert_eq!(listed.len(), 1, "the refused completion stored nothing");
}

async fn a_failed_analysis_fails_the_job_with_an_analysis_failed_event(store: DynStore) {
    setup(&store, "W1").await;
    let failed_only = subscription(Some("W1"), &[EventType::AnalysisFailed], 0);
    store
        .insert_subscription(&failed_only)
        .await
        .expect("subscription");
    store
        .enqueue_job(&new_job("W1", at(0), 3))
        .await
        .expect("enqueue");
    let (job, lease) = claim(&store, "w1", at(0)).await.expect("claim");
    let a = analysis_for(&job, AnalysisStatus::Failed, json!(null));
    let done = store
        .complete_job(
            &lease,
            &JobOutcome::Analysis(Box::new(a.clone())),
            &no_alerts,
            at(1),
        )
        .await
        .expect("complete");
    assert_eq!(done.job.status, JobStatus::Failed);
    assert_eq!(done.job.analysis_id, Some(a.id));
    assert_eq!(done.deliveries, 1);
    let batch = store
        .claim_dispatch("d1", at(1), at(2), 10)
        .await
        .expect("dispatch")
        .expect("a due delivery");
    let (_, event) = &batch.items[0];
    assert_eq!(event.event_type, EventType::AnalysisFailed);
    assert_eq!(event.body["data"]["analysis_id"], json!(a.id));
    assert_eq!(event.body["data"]["error"], "collinear points");
}

async fn an_analysis_of_another_structure_writes_nothing(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    store
        .enqueue_job(&new_job("W1", at(0), 3))
        .await
        .expect("enqueue");
    let (job, lease) = claim(&store, "w1", at(0)).await.expect("claim");
    let mut a = analysis_for(&job, AnalysisStatus::Succeeded, json!({}));
    a.structure_id = "W2".into();
    assert!(matches!(
        store
            .complete_job(
                &lease,
                &JobOutcome::Analysis(Box::new(a.clone())),
                &no_alerts,
                at(1)
            )
            .await,
        Err(StoreError::Invalid(_))
    ));
    assert_eq!(store.get_analysis("W2", a.id).await.expect("get"), None);
    let stored = store.get_job(job.id).await.expect("get").expect("job");
    assert_eq!(stored, job, "the job is still running under its lease");
    let mut bad = analysis_for(&job, AnalysisStatus::Succeeded, json!({}));
    bad.result = None;
    assert!(matches!(
        store
            .complete_job(
                &lease,
                &JobOutcome::Analysis(Box::new(bad)),
                &no_alerts,
                at(1)
            )
            .await,
        Err(StoreError::Invalid(_))
    ));
    assert_eq!(store.get_job(job.id).await.expect("get"), Some(job));
}

async fn a_stale_lease_cannot_complete_and_the_job_keeps_one_result(store: DynStore) {
    setup(&store, "W1").await;
    store
        .enqueue_job(&new_job("W1", at(0), 3))
        .await
        .expect("enqueue");
    let (job, stale) = store
        .claim_job("w1", at(0), at(1))
        .await
        .expect("claim")
        .expect("job");
    // w1's lease expires at T0+1min; w2 claims the job again at T0+2min.
    let (again, current) = store
        .claim_job("w2", at(2), at(7))
        .await
        .expect("claim")
        .expect("the expired job");
    assert_eq!(again.id, job.id);
    assert_eq!(again.attempts, 2);
    assert_eq!(again.worker.as_deref(), Some("w2"));
    assert_eq!(again.errors.len(), 1);
    let lost = &again.errors[0];
    assert_eq!(
        (
            lost.attempt,
            lost.worker.as_str(),
            lost.error.as_str(),
            lost.at
        ),
        (1, "w1", "lease expired", at(2))
    );
    assert_eq!(current.attempt, 2);

    let late = analysis_for(&job, AnalysisStatus::Succeeded, json!({"from": "w1"}));
    assert!(matches!(
        store
            .complete_job(
                &stale,
                &JobOutcome::Analysis(Box::new(late.clone())),
                &no_alerts,
                at(3)
            )
            .await,
        Err(StoreError::Conflict(_))
    ));
    assert!(matches!(
        store.renew_lease(&stale, at(9)).await,
        Err(StoreError::Conflict(_))
    ));
    assert_eq!(
        store.get_job(job.id).await.expect("get"),
        Some(again.clone()),
        "the stale worker wrote nothing"
    );
    let error = JobOutcome::Error {
        error: "late".into(),
        retry_at: at(4),
    };
    assert!(matches!(
        store.complete_job(&stale, &error, &no_alerts, at(3)).await,
        Err(StoreError::Conflict(_))
    ));

    let good = analysis_for(&job, AnalysisStatus::Succeeded, json!({"from": "w2"}));
    let done = store
        .complete_job(
            &current,
            &JobOutcome::Analysis(Box::new(good.clone())),
            &no_alerts,
            at(4),
        )
        .await
        .expect("the current lease completes");
    assert_eq!(done.job.analysis_id, Some(good.id));
    let listed = store
        .list_analyses(
            "W1",
            &AnalysisQuery {
                limit: 10,
                ..AnalysisQuery::default()
            },
        )
        .await
        .expect("list");
    assert_eq!(
        listed.iter().map(|x| x.id).collect::<Vec<_>>(),
        [good.id],
        "exactly one analysis for the job"
    );
    assert_eq!(store.get_analysis("W1", late.id).await.expect("get"), None);
}

async fn error_outcomes_requeue_then_fail_with_an_analysis_failed_event(store: DynStore) {
    setup(&store, "W1").await;
    let failed_only = subscription(Some("W1"), &[EventType::AnalysisFailed], 0);
    store
        .insert_subscription(&failed_only)
        .await
        .expect("subscription");
    let queued = store
        .enqueue_job(&new_job("W1", at(0), 2))
        .await
        .expect("enqueue");
    let (_, lease) = claim(&store, "w1", at(0)).await.expect("claim");
    let first = JobOutcome::Error {
        error: "database went away".into(),
        retry_at: at(5),
    };
    let done = store
        .complete_job(&lease, &first, &no_alerts, at(1))
        .await
        .expect("error");
    let job = done.job;
    assert_eq!(job.status, JobStatus::Queued);
    assert_eq!(job.run_after, at(5));
    assert_eq!(job.lease_expires_at, None);
    assert_eq!(job.attempts, 1);
    assert_eq!(job.finished_at, None);
    assert_eq!(job.errors.len(), 1);
    assert_eq!(
        (
            job.errors[0].attempt,
            job.errors[0].worker.as_str(),
            job.errors[0].error.as_str()
        ),
        (1, "w1", "database went away")
    );
    assert_eq!(done.deliveries, 0, "a retry sends nothing");
    assert!(
        claim(&store, "w2", at(4)).await.is_none(),
        "not before run_after"
    );
    let (job, lease) = claim(&store, "w2", at(5)).await.expect("second attempt");
    assert_eq!((job.id, job.attempts, lease.attempt), (queued.id, 2, 2));
    let last = JobOutcome::Error {
        error: "worker stopped".into(),
        retry_at: at(10),
    };
    let done = store
        .complete_job(&lease, &last, &no_alerts, at(6))
        .await
        .expect("error");
    let job = done.job;
    assert_eq!(job.status, JobStatus::Failed);
    assert_eq!(job.finished_at, Some(at(6)));
    assert_eq!(job.analysis_id, None);
    assert_eq!(job.errors.len(), 2);
    assert_eq!(job.errors[1].error, "worker stopped");
    assert_eq!(done.deliveries, 1);
    assert!(
        claim(&store, "w3", at(20)).await.is_none(),
        "a failed job is not claimed"
    );
    let deliveries = store
        .list_deliveries(
            failed_only.id,
            &DeliveryQuery {
                limit: 10,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("deliveries");
    assert_eq!(deliveries.len(), 1);
    assert_eq!(deliveries[0].event_type, EventType::AnalysisFailed);
    let batch = store
        .claim_dispatch("d1", at(6), at(7), 10)
        .await
        .expect("dispatch")
        .expect("due");
    let body = &batch.items[0].1.body;
    assert_eq!(body["type"], "analysis.failed");
    assert_eq!(body["structure_id"], "W1");
    assert_eq!(body["data"]["job_id"], json!(queued.id));
    assert_eq!(body["data"]["analysis_id"], json!(null));
    assert_eq!(body["data"]["attempts"], 2);
    assert_eq!(body["data"]["error"], "worker stopped");
}

async fn an_expired_last_attempt_fails_the_job_at_the_next_claim(store: DynStore) {
    setup(&store, "W1").await;
    let all = subscription(None, &EventType::ALL, 0);
    store.insert_subscription(&all).await.expect("subscription");
    let once = store
        .enqueue_job(&new_job("W1", at(0), 1))
        .await
        .expect("enqueue");
    let next = store
        .enqueue_job(&new_job("W1", at(1), 1))
        .await
        .expect("enqueue");
    store
        .claim_job("w1", at(0), at(1))
        .await
        .expect("claim")
        .expect("job");
    // The lease of its only attempt expired: the next claim fails it and takes the next job.
    let (job, _) = store
        .claim_job("w2", at(3), at(8))
        .await
        .expect("claim")
        .expect("the next job");
    assert_eq!(job.id, next.id);
    let failed = store.get_job(once.id).await.expect("get").expect("job");
    assert_eq!(failed.status, JobStatus::Failed);
    assert_eq!(failed.attempts, 1);
    assert_eq!(failed.finished_at, Some(at(3)));
    assert_eq!(failed.errors.len(), 1);
    assert_eq!(failed.errors[0].error, "lease expired");
    assert_eq!(failed.errors[0].worker, "w1");
    let deliveries = store
        .list_deliveries(
            all.id,
            &DeliveryQuery {
                limit: 10,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("deliveries");
    assert_eq!(
        deliveries.iter().map(|d| d.event_type).collect::<Vec<_>>(),
        [EventType::AnalysisFailed]
    );
}

async fn batch_commit_queues_its_jobs_and_a_rolled_back_batch_none(store: DynStore) {
    setup(&store, "W1").await;
    let reading = |pts: &std::collections::HashMap<String, i64>, m| NewReading {
        point_key: pts["P1"],
        epoch: at(m),
        u: [0.001, 0.002, 0.0],
        sigma: None,
    };
    let meta = |jobs| BatchMeta {
        received_at: at(30),
        media_type: "application/json".into(),
        idempotency_key: None,
        body_sha256: "cd".repeat(32),
        jobs,
    };
    let mut w = store.begin_batch("W1", None).await.expect("begin");
    let pts = w.points();
    w.write(&[reading(&pts, 0), reading(&pts, 10)])
        .await
        .expect("write");
    let job_for = |batch_id, epoch| NewJob {
        origin: JobOrigin::Batch,
        batch_id: Some(batch_id),
        request: json!({"kind": "epoch", "epoch": epoch}),
        ..new_job("W1", at(30), 3)
    };
    let jobs = vec![
        job_for(w.batch_id(), "2026-11-30T06:00:00Z"),
        job_for(w.batch_id(), "2026-11-30T06:10:00Z"),
    ];
    let batch = w.commit(meta(jobs.clone())).await.expect("commit");
    let listed = store
        .list_jobs("W1", &q(None, None, 10))
        .await
        .expect("list");
    assert_eq!(listed.len(), 2);
    for j in &jobs {
        let stored = store.get_job(j.id).await.expect("get").expect("queued");
        assert_eq!(stored.origin, JobOrigin::Batch);
        assert_eq!(stored.batch_id, Some(batch.id));
        assert_eq!(stored.status, JobStatus::Queued);
        assert_eq!(stored.request, j.request);
    }

    // A writer dropped without commit rolls its jobs back with its readings.
    let mut w = store.begin_batch("W1", None).await.expect("begin");
    let pts = w.points();
    w.write(&[reading(&pts, 20)]).await.expect("write");
    drop(w);
    // A commit that fails (no readings) queues nothing either.
    let w = store.begin_batch("W1", None).await.expect("begin");
    let refused = job_for(w.batch_id(), "2026-11-30T06:20:00Z");
    assert!(matches!(
        w.commit(meta(vec![refused.clone()])).await,
        Err(StoreError::Invalid(_))
    ));
    // A job of another structure in a batch's meta is refused, with the whole batch.
    setup(&store, "W2").await;
    let mut w = store.begin_batch("W1", None).await.expect("begin");
    let pts = w.points();
    w.write(&[reading(&pts, 40)]).await.expect("write");
    let foreign = NewJob {
        structure_id: "W2".into(),
        ..job_for(w.batch_id(), "2026-11-30T06:40:00Z")
    };
    assert!(matches!(
        w.commit(meta(vec![foreign])).await,
        Err(StoreError::Invalid(_))
    ));
    assert_eq!(store.get_job(refused.id).await.expect("get"), None);
    let listed = store
        .list_jobs("W1", &q(None, None, 10))
        .await
        .expect("list");
    assert_eq!(listed.len(), 2, "only the committed batch queued jobs");
    assert!(
        store
            .readings_at("W1", at(40))
            .await
            .expect("readings")
            .is_empty()
    );
    assert_eq!(
        store
            .list_batches("W1", None, 10)
            .await
            .expect("batches")
            .len(),
        1
    );
}

async fn auto_analysis_is_set_replaced_and_removed(store: DynStore) {
    let config = json!({"method": {"kind": "delaunay"}, "baseline": "reference"});
    assert!(matches!(
        store.put_auto_analysis("NOPE", Some(&config)).await,
        Err(StoreError::NotFound(_))
    ));
    assert!(matches!(
        store.put_auto_analysis("NOPE", None).await,
        Err(StoreError::NotFound(_))
    ));
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    assert_eq!(store.get_auto_analysis("W1").await.expect("get"), None);
    store
        .put_auto_analysis("W1", Some(&config))
        .await
        .expect("set");
    assert_eq!(
        store.get_auto_analysis("W1").await.expect("get"),
        Some(config.clone())
    );
    assert_eq!(store.get_auto_analysis("W2").await.expect("get"), None);
    let replaced = json!({"method": {"kind": "groups"}});
    store
        .put_auto_analysis("W1", Some(&replaced))
        .await
        .expect("replace");
    assert_eq!(
        store.get_auto_analysis("W1").await.expect("get"),
        Some(replaced)
    );
    store.put_auto_analysis("W1", None).await.expect("remove");
    assert_eq!(store.get_auto_analysis("W1").await.expect("get"), None);
    store
        .put_auto_analysis("W1", None)
        .await
        .expect("removing twice is fine");
}

async fn delete_structure_removes_jobs_rules_events_and_deliveries(store: DynStore) {
    setup(&store, "W1").await;
    setup(&store, "W2").await;
    let global = subscription(None, &EventType::ALL, 0);
    let own = subscription(Some("W1"), &EventType::ALL, 1);
    store.insert_subscription(&global).await.expect("global");
    store.insert_subscription(&own).await.expect("own");
    store
        .put_auto_analysis("W1", Some(&json!({"method": {"kind": "delaunay"}})))
        .await
        .expect("auto");
    let rule = crate::alerts::rule("W1", 0);
    store.put_alert_rule(&rule).await.expect("rule");
    let (_, done) = run_job(
        &store,
        "W1",
        at(0),
        crate::alerts::doc(&[("E1", 900.0)]),
        &crate::alerts::threshold_evaluator,
    )
    .await;
    assert_eq!(done.alert_events.len(), 1, "E1 raised");
    assert_eq!(
        done.deliveries, 4,
        "analysis.finished + alert.raised to two subscriptions"
    );
    let (_, w2) = run_job(&store, "W2", at(1), json!({"elements": []}), &no_alerts).await;
    assert!(store.delete_structure("W1").await.expect("delete"));

    assert_eq!(store.get_job(done.job.id).await.expect("get"), None);
    assert_eq!(store.get_subscription(own.id).await.expect("get"), None);
    let left = store
        .list_deliveries(
            global.id,
            &DeliveryQuery {
                limit: 10,
                ..DeliveryQuery::default()
            },
        )
        .await
        .expect("deliveries");
    assert_eq!(
        left.iter().map(|d| d.event_type).collect::<Vec<_>>(),
        [EventType::AnalysisFinished],
        "only W2's event is left for the global subscription"
    );
    assert!(
        store
            .get_subscription(global.id)
            .await
            .expect("get")
            .is_some()
    );
    assert_eq!(
        store
            .get_job(w2.job.id)
            .await
            .expect("get")
            .map(|j| j.status),
        Some(JobStatus::Succeeded)
    );
    // (Everything else of W1 went with it: the foreign keys cascade, and a missing
    // cascade would have made the delete itself fail.)
}

/// Many workers, each with its own connection pool (as in several server processes),
/// against one PostgreSQL database: `FOR UPDATE SKIP LOCKED` hands every job to exactly
/// one of them. PostgreSQL only: SQLite has one writer at a time by construction.
mod postgres_only {
    use std::collections::HashSet;

    use kinema_server::model::{AnalysisQuery, AnalysisStatus, JobOutcome, JobQuery, JobStatus};
    use kinema_server::store::Store;
    use kinema_server::store::postgres::PgStore;
    use kinema_tests::db::PgSchema;
    use serde_json::json;
    use time::Duration;

    use super::{analysis_for, at, new_job, no_alerts};

    const JOBS: usize = 200;
    const WORKERS: usize = 4;

    #[tokio::test]
    async fn workers_in_separate_pools_complete_every_job_once() {
        let schema = PgSchema::create("jobs_workers").await;
        let admin = PgStore::connect(&schema.url).await.expect("connect");
        admin.migrate().await.expect("migrate");
        admin
            .put_structure(&crate::structures::structure("W1", 2))
            .await
            .expect("structure");
        for i in 0..JOBS {
            let m = i64::try_from(i).expect("small");
            admin
                .enqueue_job(&new_job("W1", at(0) + Duration::milliseconds(m), 3))
                .await
                .expect("enqueue");
        }
        let mut tasks = Vec::new();
        for w in 0..WORKERS {
            let url = schema.url.clone();
            tasks.push(tokio::spawn(async move {
                let store = PgStore::connect(&url).await.expect("own pool");
                let worker = format!("worker-{w}");
                let mut done = Vec::new();
                while let Some((job, lease)) = store
                    .claim_job(&worker, at(10), at(20))
                    .await
                    .expect("claim")
                {
                    let a = analysis_for(&job, AnalysisStatus::Succeeded, json!({"by": worker}));
                    store
                        .complete_job(
                            &lease,
                            &JobOutcome::Analysis(Box::new(a)),
                            &no_alerts,
                            at(11),
                        )
                        .await
                        .expect("a current lease completes");
                    done.push(job.id);
                }
                done
            }));
        }
        let mut per_worker = Vec::new();
        for t in tasks {
            per_worker.push(t.await.expect("worker task"));
        }
        let claimed: Vec<_> = per_worker.iter().flatten().copied().collect();
        let distinct: HashSet<_> = claimed.iter().copied().collect();
        assert_eq!(claimed.len(), JOBS, "every job was claimed once");
        assert_eq!(distinct.len(), JOBS, "no job was claimed twice");
        let took_part = per_worker.iter().filter(|d| !d.is_empty()).count();
        assert!(
            took_part > 1,
            "more than one worker took part: {per_worker:?}"
        );

        let jobs = admin
            .list_jobs(
                "W1",
                &JobQuery {
                    limit: JOBS + 1,
                    ..JobQuery::default()
                },
            )
            .await
            .expect("jobs");
        assert_eq!(jobs.len(), JOBS);
        assert!(jobs.iter().all(|j| j.status == JobStatus::Succeeded
            && j.attempts == 1
            && j.errors.is_empty()
            && j.analysis_id.is_some()));
        let analyses = admin
            .list_analyses(
                "W1",
                &AnalysisQuery {
                    limit: JOBS + 1,
                    ..AnalysisQuery::default()
                },
            )
            .await
            .expect("analyses");
        assert_eq!(analyses.len(), JOBS, "one analysis per job");
        let linked: HashSet<_> = jobs.iter().filter_map(|j| j.analysis_id).collect();
        assert!(analyses.iter().all(|a| linked.contains(&a.id)));
        drop(admin);
        schema.drop_schema().await;
    }
}
