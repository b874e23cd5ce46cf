//! Projects, their baselines, and evaluations judged against the student
//! in production (api.md, "Projects"; metrics.md, "Baseline").

use std::time::Duration;

use serde_json::{Value, json};

use crate::harness::{Answer, Server};
use crate::support::case_dir;

const LONG: Duration = Duration::from_secs(120);

/// The baseline case's files, uploaded (shared with the PostgreSQL tests).
pub(crate) struct Uploaded {
    pub(crate) teacher: String,
    pub(crate) production: String,
    pub(crate) wide: String,
    pub(crate) lean: String,
    pub(crate) set: String,
}

pub(crate) async fn upload(s: &Server) -> Uploaded {
    let m = |f: &str| case_dir("baseline").join(format!("{f}.onnx"));
    Uploaded {
        teacher: s.model_id(&m("teacher")).await,
        production: s.model_id(&m("production")).await,
        wide: s.model_id(&m("candidate_wide")).await,
        lean: s.model_id(&m("candidate_lean")).await,
        set: s.dataset_id(&case_dir("baseline").join("data.npz")).await,
    }
}

fn quick(mut body: Value) -> Value {
    body["latency"] = json!({"warmup": 0, "iterations": 5});
    body
}

async fn finished(s: &Server, body: Value) -> Value {
    let a = s.create_evaluation(&quick(body)).await;
    assert_eq!(a.status, 202, "{}", a.body);
    let done = s.wait_finished(a.body["id"].as_str().unwrap(), LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    done
}

async fn put_baseline(s: &Server, project: &str, body: Value) -> Answer {
    s.put_json(&format!("/v1/projects/{project}/baseline"), &body)
        .await
}

fn refused(a: &Answer, field: &str) {
    assert_eq!(a.status, 422, "{}", a.body);
    assert_eq!(a.body["field"], field, "{}", a.body);
}

#[tokio::test]
async fn a_passing_candidate_becomes_the_baseline_and_its_history_is_kept_newest_first() {
    let s = Server::start(&[]);
    let u = upload(&s).await;
    let done = finished(
        &s,
        json!({"project": "seed-grading", "teacher": u.teacher, "students": [u.wide, u.lean],
               "dataset": u.set, "gates": {"min_agreement": 0.8}}),
    )
    .await;
    let e = done["id"].as_str().unwrap();
    let first = put_baseline(&s, "seed-grading", json!({"model": u.production})).await;
    assert_eq!(first.status, 200, "{}", first.body);
    assert!(first.body["baseline"]["evaluation"].is_null());
    let second = put_baseline(
        &s,
        "seed-grading",
        json!({"model": u.wide, "evaluation": e}),
    )
    .await;
    assert_eq!(second.status, 200, "{}", second.body);
    let p = s.get("/v1/projects/seed-grading").await.body;
    assert_eq!(p["name"], "seed-grading");
    assert_eq!(p["evaluations"], 1);
    assert_eq!(p["baseline"]["model"]["id"], u.wide.as_str());
    assert_eq!(p["baseline"]["evaluation"], e);
    assert!(p["baseline"]["set_at"].is_string());
    assert!(p["baseline"]["set_by"].is_null(), "access is off");
    let history: Vec<&str> = p["baseline_history"]
        .as_array()
        .unwrap()
        .iter()
        .map(|b| b["model"]["id"].as_str().unwrap())
        .collect();
    assert_eq!(history, [u.wide.as_str(), u.production.as_str()]);
    let list = s.get("/v1/projects").await.body;
    assert_eq!(list["items"][0]["name"], "seed-grading");
    assert_eq!(list["items"][0]["baseline"]["model"]["id"], u.wide.as_str());
    assert_eq!(s.get("/v1/projects/no-such-project").await.status, 404);
}

#[tokio::test]
async fn a_baseline_that_failed_a_gate_or_came_from_elsewhere_is_refused_and_nothing_is_set() {
    let s = Server::start(&[]);
    let u = upload(&s).await;
    let done = finished(
        &s,
        json!({"project": "seed-grading", "teacher": u.teacher, "students": [u.wide, u.lean],
               "dataset": u.set, "gates": {"min_agreement": 0.8}}),
    )
    .await;
    let e = done["id"].as_str().unwrap();
    // lean agrees with the teacher on under 0.8 of the samples: it failed its gate.
    refused(
        &put_baseline(
            &s,
            "seed-grading",
            json!({"model": u.lean, "evaluation": e}),
        )
        .await,
        "model",
    );
    refused(
        &put_baseline(
            &s,
            "other-project",
            json!({"model": u.wide, "evaluation": e}),
        )
        .await,
        "evaluation",
    );
    let nobody = uuid::Uuid::now_v7().to_string();
    refused(
        &put_baseline(&s, "seed-grading", json!({"model": nobody})).await,
        "model",
    );
    let p = s.get("/v1/projects/seed-grading").await.body;
    assert!(p["baseline"].is_null(), "{p}");
    assert_eq!(p["baseline_history"], json!([]));
}

#[tokio::test]
async fn an_evaluation_against_the_current_baseline_compares_every_candidate_with_it() {
    let s = Server::start(&[]);
    let u = upload(&s).await;
    let p = put_baseline(&s, "seed-grading", json!({"model": u.production})).await;
    assert_eq!(p.status, 200, "{}", p.body);
    let done = finished(
        &s,
        json!({"project": "seed-grading", "teacher": u.teacher, "students": [u.wide, u.lean],
               "dataset": u.set, "baseline": "current",
               "gates": {"min_baseline_agreement_delta": 0.0, "min_slice_agreement": 0.5}}),
    )
    .await;
    assert_eq!(
        done["request"]["baseline"],
        u.production.as_str(),
        "resolved at creation"
    );
    let id = done["id"].as_str().unwrap();
    let r = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    assert_eq!(r["baseline"]["model"]["id"], u.production.as_str());
    assert_eq!(r["settings"]["baseline"], u.production.as_str());
    assert_eq!(r["dataset"]["class_names"].as_array().unwrap().len(), 6);
    for c in r["candidates"].as_array().unwrap() {
        assert!(c["versus_baseline"]["agreement_delta"].is_number(), "{c}");
        assert!(c["slices"].as_array().is_some_and(|s| s.len() == 5), "{c}");
        let gates: Vec<&str> = c["gates"]["checks"]
            .as_array()
            .unwrap()
            .iter()
            .map(|k| k["gate"].as_str().unwrap())
            .collect();
        assert_eq!(
            gates,
            ["min_slice_agreement", "min_baseline_agreement_delta"]
        );
        assert!(
            c["gates"]["checks"][0]["at"].is_string(),
            "the slice judged"
        );
    }
    let t = s.get(&format!("/v1/evaluations/{id}/timings")).await.body;
    let order: Vec<&str> = t["models"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m.as_str().unwrap())
        .collect();
    assert_eq!(
        order,
        [u.teacher.as_str(), &u.production, &u.wide, &u.lean],
        "teacher, baseline, then the candidates in request order"
    );
}

#[tokio::test]
async fn baseline_requests_that_cannot_run_are_refused_with_their_field_and_nothing_is_stored() {
    let s = Server::start(&[]);
    let u = upload(&s).await;
    let wrong_names = s
        .dataset_id(&case_dir("baseline").join("bad_class_names.npz"))
        .await;
    let unsliced = s.dataset_id(&case_dir("mlp").join("data.npz")).await;
    let base = |extra: Value| {
        let mut b = json!({"project": "seed-grading", "teacher": u.teacher,
                           "students": [u.wide], "dataset": u.set});
        for (k, v) in extra.as_object().unwrap() {
            b[k] = v.clone();
        }
        b
    };
    let cases = [
        (json!({"baseline": "current"}), "baseline"),
        (json!({"baseline": u.wide}), "baseline"),
        (json!({"baseline": uuid::Uuid::now_v7()}), "baseline"),
        (json!({"baseline": "yesterday"}), "baseline"),
        (
            json!({"gates": {"min_baseline_agreement_delta": 0.0}}),
            "gates.min_baseline_agreement_delta",
        ),
        (json!({"dataset": wrong_names}), "dataset"),
        (json!({"students": [u.wide, u.wide]}), "students[1]"),
        (json!({"project": "has spaces"}), "project"),
        (json!({"tags": {"a b": "c"}}), "tags"),
    ];
    for (extra, field) in cases {
        let body = base(extra);
        refused(&s.create_evaluation(&body).await, field);
    }
    // A slice gate on a set without slices, with the mlp models.
    let teacher = s.model_id(&case_dir("mlp").join("teacher.onnx")).await;
    refused(
        &s.create_evaluation(&json!({"teacher": teacher, "students": [teacher],
            "dataset": unsliced, "gates": {"min_slice_agreement": 0.5}}))
            .await,
        "gates.min_slice_agreement",
    );
    assert_eq!(s.get("/v1/evaluations").await.body["items"], json!([]));
}

#[tokio::test]
async fn a_set_shows_its_class_names_and_slice_count_and_more_than_1000_slices_are_refused() {
    let s = Server::start(&[]);
    let a = s
        .upload_dataset(&case_dir("baseline").join("data.npz"), "sorting")
        .await;
    assert_eq!(a.status, 201, "{}", a.body);
    assert_eq!(a.body["slice_count"], 5);
    assert_eq!(a.body["class_names"].as_array().unwrap().len(), 6);
    let plain = s
        .upload_dataset(&case_dir("mlp").join("data.npz"), "mlp")
        .await;
    assert!(plain.body["class_names"].is_null() && plain.body["slice_count"].is_null());
    for f in ["many_slices.npz", "pickled_class_names.npz"] {
        let a = s.upload_dataset(&case_dir("bad").join(f), f).await;
        assert_eq!(a.status, 422, "{f}: {}", a.body);
    }
}
