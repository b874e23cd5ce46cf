//! Every error class of api.md answers problem+json with a detail a user can act on.

use serde_json::json;

use crate::harness::{Answer, Server};
use crate::support::case_dir;

fn assert_problem(a: &Answer, status: u16) {
    assert_eq!(a.status, status, "{}", a.body);
    assert!(
        a.content_type.starts_with("application/problem+json"),
        "content type {}",
        a.content_type
    );
    assert_eq!(a.body["status"], status);
    for key in ["type", "title", "detail"] {
        assert!(a.body[key].is_string(), "problem lacks {key}: {}", a.body);
    }
}

#[tokio::test]
async fn malformed_json_is_400() {
    let s = Server::start(&[]);
    assert_problem(
        &s.post_json_text("/v1/evaluations", "{\"teacher\": ").await,
        400,
    );
}

#[tokio::test]
async fn a_bad_query_parameter_is_400_naming_it() {
    let s = Server::start(&[]);
    let a = s.get("/v1/evaluations?limit=0").await;
    assert_problem(&a, 400);
    assert_eq!(a.body["field"], "limit");
    assert_problem(&s.get("/v1/models?sha256=xyz").await, 400);
}

#[tokio::test]
async fn unknown_ids_and_paths_are_404() {
    let s = Server::start(&[]);
    let id = uuid::Uuid::now_v7();
    assert_problem(&s.get(&format!("/v1/evaluations/{id}")).await, 404);
    assert_problem(&s.get(&format!("/v1/models/{id}")).await, 404);
    assert_problem(&s.get("/v1/datasets/not-a-uuid").await, 404);
    assert_problem(&s.get("/v1/nowhere").await, 404);
    assert_problem(&s.delete(&format!("/v1/evaluations/{id}")).await, 404);
}

#[tokio::test]
async fn an_upload_over_the_limit_is_413() {
    let s = Server::start(&["--max-upload-bytes", "1000"]);
    let a = s
        .upload_model(&case_dir("mlp").join("teacher.onnx"), "big")
        .await;
    assert_problem(&a, 413);
}

#[tokio::test]
async fn files_the_engine_cannot_use_are_422_and_are_not_stored() {
    let s = Server::start(&[]);
    for f in ["random.onnx", "truncated.onnx", "external.onnx"] {
        let a = s.upload_model(&case_dir("bad").join(f), f).await;
        assert_problem(&a, 422);
    }
    let a = s
        .upload_model(&case_dir("bad").join("external.onnx"), "x")
        .await;
    assert!(
        a.body["detail"].as_str().unwrap().contains("external data"),
        "{}",
        a.body
    );
    for f in ["bad_labels.npz", "negative_labels.npz"] {
        assert_problem(&s.upload_dataset(&case_dir("bad").join(f), f).await, 422);
    }
    assert_eq!(
        s.get("/v1/models").await.body["items"]
            .as_array()
            .unwrap()
            .len(),
        0
    );
}

#[tokio::test]
async fn evaluations_that_cannot_run_are_refused_at_creation_with_the_field() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let student = s.model_id(&case_dir("mlp").join("student_wide.onnx")).await;
    let six = s.model_id(&case_dir("bad").join("six_classes.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let misfit = s.dataset_id(&case_dir("bad").join("mismatch.npz")).await;
    let big_labels = s.dataset_id(&case_dir("bad").join("big_labels.npz")).await;
    let unlabelled = s.dataset_id(&case_dir("unlabeled").join("data.npz")).await;
    let nobody = uuid::Uuid::now_v7().to_string();
    let cases = [
        (
            json!({"teacher": nobody, "students": [student], "dataset": set}),
            Some("teacher"),
        ),
        (
            json!({"teacher": teacher, "students": [student, nobody], "dataset": set}),
            Some("students[1]"),
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": nobody}),
            Some("dataset"),
        ),
        (
            json!({"teacher": teacher, "students": [], "dataset": set}),
            Some("students"),
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": set, "gates": {"min_agreemnt": 0.9}}),
            Some("gates.min_agreemnt"),
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": set, "batch_size": 0}),
            Some("batch_size"),
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": set, "latency": {"iterations": 0}}),
            Some("latency.iterations"),
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": unlabelled, "gates": {"min_top1": 0.5}}),
            Some("gates.min_top1"),
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": set, "temprature": 2.0}),
            None,
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": misfit}),
            None,
        ),
        (
            json!({"teacher": teacher, "students": [six], "dataset": set}),
            None,
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": big_labels}),
            None,
        ),
        (
            json!({"teacher": teacher, "students": [student], "dataset": set, "output": "nope"}),
            None,
        ),
    ];
    for (body, field) in cases {
        let a = s.create_evaluation(&body).await;
        assert_problem(&a, 422);
        if let Some(f) = field {
            assert_eq!(a.body["field"], f, "{body}: {}", a.body);
        }
    }
    assert_eq!(
        s.get("/v1/evaluations").await.body["items"]
            .as_array()
            .unwrap()
            .len(),
        0
    );
}

#[tokio::test]
async fn a_report_asked_for_before_it_exists_is_409() {
    let s = Server::holding("bulk");
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let id = s.held_evaluation(&teacher, &[&teacher], &set, "bulk").await;
    assert_problem(&s.get(&format!("/v1/evaluations/{id}/report")).await, 409);
    s.delete(&format!("/v1/evaluations/{id}")).await;
}
