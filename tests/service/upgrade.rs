//! A data dir written by version 1 (tests/fixtures/version1) opens with
//! the current schema and loses nothing: ids, statuses, tags, errors and
//! reports are all still served, and its files still evaluate.

use std::path::Path;
use std::time::Duration;

use serde_json::json;
use sha2::Digest;

use crate::harness::Server;
use crate::support::case_dir;

const SUCCEEDED: &str = "01a23551-bf25-720a-9710-d7c3fa78b6cb";
const FAILED: &str = "01a23551-bfce-73a7-bee9-c68077873b7e";
const CANCELED: &str = "01a23551-d01a-737d-9bb2-f65ae837f5ba";
const TEACHER: &str = "01a23551-bc16-7240-99cd-02785aa4193a";
const SET: &str = "01a23551-be95-7667-993e-d607535fb5db";

/// Puts a file where the store keeps it: its folder, by SHA-256.
fn place(data_dir: &Path, folder: &str, file: &Path) {
    let bytes = std::fs::read(file).unwrap();
    let sha = hex::encode(sha2::Sha256::digest(&bytes));
    std::fs::create_dir_all(data_dir.join(folder)).unwrap();
    std::fs::write(data_dir.join(folder).join(sha), bytes).unwrap();
}

fn version1_data_dir() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let fixture = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/version1");
    std::fs::copy(fixture.join("proctor.db"), dir.path().join("proctor.db")).unwrap();
    for f in ["teacher.onnx", "student_wide.onnx", "student_narrow.onnx"] {
        place(dir.path(), "models", &case_dir("mlp").join(f));
    }
    place(
        dir.path(),
        "models",
        &case_dir("bad").join("nan_output.onnx"),
    );
    place(dir.path(), "datasets", &case_dir("mlp").join("data.npz"));
    dir
}

#[tokio::test]
async fn a_version_1_data_dir_keeps_every_evaluation_record_and_report() {
    let dir = version1_data_dir();
    let s = Server::start_in(dir.path(), &[]);
    let list = s.get("/v1/evaluations").await;
    assert_eq!(list.status, 200, "{}", list.body);
    let items = list.body["items"].as_array().unwrap();
    let status: Vec<(&str, &str)> = items
        .iter()
        .map(|e| (e["id"].as_str().unwrap(), e["status"].as_str().unwrap()))
        .collect();
    assert_eq!(
        status,
        vec![
            (CANCELED, "canceled"),
            (FAILED, "failed"),
            (SUCCEEDED, "succeeded")
        ]
    );
    let ok = s.evaluation(SUCCEEDED).await;
    assert_eq!(ok["verdict"], "go");
    assert_eq!(ok["tags"], json!({"branch": "main", "commit": "3f9c2e1"}));
    assert_eq!(
        ok["request"]["gates"],
        json!({"min_agreement": 0.7, "confidence": 0.95})
    );
    assert_eq!(ok["attempts"], 1);
    assert_eq!(
        ok["progress"]["stage"], "timing",
        "version 1's 'latency' stage"
    );
    let failed = s.evaluation(FAILED).await;
    assert_eq!(failed["error"]["status"], 422);
    assert!(failed["error"]["detail"].as_str().unwrap().contains("NaN"));
    let filtered = s
        .get("/v1/evaluations?tag=branch:main&project=turbine-acoustics")
        .await;
    assert_eq!(filtered.body["items"].as_array().unwrap().len(), 1);

    let report = s.get(&format!("/v1/evaluations/{SUCCEEDED}/report")).await;
    assert_eq!(report.status, 200);
    assert_eq!(report.body["evaluation"], SUCCEEDED);
    assert_eq!(report.body["candidates"].as_array().unwrap().len(), 2);
    let page = s.get(&format!("/evaluations/{SUCCEEDED}")).await;
    assert_eq!(page.status, 200, "the dashboard still shows it");
    assert_eq!(s.get("/").await.status, 200);
    assert_eq!(s.get(&format!("/teachers/{TEACHER}")).await.status, 200);
    assert_eq!(
        s.get("/v1/models").await.body["items"]
            .as_array()
            .unwrap()
            .len(),
        4
    );
    let set = s.get(&format!("/v1/datasets/{SET}")).await.body;
    assert_eq!(set["has_labels"], true);
}

#[tokio::test]
async fn a_version_1_set_still_evaluates_though_its_largest_label_was_never_recorded() {
    let dir = version1_data_dir();
    let s = Server::start_in(dir.path(), &[]);
    let a = s
        .create_evaluation(
            &json!({"teacher": TEACHER, "students": [TEACHER], "dataset": SET,
                                   "latency": {"warmup": 0, "iterations": 3}}),
        )
        .await;
    assert_eq!(a.status, 202, "{}", a.body);
    let done = s
        .wait_finished(a.body["id"].as_str().unwrap(), Duration::from_secs(120))
        .await;
    assert_eq!(done["status"], "succeeded", "{done}");
}
