//! A bounded load on loopback: 32 clients upload, create, cancel and read
//! at once, for a fixed number of requests each. It counts, never times:
//! no answer is a server error, and nothing acknowledged is lost — every
//! accepted evaluation ends, and every succeeded one has its report.

use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Duration;

use serde_json::json;
use tokio::sync::Mutex;

use crate::harness::Server;
use crate::support::case_dir;

const CLIENTS: usize = 32;
const ROUNDS: usize = 3;

#[derive(Default, Debug)]
struct Counts {
    requests: u64,
    by_status: BTreeMap<u16, u64>,
    accepted: Vec<String>,
    canceled: Vec<String>,
}

#[tokio::test(flavor = "multi_thread", worker_threads = 4)]
async fn thirty_two_clients_at_once_lose_nothing_and_meet_no_server_error() {
    let s = Arc::new(Server::start(&[
        "--workers",
        "2",
        "--check-waiting",
        "256",
        "--max-uploads",
        "64",
    ]));
    let files = [
        "teacher.onnx",
        "student_wide.onnx",
        "student_narrow.onnx",
        "student_twin.onnx",
    ];
    let counts = Arc::new(Mutex::new(Counts::default()));
    let mut clients = Vec::new();
    for c in 0..CLIENTS {
        let (s, counts) = (s.clone(), counts.clone());
        clients.push(tokio::spawn(async move {
            let mut seen = Vec::new();
            let teacher = s
                .upload_model(&case_dir("mlp").join(files[0]), "teacher")
                .await;
            let student = s
                .upload_model(&case_dir("mlp").join(files[1 + c % 3]), "student")
                .await;
            let set = s
                .upload_dataset(&case_dir("mlp").join("data.npz"), "set")
                .await;
            seen.extend([teacher.status, student.status, set.status]);
            let (mut accepted, mut canceled) = (Vec::new(), Vec::new());
            for round in 0..ROUNDS {
                let a = s
                    .create_evaluation(&json!({
                        "project": format!("load-{}", c % 4),
                        "teacher": teacher.body["id"], "students": [student.body["id"]],
                        "dataset": set.body["id"],
                        "latency": {"warmup": 0, "iterations": 3},
                        "tags": {"client": c.to_string(), "round": round.to_string()}
                    }))
                    .await;
                seen.push(a.status);
                let Some(id) = a.body["id"].as_str().map(str::to_string) else {
                    continue;
                };
                accepted.push(id.clone());
                if (c + round) % 5 == 0 {
                    let d = s.delete(&format!("/v1/evaluations/{id}")).await;
                    seen.push(d.status);
                    if d.status == 200 {
                        canceled.push(id.clone());
                    }
                }
                seen.push(s.get(&format!("/v1/evaluations/{id}")).await.status);
                seen.push(s.get("/v1/evaluations?limit=20").await.status);
                seen.push(s.get("/").await.status);
            }
            let mut k = counts.lock().await;
            k.requests += seen.len() as u64;
            for st in seen {
                *k.by_status.entry(st).or_default() += 1;
            }
            k.accepted.extend(accepted);
            k.canceled.extend(canceled);
        }));
    }
    for c in clients {
        c.await.unwrap();
    }
    let k = counts.lock().await;
    let server_errors: u64 = k
        .by_status
        .iter()
        .filter(|(s, _)| **s >= 500)
        .map(|(_, n)| n)
        .sum();
    eprintln!(
        "load: {} clients, {} requests, statuses {:?}, {} evaluations accepted, {} canceled",
        CLIENTS,
        k.requests,
        k.by_status,
        k.accepted.len(),
        k.canceled.len()
    );
    assert_eq!(server_errors, 0, "{:?}", k.by_status);
    assert_eq!(
        k.accepted.len(),
        CLIENTS * ROUNDS,
        "every creation was accepted"
    );
    let mut lost = Vec::new();
    for id in &k.accepted {
        let e = s.wait_finished(id, Duration::from_secs(600)).await;
        match e["status"].as_str() {
            Some("succeeded") => {
                let r = s.get(&format!("/v1/evaluations/{id}/report")).await;
                if r.status != 200 {
                    lost.push(format!("{id}: succeeded without a report ({})", r.status));
                }
            }
            Some("canceled") if k.canceled.contains(id) => {}
            other => lost.push(format!("{id}: {other:?} {e}")),
        }
    }
    assert!(lost.is_empty(), "{lost:#?}");
}
