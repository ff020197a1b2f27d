//! Durable analysis jobs across real `kinema serve` processes: a worker killed in the
//! middle of a job (the job runs again once its lease has expired, and exactly one
//! result is stored), and two processes sharing 200 jobs on one PostgreSQL database
//! (every job runs once, and both take part).
//!
//! The strain checked is that of a homogeneous displacement field `u = G·x`, which every
//! constant-strain triangle recovers exactly: `ε = (G + Gᵀ)/2` (textbook continuum
//! mechanics).

use std::collections::{BTreeMap, BTreeSet};
use std::time::Duration;

use kinema_tests::e2e;
use kinema_tests::http::Request;
use kinema_tests::server::{Server, TestDb, create_key, wait_for};
use serde_json::{Value, json};

e2e!(a_killed_worker_loses_its_job_to_another_after_the_lease);

/// exx = 300 µε, eyy = −100 µε, exy = 50 µε as a displacement gradient (dimensionless).
const G: [[f64; 2]; 2] = [[300e-6, 40e-6], [60e-6, -100e-6]];
const EPOCH: &str = "2026-05-04T06:00:00Z";

/// Structure `id` (local frame, metres) with six points, and one batch at [`EPOCH`]
/// of the field `u = G·x`.
fn seed(server: &Server, token: &str, id: &str) {
    let r = server.send(
        &Request::new("PUT", &format!("/v1/structures/{id}"))
            .bearer(token)
            .json(&json!({"name": "Invented culvert wall", "dimension": 2,
                          "frame": {"kind": "local"}, "length_unit": "m"})),
    );
    assert!(r.status == 201 || r.status == 200, "{}", r.text());
    let xs = [
        [0.0, 0.0],
        [10.0, 0.0],
        [0.0, 8.0],
        [10.0, 8.0],
        [5.0, 4.0],
        [3.0, 7.0],
    ];
    let points: Vec<Value> = xs
        .iter()
        .enumerate()
        .map(|(i, x)| json!({"id": format!("P{i}"), "x": x}))
        .collect();
    let r = server.send(
        &Request::new("PUT", &format!("/v1/structures/{id}/points"))
            .bearer(token)
            .json(&json!({"points": points})),
    );
    assert_eq!(r.status, 200, "{}", r.text());
    let readings: Vec<Value> = xs
        .iter()
        .enumerate()
        .map(|(i, x)| {
            let u = [
                G[0][0] * x[0] + G[0][1] * x[1],
                G[1][0] * x[0] + G[1][1] * x[1],
            ];
            json!({"point_id": format!("P{i}"), "epoch": EPOCH, "u": u})
        })
        .collect();
    let r = server.send(
        &Request::new("POST", &format!("/v1/structures/{id}/batches"))
            .bearer(token)
            .json(&json!({"readings": readings})),
    );
    assert_eq!(r.status, 201, "{}", r.text());
}

/// Queue an epoch analysis; returns the job.
fn queue(server: &Server, token: &str, id: &str) -> Value {
    let r = server.send(
        &Request::new("POST", &format!("/v1/structures/{id}/analyses"))
            .bearer(token)
            .json(&json!({"kind": "epoch", "epoch": EPOCH, "method": {"kind": "delaunay"}})),
    );
    assert_eq!(r.status, 202, "{}", r.text());
    r.json()
}

fn job(server: &Server, token: &str, id: &str, job: &str) -> Value {
    let r =
        server.send(&Request::new("GET", &format!("/v1/structures/{id}/jobs/{job}")).bearer(token));
    assert_eq!(r.status, 200, "{}", r.text());
    r.json()
}

/// Every analysis of structure `id` (all pages).
fn analyses(server: &Server, token: &str, id: &str) -> Vec<Value> {
    let mut out = Vec::new();
    let mut path = format!("/v1/structures/{id}/analyses?limit=1000");
    loop {
        let r = server.send(&Request::new("GET", &path).bearer(token));
        assert_eq!(r.status, 200, "{}", r.text());
        let page = r.json();
        out.extend(page["items"].as_array().cloned().unwrap_or_default());
        match page["next_cursor"].as_str() {
            Some(c) => path = format!("/v1/structures/{id}/analyses?limit=1000&cursor={c}"),
            None => return out,
        }
    }
}

fn a_killed_worker_loses_its_job_to_another_after_the_lease(db: &TestDb) {
    // Worker A pauses 30 s inside every job (fault injection), far longer than its
    // lease of 1.5 s: it is killed while it holds the job.
    let mut a = Server::start_with(
        &db.url,
        &[
            "--job-workers",
            "1",
            "--job-lease-ms",
            "1500",
            "--job-fault-pause-ms",
            "30000",
            "--job-poll-ms",
            "50",
        ],
    );
    let key = create_key(&db.url, "write", &[]);
    let t = key.token.as_str();
    seed(&a, t, "CW-1");
    let queued = queue(&a, t, "CW-1");
    let jid = queued["id"].as_str().expect("job id").to_owned();
    let running = wait_for(Duration::from_secs(20), "worker A to claim the job", || {
        let j = job(&a, t, "CW-1", &jid);
        (j["status"] == "running").then_some(j)
    });
    assert_eq!(running["attempts"], 1);
    let a_worker = running["worker"].as_str().expect("worker").to_owned();
    assert!(a_worker.contains(&format!(":{}:", a.pid())), "{a_worker}");
    a.kill();

    // Worker B on the same database takes the job over once A's lease has expired.
    let b = Server::start_with(
        &db.url,
        &[
            "--job-workers",
            "1",
            "--job-lease-ms",
            "1500",
            "--job-poll-ms",
            "50",
        ],
    );
    let done = wait_for(
        Duration::from_secs(30),
        "worker B to finish the job",
        || {
            let j = job(&b, t, "CW-1", &jid);
            j["status"]
                .as_str()
                .is_some_and(|s| s == "succeeded" || s == "failed")
                .then_some(j)
        },
    );
    assert_eq!(done["status"], "succeeded", "{done}");
    assert_eq!(done["attempts"], 2, "{done}");
    assert!(
        done["worker"]
            .as_str()
            .is_some_and(|w| w.contains(&format!(":{}:", b.pid()))),
        "{done}"
    );
    let errors = done["errors"].as_array().expect("errors");
    assert_eq!(errors.len(), 1, "{done}");
    assert_eq!(errors[0]["attempt"], 1);
    assert_eq!(errors[0]["worker"], a_worker.as_str());
    assert_eq!(errors[0]["error"], "lease expired");

    // Exactly one analysis, the job's, with the field's strain.
    let list = analyses(&b, t, "CW-1");
    assert_eq!(list.len(), 1, "{list:?}");
    assert_eq!(list[0]["id"], done["analysis_id"]);
    let r = b.send(
        &Request::new(
            "GET",
            &format!(
                "/v1/structures/CW-1/analyses/{}/result",
                list[0]["id"].as_str().expect("id")
            ),
        )
        .bearer(t),
    );
    assert_eq!(r.status, 200);
    let doc = r.json();
    for row in doc["elements"].as_array().expect("elements") {
        let exx = row["exx_microstrain"].as_f64().expect("exx");
        let exy = row["exy_microstrain"].as_f64().expect("exy");
        assert!((exx - 300.0).abs() < 1e-6, "{row}");
        assert!((exy - 50.0).abs() < 1e-6, "{row}");
    }
}

/// Two processes on one PostgreSQL database, 200 jobs: every job runs exactly once
/// (one attempt, one analysis, 200 distinct analyses), and both processes took part.
#[test]
fn two_processes_share_two_hundred_jobs_on_postgres() {
    let db = TestDb::postgres("two_processes");
    // Each attempt pauses 20 ms (fault injection) so that neither process can empty the
    // queue alone before the other looks at it.
    let flags = [
        "--job-workers",
        "2",
        "--job-poll-ms",
        "50",
        "--job-fault-pause-ms",
        "20",
    ];
    let a = Server::start_with(&db.url, &flags);
    let b = Server::start_with(&db.url, &flags);
    let key = create_key(&db.url, "write", &[]);
    let t = key.token.as_str();
    seed(&a, t, "CW-2");
    let ids: Vec<String> = (0..200)
        .map(|i| {
            let via = if i % 2 == 0 { &a } else { &b };
            queue(via, t, "CW-2")["id"].as_str().expect("id").to_owned()
        })
        .collect();
    let ended = wait_for(Duration::from_secs(120), "200 jobs to end", || {
        let r = a.send(&Request::new("GET", "/v1/structures/CW-2/jobs?limit=1000").bearer(t));
        let items = r.json()["items"].as_array().cloned().unwrap_or_default();
        let done = items
            .iter()
            .filter(|j| j["status"] == "succeeded" || j["status"] == "failed")
            .count();
        (done == 200).then_some(Value::Array(items))
    });
    let jobs = ended.as_array().expect("jobs");
    assert_eq!(jobs.len(), 200);
    let listed: BTreeSet<&str> = jobs.iter().filter_map(|j| j["id"].as_str()).collect();
    assert_eq!(listed, ids.iter().map(String::as_str).collect());
    let mut by_process: BTreeMap<String, usize> = BTreeMap::new();
    let mut analysis_ids = BTreeSet::new();
    for j in jobs {
        assert_eq!(j["status"], "succeeded", "{j}");
        assert_eq!(j["attempts"], 1, "ran more than once: {j}");
        assert!(j["errors"].as_array().is_some_and(Vec::is_empty), "{j}");
        let w = j["worker"].as_str().expect("worker");
        let pid = w
            .split(':')
            .nth(1)
            .expect("pid in the worker name")
            .to_owned();
        *by_process.entry(pid).or_default() += 1;
        analysis_ids.insert(j["analysis_id"].as_str().expect("analysis").to_owned());
    }
    assert_eq!(analysis_ids.len(), 200, "one analysis per job");
    let stored = analyses(&a, t, "CW-2");
    assert_eq!(stored.len(), 200, "no analysis stored twice");
    let (pa, pb) = (a.pid().to_string(), b.pid().to_string());
    assert_eq!(
        by_process.keys().cloned().collect::<BTreeSet<_>>(),
        BTreeSet::from([pa.clone(), pb.clone()]),
        "{by_process:?}"
    );
    eprintln!(
        "jobs run: process A {} / process B {}",
        by_process[&pa], by_process[&pb]
    );
}
