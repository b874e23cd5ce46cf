//! The contract's limits on free-form fields (api.md, "Limits"): refused
//! with 422 and the field, before anything is stored, however large.

use serde_json::{Value, json};

use crate::harness::Server;
use crate::support::case_dir;

/// Refused with 422, naming `field` (or a part of it, e.g. `tags.commit`).
async fn refused_on(s: &Server, body: Value, field: &str) {
    let a = s.create_evaluation(&body).await;
    assert_eq!(a.status, 422, "{}", a.body);
    let named = a.body["field"].as_str().unwrap_or_default();
    assert!(
        named == field || named.starts_with(&format!("{field}.")),
        "{}",
        a.body
    );
}

#[tokio::test]
async fn oversized_or_repeated_fields_are_refused_with_their_field_and_nothing_is_stored() {
    let s = Server::start(&["--max-upload-bytes", "67108864"]);
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    let student = s.model_id(&case_dir("mlp").join("student_wide.onnx")).await;
    let set = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let base = json!({"teacher": teacher, "students": [student], "dataset": set});
    let with = |key: &str, value: Value| {
        let mut b = base.clone();
        b[key] = value;
        b
    };
    refused_on(&s, with("project", json!("p".repeat(900_000))), "project").await;
    refused_on(&s, with("project", json!("../etc")), "project").await;
    refused_on(
        &s,
        with("students", json!(vec![student.clone(); 20_000])),
        "students",
    )
    .await;
    let many: Vec<String> = (0..33).map(|_| uuid::Uuid::now_v7().to_string()).collect();
    refused_on(&s, with("students", json!(many)), "students").await;
    let tags: serde_json::Map<String, Value> =
        (0..33).map(|i| (format!("k{i}"), json!("v"))).collect();
    refused_on(&s, with("tags", Value::Object(tags)), "tags").await;
    refused_on(&s, with("tags", json!({"commit": "x".repeat(257)})), "tags").await;
    refused_on(&s, with("tags", json!({"bad key": "x"})), "tags").await;
    let listed = s.get("/v1/evaluations").await;
    assert_eq!(listed.body["items"], json!([]), "nothing was stored");

    let long_name = "n".repeat(201);
    let a = s
        .upload_model(&case_dir("mlp").join("student_narrow.onnx"), &long_name)
        .await;
    assert_eq!(
        (a.status, a.body["field"].clone()),
        (422, json!("name")),
        "{}",
        a.body
    );
    let control = s
        .upload_model(&case_dir("mlp").join("student_narrow.onnx"), "tab%09name")
        .await;
    assert_eq!(control.status, 422, "{}", control.body);
}
