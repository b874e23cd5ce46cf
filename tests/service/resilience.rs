//! The service survives what models and crashes do to it.

use std::time::Duration;

use serde_json::json;

use crate::harness::Server;
use crate::support::case_dir;

const LONG: Duration = Duration::from_secs(180);

/// A cap small enough for the test models to trip, large enough for tract.
const SMALL_CAP: &[&str] = &["--eval-memory", "512"];

#[tokio::test]
async fn a_model_that_asks_for_gigabytes_while_loading_is_refused_and_the_service_stays_up() {
    let s = Server::start(SMALL_CAP);
    let a = s
        .upload_model(&case_dir("bad").join("memory_bomb.onnx"), "bomb")
        .await;
    assert_eq!(a.status, 422, "{}", a.body);
    assert_eq!(s.get("/healthz").await.status, 200);
    assert_eq!(s.get("/readyz").await.status, 200);
}

#[tokio::test]
async fn a_model_that_exhausts_memory_fails_its_own_evaluation_only() {
    let s = Server::start(SMALL_CAP);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let hungry = s.model_id(&case_dir("bad").join("batch_hungry.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let a = s
        .create_evaluation(&json!({"teacher": teacher, "students": [hungry], "dataset": set}))
        .await;
    assert_eq!(a.status, 202, "{}", a.body);
    let id = a.body["id"].as_str().unwrap();
    let done = s.wait_finished(id, LONG).await;
    assert_eq!(done["status"], "failed", "{done}");
    let detail = done["error"]["detail"].as_str().unwrap();
    assert!(detail.contains("memory"), "{detail}");
    assert_eq!(s.get("/healthz").await.status, 200);
    // The next evaluation runs normally.
    let ok = s
        .create_evaluation(
            &json!({"teacher": teacher, "students": [teacher], "dataset": set,
            "latency": {"warmup": 0, "iterations": 3}}),
        )
        .await;
    let done = s.wait_finished(ok.body["id"].as_str().unwrap(), LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
}

#[tokio::test]
async fn a_model_that_outputs_nan_fails_with_the_model_and_sample_named() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let nan = s.model_id(&case_dir("bad").join("nan_output.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let a = s
        .create_evaluation(&json!({"teacher": teacher, "students": [nan], "dataset": set}))
        .await;
    let done = s.wait_finished(a.body["id"].as_str().unwrap(), LONG).await;
    assert_eq!(done["status"], "failed");
    assert_eq!(done["error"]["status"], 422);
    let detail = done["error"]["detail"].as_str().unwrap();
    assert!(
        detail.contains("student 'nan_output' gave NaN for sample"),
        "{detail}"
    );
}

#[tokio::test]
async fn after_kill_9_mid_evaluation_a_restart_completes_it_with_the_same_figures_on_attempt_2() {
    let dir = tempfile::tempdir().unwrap();
    let mut s = Server::holding_in(dir.path(), "timing");
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let student = s.model_id(&case_dir("mlp").join("student_wide.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let body = |iterations: u32| {
        json!({"teacher": teacher, "students": [student], "dataset": set,
               "latency": {"warmup": 0, "iterations": iterations}})
    };
    let id = s.create_evaluation(&body(5)).await.body["id"]
        .as_str()
        .unwrap()
        .to_string();
    s.wait_stage(&id, "timing", LONG).await;
    s.kill9();

    let s = Server::start_in(dir.path(), &[]);
    let done = s.wait_finished(&id, LONG).await;
    let log = std::fs::read_to_string(dir.path().join("server.log")).unwrap();
    assert!(
        log.contains("requeued=1"),
        "the restart did not find the interrupted evaluation:\n{log}"
    );
    assert_eq!(done["status"], "succeeded", "{done}");
    assert_eq!(done["attempts"], 2, "the crash counted its attempt: {done}");
    let reference = s.create_evaluation(&body(5)).await.body["id"]
        .as_str()
        .unwrap()
        .to_string();
    assert_eq!(s.wait_finished(&reference, LONG).await["attempts"], 1);
    let a = s
        .get(&format!("/v1/evaluations/{reference}/report"))
        .await
        .body;
    let b = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    for section in ["fidelity", "accuracy"] {
        assert_eq!(
            a["candidates"][0][section], b["candidates"][0][section],
            "{section}"
        );
    }
    assert_eq!(a["teacher"]["accuracy"], b["teacher"]["accuracy"]);
}

#[tokio::test]
async fn two_evaluations_queued_at_once_both_finish() {
    let s = Server::start(&["--workers", "2"]);
    let teacher = s.model_id(&case_dir("binary").join("teacher.onnx")).await;
    let student = s
        .model_id(&case_dir("binary").join("student_small.onnx"))
        .await;
    let set = s.dataset_id(&case_dir("binary").join("data.npz")).await;
    let body = json!({"teacher": teacher, "students": [student], "dataset": set,
                      "latency": {"warmup": 1, "iterations": 20}});
    let (a, b) = tokio::join!(s.create_evaluation(&body), s.create_evaluation(&body));
    for e in [a, b] {
        assert_eq!(e.status, 202, "{}", e.body);
        let done = s.wait_finished(e.body["id"].as_str().unwrap(), LONG).await;
        assert_eq!(done["status"], "succeeded", "{done}");
    }
}

#[tokio::test]
async fn sigterm_puts_a_running_evaluation_back_in_the_queue_without_counting_its_attempt() {
    let dir = tempfile::tempdir().unwrap();
    let mut s = Server::holding_in(dir.path(), "timing");
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let id = s
        .held_evaluation(&teacher, &[&teacher], &set, "timing")
        .await;
    assert_eq!(s.evaluation(&id).await["attempts"], 1);
    assert!(s.terminate().success(), "a clean exit on SIGTERM");
    let s = Server::start_in(dir.path(), &[]);
    let log = std::fs::read_to_string(dir.path().join("server.log")).unwrap();
    assert!(
        !log.contains("requeued=1"),
        "the stop left it running for the restart to find:\n{log}"
    );
    let done = s.wait_finished(&id, LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    assert_eq!(
        done["attempts"], 1,
        "a graceful stop gives its attempt back: {done}"
    );
}

#[tokio::test]
async fn a_student_whose_head_underflows_to_minus_infinity_fails_naming_the_sample_and_value() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let inf = s
        .model_id(&case_dir("bad").join("neg_inf_output.onnx"))
        .await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let a = s
        .create_evaluation(&json!({"teacher": teacher, "students": [inf], "dataset": set}))
        .await;
    let done = s.wait_finished(a.body["id"].as_str().unwrap(), LONG).await;
    assert_eq!(done["status"], "failed", "{done}");
    assert_eq!(done["error"]["status"], 422, "{done}");
    let detail = done["error"]["detail"].as_str().unwrap();
    assert!(
        detail.contains("student 'neg_inf_output' gave -inf for sample 0"),
        "{detail}"
    );
}
