//! Uploads: stored by content, idempotent, checked by the engine first.

use crate::harness::Server;
use crate::support::{case_dir, expected};

#[tokio::test]
async fn an_uploaded_model_reports_what_the_onnx_package_reads() {
    let s = Server::start(&[]);
    let a = s
        .upload_model(&case_dir("text").join("teacher.onnx"), "text-teacher")
        .await;
    assert_eq!(a.status, 201, "{}", a.body);
    let want = &expected("text")["models"]["teacher"];
    assert_eq!(a.body["name"], "text-teacher");
    assert_eq!(a.body["sha256"], want["sha256"]);
    assert_eq!(a.body["bytes"], want["bytes"]);
    assert_eq!(a.body["parameters"], want["parameters"]);
    assert_eq!(a.body["opset"], want["opset"]);
    assert_eq!(a.body["inputs"], want["inputs"]);
    assert_eq!(a.body["outputs"], want["outputs"]);
    let id = a.body["id"].as_str().unwrap();
    assert_eq!(
        a.location.as_deref(),
        Some(format!("/v1/models/{id}").as_str())
    );
    assert_eq!(s.get(&format!("/v1/models/{id}")).await.body, a.body);
}

#[tokio::test]
async fn uploading_the_same_file_twice_answers_200_with_the_first_record() {
    let s = Server::start(&[]);
    let file = case_dir("mlp").join("teacher.onnx");
    let first = s.upload_model(&file, "first-name").await;
    let second = s.upload_model(&file, "second-name").await;
    assert_eq!((first.status, second.status), (201, 200));
    assert_eq!(first.body, second.body, "the stored name is kept");
    let sha = first.body["sha256"].as_str().unwrap();
    let listed = s.get(&format!("/v1/models?sha256={sha}")).await;
    assert_eq!(listed.body["items"].as_array().unwrap().len(), 1);
    assert_eq!(listed.body["next_cursor"], serde_json::Value::Null);
}

#[tokio::test]
async fn a_dataset_upload_describes_its_arrays_and_labels() {
    let s = Server::start(&[]);
    let a = s
        .upload_dataset(&case_dir("text").join("data.npz"), "tickets")
        .await;
    assert_eq!(a.status, 201, "{}", a.body);
    let exp = expected("text");
    assert_eq!(a.body["samples"], exp["samples"]);
    assert_eq!(a.body["has_labels"], true);
    let mut arrays = a.body["arrays"].as_array().unwrap().clone();
    arrays.sort_by_key(|v| v["name"].as_str().unwrap().to_string());
    let mut want = exp["data_arrays"].as_array().unwrap().clone();
    want.sort_by_key(|v| v["name"].as_str().unwrap().to_string());
    assert_eq!(arrays, want);
    let again = s
        .upload_dataset(&case_dir("text").join("data.npz"), "other")
        .await;
    assert_eq!(
        (again.status, again.body["id"].clone()),
        (200, a.body["id"].clone())
    );
}

#[tokio::test]
async fn model_lists_page_newest_first_with_a_cursor() {
    let s = Server::start(&[]);
    let mut ids = Vec::new();
    for f in ["teacher.onnx", "student_wide.onnx", "student_narrow.onnx"] {
        ids.push(s.model_id(&case_dir("mlp").join(f)).await);
    }
    let first = s.get("/v1/models?limit=2").await;
    let items: Vec<&str> = first.body["items"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m["id"].as_str().unwrap())
        .collect();
    assert_eq!(items, vec![ids[2].as_str(), ids[1].as_str()]);
    let cursor = first.body["next_cursor"].as_str().unwrap();
    let second = s.get(&format!("/v1/models?limit=2&cursor={cursor}")).await;
    let rest: Vec<&str> = second.body["items"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m["id"].as_str().unwrap())
        .collect();
    assert_eq!(rest, vec![ids[0].as_str()]);
    assert!(second.body["next_cursor"].is_null());
}
