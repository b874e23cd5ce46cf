#![allow(unreachable_pub)]
//! Queue benchmark: prints figures, asserts nothing. Run with
//! `cargo bench --bench queue`. It starts real processes on loopback: a
//! PostgreSQL cluster (`.ci/postgres`, under target/pg-test), an
//! S3-compatible server (s3s-fs, `.ci/s3-server`), one `serve --workers 0`
//! and `proctor worker` processes.
//!
//! 1. Queue throughput with 1, 2 and 4 workers on tiny models (the MLP
//!    fixture, 3 timed rounds): evaluations per minute over a backlog of
//!    24, and the pickup latency of an evaluation sent to an idle pool
//!    (creation to claim, `started_at − created_at`), median of 10.
//! 2. One evaluation's wall time (creation to finish) on PostgreSQL + S3
//!    against SQLite + a folder in one process, the same request, median of
//!    5 after one warm-up (the first on S3 also fetches the files).

#[path = "../tests/support/server.rs"]
#[allow(dead_code)]
mod harness;
#[path = "../tests/support/objects.rs"]
mod objects;
#[path = "../tests/support/postgres.rs"]
mod postgres;
#[path = "../tests/support/worker.rs"]
mod worker;

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use serde_json::{Value, json};
use time::OffsetDateTime;
use time::format_description::well_known::Rfc3339;

use harness::Server;
use objects::S3Server;
use worker::{Shared, Worker};

const LONG: Duration = Duration::from_secs(600);

fn case(file: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/cases/mlp")
        .join(file)
}

async fn upload(s: &Server) -> Value {
    let teacher = s.model_id(&case("teacher.onnx")).await;
    let student = s.model_id(&case("student_narrow.onnx")).await;
    let set = s.dataset_id(&case("data.npz")).await;
    json!({"teacher": teacher, "students": [student], "dataset": set,
           "latency": {"warmup": 0, "iterations": 3}})
}

async fn create(s: &Server, body: &Value) -> String {
    let a = s.create_evaluation(body).await;
    assert_eq!(a.status, 202, "{}", a.body);
    a.body["id"].as_str().unwrap().to_string()
}

fn at(v: &Value) -> OffsetDateTime {
    OffsetDateTime::parse(v.as_str().unwrap(), &Rfc3339).unwrap()
}

fn median(mut xs: Vec<f64>) -> f64 {
    xs.sort_by(f64::total_cmp);
    xs[xs.len() / 2]
}

struct Cluster {
    dir: tempfile::TempDir,
    _s3: S3Server,
    shared: Shared,
    api: Server,
}

fn cluster() -> Cluster {
    let dir = tempfile::tempdir().unwrap();
    let s3 = S3Server::start();
    let shared = Shared {
        database_url: postgres::fresh_database(),
        blob_store: s3.url("bench"),
        cpu_lock: dir.path().join("cpu.lock"),
        env: s3.env(),
    };
    let api_dir = dir.path().join("api");
    std::fs::create_dir_all(&api_dir).unwrap();
    let flags = shared.serve_flags(0);
    let flags: Vec<&str> = flags.iter().map(String::as_str).collect();
    let api = Server::start_with_env(&api_dir, &flags, &shared.env);
    Cluster {
        dir,
        _s3: s3,
        shared,
        api,
    }
}

async fn throughput(workers: usize) {
    let c = cluster();
    let body = upload(&c.api).await;
    let pool: Vec<Worker> = (0..workers)
        .map(|i| Worker::start(&c.shared, &c.dir.path().join(format!("w{i}")), &[], None))
        .collect();
    // Warm every worker's copies of the files and its teacher cache.
    let warm: Vec<String> = {
        let mut ids = Vec::new();
        for _ in 0..workers {
            ids.push(create(&c.api, &body).await);
        }
        ids
    };
    for id in &warm {
        c.api.wait_finished(id, LONG).await;
    }
    let started = Instant::now();
    let mut ids = Vec::new();
    for _ in 0..24 {
        ids.push(create(&c.api, &body).await);
    }
    for id in &ids {
        let e = c.api.wait_finished(id, LONG).await;
        assert_eq!(e["status"], "succeeded", "{e}");
    }
    let seconds = started.elapsed().as_secs_f64();
    let mut pickup = Vec::new();
    for _ in 0..10 {
        let id = create(&c.api, &body).await;
        let e = c.api.wait_finished(&id, LONG).await;
        pickup.push((at(&e["started_at"]) - at(&e["created_at"])).as_seconds_f64() * 1e3);
    }
    println!(
        "queue, {workers} worker(s): {:.1} evaluations/min over 24 ({seconds:.2} s); pickup latency p50 {:.0} ms (min {:.0}, max {:.0})",
        24.0 / seconds * 60.0,
        median(pickup.clone()),
        pickup.iter().copied().fold(f64::MAX, f64::min),
        pickup.iter().copied().fold(0.0, f64::max),
    );
    drop(pool);
}

async fn wall(s: &Server, body: &Value) -> f64 {
    let id = create(s, body).await;
    let e = s.wait_finished(&id, LONG).await;
    assert_eq!(e["status"], "succeeded", "{e}");
    (at(&e["finished_at"]) - at(&e["created_at"])).as_seconds_f64()
}

async fn wall_times() {
    let c = cluster();
    let body = upload(&c.api).await;
    let _w = Worker::start(&c.shared, &c.dir.path().join("w"), &[], None);
    let first = wall(&c.api, &body).await;
    let mut shared = Vec::new();
    for _ in 0..5 {
        shared.push(wall(&c.api, &body).await);
    }
    let alone = Server::start(&[]);
    let alone_body = upload(&alone).await;
    let alone_first = wall(&alone, &alone_body).await;
    let mut local = Vec::new();
    for _ in 0..5 {
        local.push(wall(&alone, &alone_body).await);
    }
    println!(
        "one evaluation, creation to finish: PostgreSQL + S3 + worker {:.3} s (first, fetching the files: {first:.3} s); SQLite + folder {:.3} s (first: {alone_first:.3} s)",
        median(shared),
        median(local)
    );
}

#[tokio::main]
async fn main() {
    for workers in [1, 2, 4] {
        throughput(workers).await;
    }
    wall_times().await;
}
