//! Evaluations through the API: queued, run, reported, canceled.

use std::time::Duration;

use serde_json::{Value, json};

use crate::harness::Server;
use crate::support::{ENGINES_F32, assert_matches, case_dir, expected, page_ids};

const LONG: Duration = Duration::from_secs(120);

/// Uploads a case's teacher, the named students and its set.
async fn upload_case(s: &Server, case: &str, students: &[&str]) -> (String, Vec<String>, String) {
    let teacher = s.model_id(&case_dir(case).join("teacher.onnx")).await;
    let mut ids = Vec::new();
    for f in students {
        ids.push(s.model_id(&case_dir(case).join(f)).await);
    }
    let set = s.dataset_id(&case_dir(case).join("data.npz")).await;
    (teacher, ids, set)
}

fn quick_latency() -> Value {
    json!({"warmup": 1, "iterations": 5})
}

#[tokio::test]
async fn a_submitted_evaluation_runs_and_its_report_matches_the_reference() {
    let s = Server::start(&[]);
    let (teacher, students, set) =
        upload_case(&s, "mlp", &["student_wide.onnx", "student_narrow.onnx"]).await;
    let a = s
        .create_evaluation(&json!({
            "project": "turbine-acoustics", "teacher": teacher, "students": students,
            "dataset": set, "latency": quick_latency(), "tags": {"commit": "3f9c2e1"},
        }))
        .await;
    assert_eq!(a.status, 202, "{}", a.body);
    assert_eq!(a.body["status"], "queued");
    let id = a.body["id"].as_str().unwrap().to_string();
    assert_eq!(
        a.location.as_deref(),
        Some(format!("/v1/evaluations/{id}").as_str())
    );
    // Defaults are filled in (api.md).
    assert_eq!(a.body["request"]["temperature"], 4.0);
    assert_eq!(a.body["request"]["alpha"], 0.5);
    assert_eq!(a.body["request"]["batch_size"], 32);
    assert_eq!(a.body["request"]["rank_by"], "agreement");
    assert_eq!(a.body["tags"], json!({"commit": "3f9c2e1"}));

    let done = s.wait_finished(&id, LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    assert_eq!(done["verdict"], "go");
    assert!(done["started_at"].is_string() && done["finished_at"].is_string());
    let report = s.get(&format!("/v1/evaluations/{id}/report")).await;
    assert_eq!(report.status, 200);
    let exp = expected("mlp");
    for c in report.body["candidates"].as_array().unwrap() {
        let stem = c["model"]["name"].as_str().unwrap();
        let mut want = exp["students"][stem].clone();
        for k in ["b", "c"] {
            want["accuracy"].as_object_mut().unwrap().remove(k);
        }
        let got = json!({"fidelity": c["fidelity"], "accuracy": c["accuracy"]});
        assert_matches(&got, &want, ENGINES_F32, stem);
    }
    assert_eq!(
        report.body["recommended"],
        report.body["candidates"][0]["model"]["id"]
    );
    assert_eq!(report.body["evaluation"], json!(id));
    assert_eq!(report.body["project"], "turbine-acoustics");
}

#[tokio::test]
async fn lists_filter_by_project_teacher_and_status() {
    let s = Server::start(&[]);
    let (teacher, students, set) = upload_case(&s, "binary", &["student_small.onnx"]).await;
    let body = |project: &str| json!({"project": project, "teacher": teacher, "students": students, "dataset": set, "latency": quick_latency()});
    let a = s.create_evaluation(&body("alpha")).await.body["id"]
        .as_str()
        .unwrap()
        .to_string();
    let b = s.create_evaluation(&body("beta")).await.body["id"]
        .as_str()
        .unwrap()
        .to_string();
    s.wait_finished(&a, LONG).await;
    s.wait_finished(&b, LONG).await;
    assert_eq!(
        page_ids(&s.get("/v1/evaluations").await.body),
        vec![b.clone(), a.clone()],
        "newest first"
    );
    assert_eq!(
        page_ids(&s.get("/v1/evaluations?project=alpha").await.body),
        vec![a.clone()]
    );
    assert_eq!(
        page_ids(
            &s.get(&format!(
                "/v1/evaluations?teacher={teacher}&status=succeeded"
            ))
            .await
            .body
        )
        .len(),
        2
    );
    assert!(page_ids(&s.get("/v1/evaluations?status=running").await.body).is_empty());
}

#[tokio::test]
async fn canceling_a_running_evaluation_stops_its_engine_process_and_its_report_stays_unavailable()
{
    let s = Server::holding("timing");
    let (teacher, students, set) = upload_case(&s, "mlp", &["student_wide.onnx"]).await;
    let students: Vec<&str> = students.iter().map(String::as_str).collect();
    let id = s.held_evaluation(&teacher, &students, &set, "timing").await;
    assert_eq!(s.engine_processes(), 1, "the evaluation runs in its child");
    let c = s.delete(&format!("/v1/evaluations/{id}")).await;
    assert_eq!(c.status, 200, "{}", c.body);
    assert_eq!(c.body["status"], "canceled");
    s.wait_engine_processes(0, LONG).await;
    // Released now, a child still alive would finish; none is, so nothing does.
    s.release();
    assert_eq!(s.evaluation(&id).await["status"], "canceled");
    let r = s.get(&format!("/v1/evaluations/{id}/report")).await;
    assert_eq!(r.status, 409);
    let again = s.delete(&format!("/v1/evaluations/{id}")).await;
    assert_eq!(
        again.status, 409,
        "an evaluation already finished cannot be canceled"
    );
}

#[tokio::test]
async fn a_failing_gate_gives_no_go_with_the_failed_check() {
    let s = Server::start(&[]);
    let (teacher, students, set) = upload_case(&s, "mlp", &["student_narrow.onnx"]).await;
    let a = s
        .create_evaluation(&json!({
            "teacher": teacher, "students": students, "dataset": set, "latency": quick_latency(),
            "gates": {"min_agreement": 0.95, "confidence": 0.95},
        }))
        .await;
    let id = a.body["id"].as_str().unwrap().to_string();
    let done = s.wait_finished(&id, LONG).await;
    assert_eq!(done["verdict"], "no-go");
    let r = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    let check = &r["candidates"][0]["gates"]["checks"][0];
    assert_eq!(check["gate"], "min_agreement");
    assert_eq!(check["passed"], false);
    assert!(
        check["judged"].as_f64().unwrap() < check["estimate"].as_f64().unwrap(),
        "{check}"
    );
    assert_eq!(
        r["settings"]["gates"],
        json!({"min_agreement": 0.95, "confidence": 0.95})
    );
    assert!(r["recommended"].is_null());
}

#[tokio::test]
async fn the_timings_hold_every_round_and_reproduce_every_latency_figure() {
    let s = Server::holding("bulk");
    let (teacher, students, set) =
        upload_case(&s, "mlp", &["student_wide.onnx", "student_narrow.onnx"]).await;
    let a = s
        .create_evaluation(
            &json!({"teacher": teacher, "students": students, "dataset": set,
                                    "latency": {"warmup": 0, "iterations": 9}}),
        )
        .await;
    let id = a.body["id"].as_str().unwrap().to_string();
    s.wait_stage(&id, "bulk", LONG).await;
    let early = s.get(&format!("/v1/evaluations/{id}/timings")).await;
    assert_eq!(early.status, 409, "{}", early.body);
    s.release();
    assert_eq!(s.wait_finished(&id, LONG).await["status"], "succeeded");
    let t = s.get(&format!("/v1/evaluations/{id}/timings")).await.body;
    let models: Vec<&str> = t["models"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m.as_str().unwrap())
        .collect();
    assert_eq!(models, [teacher.as_str(), &students[0], &students[1]]);
    let rounds: Vec<Vec<f64>> = serde_json::from_value(t["rounds"].clone()).unwrap();
    assert_eq!(rounds.len(), 9);
    assert!(rounds.iter().all(|r| r.len() == 3));
    let column = |i: usize| -> Vec<f64> { rounds.iter().map(|r| r[i]).collect() };
    let report = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    let mut teacher_latency = report["teacher"]["latency"].clone();
    teacher_latency
        .as_object_mut()
        .unwrap()
        .remove("throughput_sps");
    let mut want =
        serde_json::to_value(proctor::engine::latency::summarize(&column(0), 0.0)).unwrap();
    want.as_object_mut().unwrap().remove("throughput_sps");
    assert_eq!(teacher_latency, want);
    for c in report["candidates"].as_array().unwrap() {
        let i = models
            .iter()
            .position(|m| *m == c["model"]["id"].as_str().unwrap())
            .unwrap();
        let recomputed = proctor::engine::latency::summarize_against(&column(i), &column(0), 0.0);
        let mut got = c["latency"].clone();
        got.as_object_mut().unwrap().remove("throughput_sps");
        let mut want = serde_json::to_value(recomputed).unwrap();
        want.as_object_mut().unwrap().remove("throughput_sps");
        assert_eq!(got, want, "{}", c["model"]["name"]);
    }
    let stages = &report["timings"];
    for key in ["queued_s", "loading_s", "bulk_s", "timing_s", "scoring_s"] {
        assert!(
            stages[key].as_f64().is_some_and(|s| s >= 0.0),
            "{key}: {stages}"
        );
    }
    assert!(
        stages["bulk_s"].as_f64().unwrap() > 0.0,
        "the held bulk pass took time: {stages}"
    );
}
