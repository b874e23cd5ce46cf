//! Evaluations seeded through the API from the reference fixtures of the
//! `baseline` case: a teacher, the student in production, three candidates,
//! and two sets (string slices with class names; integer slices).

use std::path::PathBuf;
use std::time::Duration;

use serde_json::{Value, json};

use crate::harness::Server;

pub const LONG: Duration = Duration::from_secs(120);
pub const PROJECT: &str = "grain-sorter";
pub const OTHER_PROJECT: &str = "seed-line";
pub const NAMED_SET: &str = "grain-frames";
pub const SITES_SET: &str = "grain-frames-by-site";

fn fixture(file: &str) -> PathBuf {
    crate::support::case_dir("baseline").join(file)
}

/// Ids of the uploaded models and sets.
pub struct Catalog {
    pub teacher: String,
    pub production: String,
    pub wide: String,
    pub lean: String,
    pub twin: String,
    /// data.npz: labels, six class names, five string slices.
    pub named_set: String,
    /// data_int_slices.npz: labels, integer slices, no class names.
    pub sites_set: String,
}

pub async fn catalog(s: &Server) -> Catalog {
    let set = |file: &'static str, name: &'static str| async move {
        let a = s.upload_dataset(&fixture(file), name).await;
        assert!(a.status == 201 || a.status == 200, "{}", a.body);
        a.body["id"].as_str().unwrap().to_string()
    };
    Catalog {
        teacher: s.model_id(&fixture("teacher.onnx")).await,
        production: s.model_id(&fixture("production.onnx")).await,
        wide: s.model_id(&fixture("candidate_wide.onnx")).await,
        lean: s.model_id(&fixture("candidate_lean.onnx")).await,
        twin: s.model_id(&fixture("twin.onnx")).await,
        named_set: set("data.npz", NAMED_SET).await,
        sites_set: set("data_int_slices.npz", SITES_SET).await,
    }
}

/// Gates that candidate_wide and twin pass and candidate_lean fails, at
/// a class ("sound") and at a slice (the one-sample "Oriel Flats").
pub fn passing_gates() -> Value {
    json!({"min_agreement": 0.8, "min_class_agreement": 0.55, "min_slice_agreement": 0.15,
           "min_baseline_agreement_delta": -0.02, "confidence": 0.95})
}

pub fn request(
    c: &Catalog,
    project: &str,
    set: &str,
    students: &[&str],
    gates: Value,
    commit: &str,
    branch: &str,
) -> Value {
    json!({
        "project": project, "teacher": c.teacher, "students": students, "dataset": set,
        "baseline": c.production, "gates": gates,
        "tags": {"commit": commit, "branch": branch},
        "latency": {"warmup": 0, "iterations": 20},
    })
}

/// Creates an evaluation and waits until it has succeeded.
pub async fn finished(s: &Server, body: &Value) -> String {
    let a = s.create_evaluation(body).await;
    assert_eq!(a.status, 202, "{}", a.body);
    let id = a.body["id"].as_str().unwrap().to_string();
    let e = s.wait_finished(&id, LONG).await;
    assert_eq!(e["status"], "succeeded", "{e}");
    id
}

/// Four finished evaluations, oldest first.
pub struct Seeded {
    pub catalog: Catalog,
    /// grain-sorter on the named set: go, candidate_wide recommended.
    pub go: String,
    /// grain-sorter on the named set: no-go (agreement 0.99 asked for).
    pub nogo: String,
    /// grain-sorter on the set with integer slices: go.
    pub sites: String,
    /// seed-line on the set with integer slices: go.
    pub other: String,
}

pub const GO_COMMIT: &str = "a1b2c3d4e5f60718";
pub const NOGO_COMMIT: &str = "b2c3d4e5f6071829";

pub async fn seed(s: &Server) -> Seeded {
    let c = catalog(s).await;
    let put = s
        .put_json(
            &format!("/v1/projects/{PROJECT}/baseline"),
            &json!({"model": c.production}),
        )
        .await;
    assert_eq!(put.status, 200, "{}", put.body);
    let all = [c.wide.as_str(), c.lean.as_str(), c.twin.as_str()];
    let mut go_body = request(
        &c,
        PROJECT,
        &c.named_set,
        &all,
        passing_gates(),
        GO_COMMIT,
        "main",
    );
    go_body["baseline"] = json!("current");
    let go = finished(s, &go_body).await;
    let strict = json!({"min_agreement": 0.99, "min_slice_agreement": 0.15});
    let nogo = finished(
        s,
        &request(
            &c,
            PROJECT,
            &c.named_set,
            &all,
            strict,
            NOGO_COMMIT,
            "night-shift",
        ),
    )
    .await;
    let two = [c.wide.as_str(), c.lean.as_str()];
    let plain = json!({"min_agreement": 0.8});
    let sites = finished(
        s,
        &request(
            &c,
            PROJECT,
            &c.sites_set,
            &two,
            plain.clone(),
            "c3d4e5f60718293a",
            "main",
        ),
    )
    .await;
    let other = finished(
        s,
        &request(
            &c,
            OTHER_PROJECT,
            &c.sites_set,
            &two,
            plain,
            "d4e5f60718293a4b",
            "main",
        ),
    )
    .await;
    Seeded {
        catalog: c,
        go,
        nogo,
        sites,
        other,
    }
}

/// Makes the next evaluation of a holding server stop at its stage again:
/// the hold lets everything pass once its release file exists.
pub fn hold_again(s: &Server) {
    let file = s.data_dir().join(proctor::sandbox::hold::RELEASE_FILE);
    let _ = std::fs::remove_file(file);
}

/// Creates an evaluation and waits until it is held at `stage`.
pub async fn held(s: &Server, body: &Value, stage: &str) -> String {
    let a = s.create_evaluation(body).await;
    assert_eq!(a.status, 202, "{}", a.body);
    let id = a.body["id"].as_str().unwrap().to_string();
    s.wait_stage(&id, stage, LONG).await;
    id
}

/// A client that sends what a browser would, with headers of our choice.
pub fn raw_client() -> reqwest::Client {
    reqwest::Client::builder()
        .redirect(reqwest::redirect::Policy::none())
        .build()
        .unwrap()
}
