//! The seam to the engine's processes: checks share the CPU with bulk passes
//! but never with timed rounds, wait for a slot, are refused as busy when
//! too many wait, and faults of the service are 500s that say nothing of
//! their cause.

use std::fs::File;
use std::time::Duration;

use serde_json::json;

use crate::harness::Server;
use crate::support::case_dir;

const LONG: Duration = Duration::from_secs(120);

/// Long enough for an upload that does not wait to have answered many
/// times over; only a wait for the CPU lock keeps it pending.
const PENDING: Duration = Duration::from_secs(2);

/// Takes the machine's CPU lock alone, as an evaluation's timed rounds do.
fn hold_cpu_alone(s: &Server) -> File {
    let lock = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(s.data_dir().join("cpu.lock"))
        .unwrap();
    lock.lock().unwrap();
    lock
}

#[tokio::test]
async fn an_upload_during_an_evaluations_timed_rounds_waits_until_they_end() {
    let s = Server::holding("timing");
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let id = s
        .held_evaluation(&teacher, &[&teacher], &set, "timing")
        .await;
    let wide = case_dir("mlp").join("student_wide.onnx");
    let upload = s.upload_model(&wide, "wide");
    tokio::pin!(upload);
    assert!(
        tokio::time::timeout(PENDING, &mut upload).await.is_err(),
        "the upload's check ran while the timed rounds held the CPU"
    );
    s.release();
    let a = upload.await;
    assert_eq!(a.status, 201, "{}", a.body);
    assert_eq!(s.wait_finished(&id, LONG).await["status"], "succeeded");
}

#[tokio::test]
async fn checks_wait_for_a_slot_and_too_many_waiting_are_refused_with_503_and_retry_after() {
    let s = Server::start(&["--check-slots", "1", "--check-waiting", "2"]);
    let cpu = hold_cpu_alone(&s);
    let files = ["teacher.onnx", "student_wide.onnx", "student_narrow.onnx"];
    let paths = files.map(|f| case_dir("mlp").join(f));
    let mut uploads: Vec<_> = paths
        .iter()
        .zip(files)
        .map(|(p, f)| Box::pin(s.upload_model(p, f)))
        .collect();
    // None can finish while the CPU is held: the third to ask is refused.
    let (refused, index, rest) = futures_util::future::select_all(uploads.drain(..)).await;
    assert_eq!(refused.status, 503, "{}", refused.body);
    assert_eq!(refused.body["status"], 503);
    assert!(
        refused
            .retry_after
            .as_deref()
            .is_some_and(|v| v.parse::<u64>().is_ok()),
        "Retry-After in seconds: {:?}",
        refused.retry_after
    );
    eprintln!("refused: {}", files[index]);
    drop(cpu);
    for a in futures_util::future::join_all(rest).await {
        assert_eq!(a.status, 201, "{}", a.body);
    }
}

#[tokio::test]
async fn creating_an_evaluation_that_its_records_decide_starts_no_engine_process() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let student = s.model_id(&case_dir("mlp").join("student_wide.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let misfit = s.dataset_id(&case_dir("bad").join("mismatch.npz")).await;
    // A check in a child would wait for this lock; the records need none.
    let _cpu = hold_cpu_alone(&s);
    let body = json!({
        "teacher": teacher, "students": [student], "dataset": set,
        "latency": {"warmup": 0, "iterations": 3}
    });
    let create = s.create_evaluation(&body);
    let a = tokio::time::timeout(LONG, create)
        .await
        .expect("creation waited for an engine process");
    assert_eq!(a.status, 202, "{}", a.body);
    let refused = s
        .create_evaluation(&json!({"teacher": teacher, "students": [student], "dataset": misfit}))
        .await;
    assert_eq!(refused.status, 422, "{}", refused.body);
    assert!(
        refused.body["detail"].as_str().unwrap().contains("axis 1"),
        "{}",
        refused.body
    );
}

#[tokio::test]
async fn a_model_file_lost_from_disk_fails_its_evaluation_with_a_generic_500_and_logs_why() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let student = s
        .upload_model(&case_dir("mlp").join("student_wide.onnx"), "wide")
        .await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let sha = student.body["sha256"].as_str().unwrap();
    std::fs::remove_file(s.data_dir().join("models").join(sha)).unwrap();
    let a = s
        .create_evaluation(&json!({
            "teacher": teacher, "students": [student.body["id"]], "dataset": set,
            "latency": {"warmup": 0, "iterations": 3}
        }))
        .await;
    assert_eq!(a.status, 202, "{}", a.body);
    let done = s.wait_finished(a.body["id"].as_str().unwrap(), LONG).await;
    assert_eq!(done["status"], "failed", "{done}");
    assert_eq!(
        done["error"]["status"], 500,
        "our fault, not the model's: {done}"
    );
    let detail = done["error"]["detail"].as_str().unwrap();
    assert!(
        !detail.contains(sha) && !detail.contains("No such file"),
        "a 5xx names no cause: {detail}"
    );
    let log = std::fs::read_to_string(s.data_dir().join("server.log")).unwrap();
    assert!(
        log.contains("reading the model") && log.contains("No such file"),
        "the cause is logged:\n{log}"
    );
}

#[tokio::test]
async fn a_class_count_the_records_cannot_tell_is_checked_by_loading_the_models() {
    let s = Server::start(&[]);
    let model = s
        .upload_model(&case_dir("bad").join("passthrough.onnx"), "passthrough")
        .await;
    let set = s.dataset_id(&case_dir("bad").join("scores10.npz")).await;
    let id = model.body["id"].as_str().unwrap();
    let body = json!({"teacher": id, "students": [id], "dataset": set,
                      "latency": {"warmup": 0, "iterations": 3}});
    assert_eq!(s.create_evaluation(&body).await.status, 202);
    // Without its file the check cannot load it: our fault, not the request's.
    let sha = model.body["sha256"].as_str().unwrap();
    std::fs::remove_file(s.data_dir().join("models").join(sha)).unwrap();
    let a = s.create_evaluation(&body).await;
    assert_eq!(a.status, 500, "{}", a.body);
    assert_eq!(a.content_type, "application/problem+json");
    assert_eq!(a.body["detail"], proctor::error::GENERIC_DETAIL);
}

#[tokio::test]
async fn a_cancel_between_the_claim_and_the_childs_start_keeps_the_child_from_running() {
    // Held at `waiting`, a worker that has claimed the evaluation stops
    // before it registers the cancel token and starts the child: the
    // window in which a cancel used to find nothing to stop.
    let s = Server::holding("waiting");
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let a = s
        .create_evaluation(&json!({"teacher": teacher, "students": [teacher], "dataset": set}))
        .await;
    let id = a.body["id"].as_str().unwrap().to_string();
    let start = std::time::Instant::now();
    while s.evaluation(&id).await["status"] != "running" {
        assert!(start.elapsed() < LONG, "never claimed");
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    let canceled = s.delete(&format!("/v1/evaluations/{id}")).await;
    assert_eq!(canceled.body["status"], "canceled", "{}", canceled.body);
    s.release();
    let log_path = s.data_dir().join("server.log");
    loop {
        let log = std::fs::read_to_string(&log_path).unwrap();
        if log.contains("canceled before it started") {
            break;
        }
        assert!(start.elapsed() < LONG, "the child ran anyway:\n{log}");
        assert_eq!(
            s.engine_processes(),
            0,
            "a child started for a canceled evaluation"
        );
        tokio::time::sleep(Duration::from_millis(20)).await;
    }
    assert_eq!(s.evaluation(&id).await["status"], "canceled");
}
