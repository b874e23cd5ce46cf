//! What the service keeps on disk: nothing from an upload that did not
//! land, 507 before the disk or the quota runs out, deletion, retention,
//! a restored blob, and one process per data dir.

use std::path::Path;
use std::time::Duration;

use serde_json::json;
use tokio::io::AsyncWriteExt;

use crate::harness::Server;
use crate::support::case_dir;

const LONG: Duration = Duration::from_secs(120);

fn incoming(s: &Server) -> Vec<String> {
    std::fs::read_dir(s.data_dir().join("incoming"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect()
}

/// Polls until no upload's temporary file is left.
async fn incoming_empties(s: &Server, why: &str) {
    for _ in 0..200 {
        if incoming(s).is_empty() {
            return;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    panic!("{why}: left {:?}", incoming(s));
}

fn mlp(file: &str) -> std::path::PathBuf {
    case_dir("mlp").join(file)
}

/// Sends a model upload's head and `body`, then closes the connection
/// without reading the answer.
async fn send_and_hang_up(s: &Server, declared: usize, body: &[u8]) {
    let addr = s.base.trim_start_matches("http://");
    let mut tcp = tokio::net::TcpStream::connect(addr).await.unwrap();
    let head = format!(
        "POST /v1/models?name=gone HTTP/1.1\r\nHost: localhost\r\n\
         content-type: application/octet-stream\r\ncontent-length: {declared}\r\n\r\n"
    );
    tcp.write_all(head.as_bytes()).await.unwrap();
    tcp.write_all(body).await.unwrap();
    tcp.shutdown().await.unwrap();
}

#[tokio::test]
async fn an_upload_that_breaks_off_or_whose_client_leaves_during_the_check_leaves_no_file() {
    let s = Server::start(&[]);
    let model = std::fs::read(mlp("teacher.onnx")).unwrap();
    send_and_hang_up(&s, model.len(), &model[..model.len() / 2]).await;
    incoming_empties(&s, "a body cut off half way").await;
    // The whole body, then gone while the engine checks it.
    send_and_hang_up(&s, model.len(), &model).await;
    incoming_empties(&s, "a client that left during the check").await;
    assert_eq!(s.get("/readyz").await.status, 200);
}

#[tokio::test]
async fn refused_uploads_leave_no_file_whatever_refused_them() {
    let s = Server::start(&["--max-upload-bytes", "100000"]);
    let too_big = vec![0u8; 200_000];
    assert_eq!(
        s.post_bytes("/v1/models?name=big", too_big).await.status,
        413
    );
    let not_onnx = s.post_bytes("/v1/models?name=junk", vec![7u8; 5000]).await;
    assert_eq!(not_onnx.status, 422, "{}", not_onnx.body);
    incoming_empties(&s, "413 and 422").await;
}

#[tokio::test]
async fn an_upload_past_the_stored_bytes_limit_is_507_and_nothing_is_kept() {
    let teacher = std::fs::metadata(mlp("teacher.onnx")).unwrap().len();
    let limit = (teacher + 1000).to_string();
    let s = Server::start(&["--max-stored-bytes", &limit]);
    assert_eq!(s.upload_model(&mlp("teacher.onnx"), "t").await.status, 201);
    let a = s.upload_model(&mlp("student_wide.onnx"), "w").await;
    assert_eq!(a.status, 507, "{}", a.body);
    assert_eq!(a.content_type, "application/problem+json");
    assert!(
        a.body["detail"].as_str().unwrap().contains("delete"),
        "{}",
        a.body
    );
    incoming_empties(&s, "a 507").await;
    let listed = s.get("/v1/models").await;
    assert_eq!(listed.body["items"].as_array().unwrap().len(), 1);
}

#[tokio::test]
async fn a_deleted_model_is_gone_but_finished_reports_keep_its_name_and_sha256() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.upload_model(&mlp("student_wide.onnx"), "wide").await;
    let (sid, sha) = (
        student.body["id"].as_str().unwrap(),
        student.body["sha256"].as_str().unwrap(),
    );
    let set = s.dataset_id(&mlp("data.npz")).await;
    let a = s
        .create_evaluation(
            &json!({"teacher": teacher, "students": [sid], "dataset": set,
            "latency": {"warmup": 0, "iterations": 3}}),
        )
        .await;
    let id = a.body["id"].as_str().unwrap();
    assert_eq!(s.wait_finished(id, LONG).await["status"], "succeeded");

    assert_eq!(s.delete(&format!("/v1/models/{sid}")).await.status, 204);
    assert!(
        !s.data_dir().join("models").join(sha).exists(),
        "its file is removed"
    );
    assert_eq!(s.get(&format!("/v1/models/{sid}")).await.status, 404);
    assert_eq!(s.delete(&format!("/v1/models/{sid}")).await.status, 404);
    let report = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    assert_eq!(report["candidates"][0]["model"]["name"], "wide");
    assert_eq!(report["candidates"][0]["model"]["sha256"], sha);
    // A new evaluation cannot name it any more.
    let again = s
        .create_evaluation(&json!({"teacher": teacher, "students": [sid], "dataset": set}))
        .await;
    assert_eq!(again.status, 422, "{}", again.body);
    // Uploading the same bytes brings it back, file and all.
    let back = s.upload_model(&mlp("student_wide.onnx"), "wide").await;
    assert!(matches!(back.status, 200 | 201), "{}", back.body);
    assert!(s.data_dir().join("models").join(sha).exists());

    assert_eq!(s.delete(&format!("/v1/datasets/{set}")).await.status, 204);
    assert_eq!(s.get(&format!("/v1/datasets/{set}")).await.status, 404);
}

#[tokio::test]
async fn a_model_or_set_in_use_by_an_unfinished_evaluation_or_a_baseline_is_409() {
    let s = Server::holding("bulk");
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.model_id(&mlp("student_wide.onnx")).await;
    let set = s.dataset_id(&mlp("data.npz")).await;
    let id = s.held_evaluation(&teacher, &[&student], &set, "bulk").await;
    for path in [
        format!("/v1/models/{student}"),
        format!("/v1/datasets/{set}"),
    ] {
        let a = s.delete(&path).await;
        assert_eq!(a.status, 409, "{path}: {}", a.body);
        assert!(
            a.body["detail"].as_str().unwrap().contains(&id),
            "{}",
            a.body
        );
    }
    s.release();
    s.wait_finished(&id, LONG).await;
    let put = s
        .put_json(
            "/v1/projects/seed-grading/baseline",
            &json!({"model": teacher, "evaluation": null}),
        )
        .await;
    assert_eq!(put.status, 200, "{}", put.body);
    let a = s.delete(&format!("/v1/models/{teacher}")).await;
    assert_eq!(a.status, 409, "{}", a.body);
    assert!(
        a.body["detail"].as_str().unwrap().contains("seed-grading"),
        "{}",
        a.body
    );
    assert_eq!(s.delete(&format!("/v1/models/{student}")).await.status, 204);
}

#[tokio::test]
async fn re_uploading_a_file_lost_from_disk_restores_it_and_evaluations_run_again() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.upload_model(&mlp("student_wide.onnx"), "wide").await;
    let sha = student.body["sha256"].as_str().unwrap();
    let set = s.dataset_id(&mlp("data.npz")).await;
    let blob = s.data_dir().join("models").join(sha);
    std::fs::remove_file(&blob).unwrap();
    let again = s.upload_model(&mlp("student_wide.onnx"), "wide").await;
    assert_eq!(again.status, 200, "{}", again.body);
    assert_eq!(
        std::fs::read(&blob).unwrap(),
        std::fs::read(mlp("student_wide.onnx")).unwrap()
    );
    let a = s
        .create_evaluation(
            &json!({"teacher": teacher, "students": [student.body["id"]],
            "dataset": set, "latency": {"warmup": 0, "iterations": 3}}),
        )
        .await;
    let done = s.wait_finished(a.body["id"].as_str().unwrap(), LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
}

fn serve_on(dir: &Path, extra: &[&str]) -> std::process::Output {
    std::process::Command::new(env!("CARGO_BIN_EXE_proctor"))
        .args(["serve", "--listen", "127.0.0.1:0", "--data-dir"])
        .arg(dir)
        .args(extra)
        .output()
        .unwrap()
}

#[tokio::test]
async fn a_second_process_on_the_same_data_dir_refuses_to_start_and_harms_nothing() {
    let s = Server::start(&[]);
    let model = std::fs::read(mlp("teacher.onnx")).unwrap();
    // An upload in progress: its temporary file must survive the attempt.
    let addr = s.base.trim_start_matches("http://").to_string();
    let mut tcp = tokio::net::TcpStream::connect(&addr).await.unwrap();
    let head = format!(
        "POST /v1/models?name=slow HTTP/1.1\r\nHost: localhost\r\n\
         content-type: application/octet-stream\r\ncontent-length: {}\r\n\r\n",
        model.len()
    );
    tcp.write_all(head.as_bytes()).await.unwrap();
    tcp.write_all(&model[..1000]).await.unwrap();
    for _ in 0..100 {
        if !incoming(&s).is_empty() {
            break;
        }
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let before = incoming(&s);
    assert_eq!(before.len(), 1);
    let second = serve_on(s.data_dir(), &[]);
    assert!(!second.status.success());
    let said = String::from_utf8_lossy(&second.stderr);
    assert!(said.contains("another Proctor process"), "{said}");
    assert_eq!(incoming(&s), before, "the first one's upload is untouched");
    drop(tcp);
}

#[tokio::test]
async fn finished_evaluations_past_keep_days_are_deleted_and_the_cache_is_kept_under_its_size() {
    let dir = tempfile::tempdir().unwrap();
    let mut s = Server::start_in(dir.path(), &[]);
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.model_id(&mlp("student_wide.onnx")).await;
    let set = s.dataset_id(&mlp("data.npz")).await;
    let a = s
        .create_evaluation(
            &json!({"teacher": teacher, "students": [student], "dataset": set,
            "latency": {"warmup": 0, "iterations": 3}}),
        )
        .await;
    let id = a.body["id"].as_str().unwrap().to_string();
    s.wait_finished(&id, LONG).await;
    let cache = dir.path().join("teacher-scores");
    assert!(
        std::fs::read_dir(&cache).unwrap().count() > 0,
        "the teacher's scores are cached"
    );
    assert!(s.terminate().success());
    // Housekeeping runs as the service starts: with 0 days nothing finished stays.
    let s = Server::start_in(dir.path(), &["--keep-days", "0", "--cache-max-bytes", "1"]);
    for _ in 0..100 {
        let gone = s.get(&format!("/v1/evaluations/{id}")).await.status == 404;
        if gone && std::fs::read_dir(&cache).unwrap().count() == 0 {
            break;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    let log = std::fs::read_to_string(dir.path().join("server.log")).unwrap();
    assert_eq!(
        s.get(&format!("/v1/evaluations/{id}")).await.status,
        404,
        "{log}"
    );
    assert_eq!(
        std::fs::read_dir(&cache).unwrap().count(),
        0,
        "the cache is evicted"
    );
    assert_eq!(
        s.get(&format!("/v1/models/{teacher}")).await.status,
        200,
        "uploads stay"
    );
}

#[tokio::test]
async fn an_upload_whose_check_cannot_start_leaves_no_file() {
    // One MiB of address space: the check's child cannot even be loaded.
    let s = Server::start(&["--eval-memory", "1"]);
    let a = s.upload_model(&mlp("teacher.onnx"), "t").await;
    assert!(a.status >= 422, "{} {}", a.status, a.body);
    incoming_empties(&s, "a check that never started").await;
    assert!(
        !s.data_dir()
            .join("models")
            .read_dir()
            .unwrap()
            .any(|_| true),
        "nothing stored"
    );
}
