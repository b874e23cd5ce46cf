//! Many processes on one queue: a service that only serves HTTP and
//! `proctor worker` processes, all on one PostgreSQL database and one S3
//! bucket (a real S3-compatible server), each with its own data dir, as a
//! team would deploy them across machines. Claims are leases that lapse
//! when their worker dies; workers take only evaluations whose `runs_on`
//! labels they carry.

use std::collections::{BTreeMap, BTreeSet};
use std::time::{Duration, Instant};

use serde_json::{Value, json};

use crate::harness::Server;
use crate::objects::S3Server;
use crate::postgres::fresh_database;
use crate::support::case_dir;
use crate::worker::{Shared, Worker};

const LONG: Duration = Duration::from_secs(180);
/// Short leases, so that a killed worker's claim lapses within the test.
const LEASE: [&str; 2] = ["--lease-seconds", "4"];

/// The prefix of this test's blobs in the bucket.
const PREFIX: &str = "team-a";

/// A service with no workers of its own on a fresh database and bucket.
struct Cluster {
    dir: tempfile::TempDir,
    s3: S3Server,
    shared: Shared,
    api: Server,
}

impl Cluster {
    fn start() -> Cluster {
        let dir = tempfile::tempdir().unwrap();
        let s3 = S3Server::start();
        let shared = Shared {
            database_url: fresh_database(),
            blob_store: s3.url(PREFIX),
            cpu_lock: dir.path().join("cpu.lock"),
            env: s3.env(),
        };
        let api = Cluster::service(&dir, &shared, "api");
        Cluster {
            dir,
            s3,
            shared,
            api,
        }
    }

    /// Another HTTP-only service on the same database and bucket.
    fn service(dir: &tempfile::TempDir, shared: &Shared, name: &str) -> Server {
        let data_dir = dir.path().join(name);
        std::fs::create_dir_all(&data_dir).unwrap();
        let flags = shared.serve_flags(0);
        let flags: Vec<&str> = flags.iter().map(String::as_str).collect();
        Server::start_with_env(&data_dir, &flags, &shared.env)
    }

    fn worker(&self, name: &str, extra: &[&str], hold_at: Option<&str>) -> Worker {
        let mut flags = LEASE.to_vec();
        flags.extend_from_slice(extra);
        Worker::start(&self.shared, &self.dir.path().join(name), &flags, hold_at)
    }

    /// The MLP case's teacher, wide student and set, uploaded.
    async fn mlp(&self) -> (String, String, String) {
        mlp_on(&self.api).await
    }

    async fn workers(&self) -> Vec<Value> {
        let a = self.api.get("/v1/workers").await;
        assert_eq!(a.status, 200, "{}", a.body);
        a.body["items"].as_array().unwrap().clone()
    }

    /// Polls the workers list until `pred` holds of it.
    async fn wait_workers(&self, what: &str, pred: impl Fn(&[Value]) -> bool) -> Vec<Value> {
        let start = Instant::now();
        loop {
            let w = self.workers().await;
            if pred(&w) {
                return w;
            }
            assert!(start.elapsed() < LONG, "never saw {what}: {w:?}");
            tokio::time::sleep(Duration::from_millis(50)).await;
        }
    }
}

async fn mlp_on(s: &Server) -> (String, String, String) {
    let case = case_dir("mlp");
    (
        s.model_id(&case.join("teacher.onnx")).await,
        s.model_id(&case.join("student_wide.onnx")).await,
        s.dataset_id(&case.join("data.npz")).await,
    )
}

fn request(ids: &(String, String, String), extra: Value) -> Value {
    let mut body = json!({"teacher": ids.0, "students": [ids.1], "dataset": ids.2,
                          "latency": {"warmup": 0, "iterations": 5}});
    for (k, v) in extra.as_object().unwrap() {
        body[k] = v.clone();
    }
    body
}

async fn create(s: &Server, body: &Value) -> String {
    let a = s.create_evaluation(body).await;
    assert_eq!(a.status, 202, "{}", a.body);
    a.body["id"].as_str().unwrap().to_string()
}

/// The figures of a report that do not depend on the clock or on which
/// store holds the models: fidelity, accuracy and size, per model file.
pub fn figures(report: &Value) -> Value {
    let entry = |e: &Value| {
        json!({"sha256": e["model"]["sha256"], "fidelity": e["fidelity"],
               "accuracy": e["accuracy"], "size": e["size"], "slices": e["slices"]})
    };
    json!({
        "teacher": entry(&report["teacher"]),
        "candidates": report["candidates"].as_array().unwrap().iter().map(entry).collect::<Vec<_>>(),
        "dataset": {"samples": report["dataset"]["samples"], "has_labels": report["dataset"]["has_labels"]},
    })
}

fn uuid_of(v: &Value) -> String {
    v.as_str()
        .unwrap_or_else(|| panic!("not an id: {v}"))
        .to_string()
}

#[tokio::test]
async fn a_worker_killed_mid_evaluation_loses_its_lease_and_another_worker_finishes_it_with_the_same_figures()
 {
    let c = Cluster::start();
    let ids = c.mlp().await;
    let mut first = c.worker("first", &[], Some("timing"));
    let id = create(&c.api, &request(&ids, json!({}))).await;
    let running = c.api.wait_stage(&id, "timing", LONG).await;
    let first_id = uuid_of(&running["worker"]);
    let listed = c
        .wait_workers("the first worker running it", |w| {
            w.iter().any(|w| w["evaluation"] == id.as_str())
        })
        .await;
    assert_eq!(listed.len(), 1, "{listed:?}");
    assert_eq!(uuid_of(&listed[0]["id"]), first_id);

    let second = c.worker("second", &[], None);
    first.kill9();
    let done = c.api.wait_finished(&id, LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    assert_eq!(done["attempts"], 2, "the killed attempt counts: {done}");
    let second_id = uuid_of(&done["worker"]);
    assert_ne!(second_id, first_id, "the other worker finished it");
    let report = c
        .api
        .get(&format!("/v1/evaluations/{id}/report"))
        .await
        .body;
    assert_eq!(report["environment"]["worker"]["id"], second_id.as_str());
    assert!(
        !report["environment"]["worker"]["hostname"]
            .as_str()
            .unwrap()
            .is_empty()
    );
    assert!(
        second.log().contains("claimed"),
        "the second worker's log:\n{}",
        second.log()
    );

    // The same request on SQLite and a folder, in one process.
    let alone = Server::start(&[]);
    let alone_ids = mlp_on(&alone).await;
    let reference = create(&alone, &request(&alone_ids, json!({}))).await;
    assert_eq!(
        alone.wait_finished(&reference, LONG).await["status"],
        "succeeded"
    );
    let want = alone
        .get(&format!("/v1/evaluations/{reference}/report"))
        .await
        .body;
    assert_eq!(figures(&report), figures(&want));
    assert!(
        want["environment"].get("worker").is_none(),
        "a service's own workers are not named: {}",
        want["environment"]
    );
}

/// Evaluation ids in the `claimed` lines of a worker's log.
fn claims_in(log: &str) -> Vec<String> {
    log.lines()
        .filter(|l| l.contains("claimed"))
        .filter_map(|l| l.split("id=").nth(1))
        .map(|rest| rest.chars().take(36).collect())
        .collect()
}

#[tokio::test]
async fn many_small_evaluations_across_three_workers_each_run_once_by_one_worker() {
    let c = Cluster::start();
    let ids = c.mlp().await;
    let workers: Vec<Worker> = ["w1", "w2", "w3"]
        .iter()
        .map(|n| c.worker(n, &[], None))
        .collect();
    c.wait_workers("three workers", |w| w.len() == 3).await;
    let mut evaluations = Vec::new();
    for i in 0..12 {
        let body = request(
            &ids,
            json!({"tags": {"n": i.to_string()},
                                        "latency": {"warmup": 0, "iterations": 3}}),
        );
        evaluations.push(create(&c.api, &body).await);
    }
    let mut ran_on = BTreeMap::new();
    for id in &evaluations {
        let done = c.api.wait_finished(id, LONG).await;
        assert_eq!(done["status"], "succeeded", "{done}");
        assert_eq!(done["attempts"], 1, "claimed once: {done}");
        ran_on.insert(id.clone(), uuid_of(&done["worker"]));
    }
    // Every claim any worker logged, over all three: each evaluation once.
    let mut claims: Vec<String> = workers.iter().flat_map(|w| claims_in(&w.log())).collect();
    claims.sort();
    let wanted: BTreeSet<&String> = evaluations.iter().collect();
    assert_eq!(claims.len(), evaluations.len(), "{claims:?}");
    assert_eq!(claims.iter().collect::<BTreeSet<_>>(), wanted);
    let listed: BTreeSet<String> = c
        .workers()
        .await
        .iter()
        .map(|w| uuid_of(&w["id"]))
        .collect();
    for worker in ran_on.values() {
        assert!(listed.contains(worker), "{worker} is not a listed worker");
    }
}

#[tokio::test]
async fn an_evaluation_that_asks_for_labels_waits_saying_so_until_a_worker_carries_them() {
    let c = Cluster::start();
    let ids = c.mlp().await;
    let _plain = c.worker("plain", &[], None);
    let id = create(
        &c.api,
        &request(&ids, json!({"runs_on": {"pool": "edge-arm"}})),
    )
    .await;
    // Another evaluation with no labels runs meanwhile on the plain worker.
    let free = create(&c.api, &request(&ids, json!({}))).await;
    assert_eq!(
        c.api.wait_finished(&free, LONG).await["status"],
        "succeeded"
    );
    let waiting = c.api.evaluation(&id).await;
    assert_eq!(waiting["status"], "queued", "{waiting}");
    assert_eq!(waiting["progress"]["stage"], "waiting");
    assert_eq!(
        waiting["progress"]["waiting_for"],
        json!({"pool": "edge-arm"})
    );
    assert_eq!(waiting["request"]["runs_on"], json!({"pool": "edge-arm"}));

    let edge = c.worker("edge", &["--labels", "pool=edge-arm,cpu=cortex-a72"], None);
    let done = c.api.wait_finished(&id, LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    assert!(done["progress"].get("waiting_for").is_none(), "{done}");
    let report = c
        .api
        .get(&format!("/v1/evaluations/{id}/report"))
        .await
        .body;
    assert_eq!(report["settings"]["runs_on"], json!({"pool": "edge-arm"}));
    assert_eq!(
        report["environment"]["worker"]["labels"],
        json!({"pool": "edge-arm", "cpu": "cortex-a72"})
    );
    assert!(edge.log().contains(&id), "the labelled worker ran it");
    let listed = c.workers().await;
    assert_eq!(listed.len(), 2, "{listed:?}");
    for w in &listed {
        for field in [
            "id",
            "hostname",
            "cpu",
            "labels",
            "started_at",
            "heartbeat_at",
        ] {
            assert!(!w[field].is_null(), "{field} missing: {w}");
        }
        assert!(w.as_object().unwrap().contains_key("evaluation"), "{w}");
    }
}

#[tokio::test]
async fn runs_on_labels_that_cannot_be_written_as_key_value_are_refused() {
    let c = Cluster::start();
    let ids = c.mlp().await;
    for bad in [
        json!({"pool": "a=b"}),
        json!({"": "x"}),
        json!({"pool": ""}),
        json!({"pool": 3}),
    ] {
        let a = c
            .api
            .create_evaluation(&request(&ids, json!({"runs_on": bad})))
            .await;
        assert!(
            matches!(a.status, 400 | 422),
            "{bad}: {} {}",
            a.status,
            a.body
        );
    }
}

#[tokio::test]
async fn a_service_without_workers_is_ready_only_while_a_worker_is_alive() {
    let c = Cluster::start();
    let a = c.api.get("/readyz").await;
    assert_eq!(a.status, 503, "{}", a.body);
    assert!(
        a.body["detail"].as_str().unwrap().contains("worker"),
        "{}",
        a.body
    );
    let mut w = c.worker("only", &[], None);
    assert_eq!(c.api.get("/readyz").await.status, 200);
    assert!(w.terminate().success());
    assert!(
        c.workers().await.is_empty(),
        "a worker that stops leaves the list"
    );
    assert_eq!(c.api.get("/readyz").await.status, 503);
}

#[tokio::test]
async fn a_cancel_through_the_service_stops_the_run_on_the_worker_that_holds_it() {
    let c = Cluster::start();
    let ids = c.mlp().await;
    let w = c.worker("held", &[], Some("bulk"));
    let id = create(&c.api, &request(&ids, json!({}))).await;
    c.api.wait_stage(&id, "bulk", LONG).await;
    c.wait_workers("the worker running it", |w| {
        w.len() == 1 && w[0]["evaluation"] == id.as_str()
    })
    .await;
    let a = c.api.delete(&format!("/v1/evaluations/{id}")).await;
    assert_eq!(a.status, 200, "{}", a.body);
    c.wait_workers("the worker idle again", |w| {
        w.len() == 1 && w[0]["evaluation"].is_null()
    })
    .await;
    assert!(
        w.log().contains("no longer ours"),
        "the worker stopped on its renewal:\n{}",
        w.log()
    );
    assert_eq!(c.api.evaluation(&id).await["status"], "canceled");
    // It takes the next evaluation.
    w.release();
    let next = create(&c.api, &request(&ids, json!({}))).await;
    assert_eq!(
        c.api.wait_finished(&next, LONG).await["status"],
        "succeeded"
    );
}

#[tokio::test]
async fn blobs_in_object_storage_are_stored_once_per_content_and_leave_with_their_record() {
    let c = Cluster::start();
    let file = case_dir("mlp").join("student_narrow.onnx");
    let first = c.api.upload_model(&file, "narrow").await;
    assert_eq!(first.status, 201, "{}", first.body);
    let sha = first.body["sha256"].as_str().unwrap().to_string();
    assert_eq!(c.s3.objects(PREFIX, "models"), [sha.as_str()]);
    let written = c.s3.modified(PREFIX, "models", &sha);
    // The same bytes through another service: the stored record, the object
    // left as it was.
    let other = Cluster::service(&c.dir, &c.shared, "api-2");
    let again = other.upload_model(&file, "narrow again").await;
    assert_eq!(again.status, 200, "{}", again.body);
    assert_eq!(again.body["id"], first.body["id"]);
    assert_eq!(c.s3.objects(PREFIX, "models"), [sha.as_str()]);
    assert_eq!(
        c.s3.modified(PREFIX, "models", &sha),
        written,
        "not written again"
    );
    let set = c
        .api
        .upload_dataset(&case_dir("mlp").join("data.npz"), "frames")
        .await;
    assert_eq!(set.status, 201, "{}", set.body);
    assert_eq!(c.s3.objects(PREFIX, "datasets").len(), 1);
    assert_eq!(c.api.get("/readyz").await.status, 503, "no worker yet");
    let _w = c.worker("w", &[], None);
    assert_eq!(c.api.get("/readyz").await.status, 200);

    let id = first.body["id"].as_str().unwrap();
    assert_eq!(other.delete(&format!("/v1/models/{id}")).await.status, 204);
    assert!(
        c.s3.objects(PREFIX, "models").is_empty(),
        "the object went with its record"
    );
}
