#![allow(unreachable_pub)]
//! The dashboard in a real headless Chromium (Debian's `chromium` and
//! `chromium-driver`), driven over WebDriver against the real server with
//! evaluations seeded through the API. Screenshots land in
//! target/dashboard-screens/ for a person to look at.

#[path = "../support/mod.rs"]
mod support;

#[path = "../support/server.rs"]
#[allow(dead_code)]
mod harness;

mod browser;

use std::path::Path;
use std::time::{Duration, Instant};

use serde_json::json;

use browser::Browser;
use harness::Server;

const LONG: Duration = Duration::from_secs(120);

fn demo(file: &str) -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("demo")
        .join(file)
}

/// Two finished evaluations in two projects, ids of (first, second, teacher).
async fn seed(s: &Server) -> (String, String, String) {
    let teacher = s.model_id(&demo("teacher.onnx")).await;
    let mut students = Vec::new();
    for f in [
        "student_distilled_64.onnx",
        "student_hard_64.onnx",
        "student_tiny_16.onnx",
    ] {
        students.push(s.model_id(&demo(f)).await);
    }
    let set = s.dataset_id(&demo("frames.npz")).await;
    let mut ids = Vec::new();
    for (project, branch, gates) in [
        ("turbine-acoustics", "main", json!({"min_agreement": 0.9})),
        (
            "blade-survey",
            "night-shift",
            json!({"min_agreement": 0.99}),
        ),
    ] {
        let a = s
            .create_evaluation(&json!({
                "project": project, "teacher": teacher, "students": students, "dataset": set,
                "gates": gates, "tags": {"branch": branch}, "latency": {"warmup": 1, "iterations": 10},
            }))
            .await;
        assert_eq!(a.status, 202, "{}", a.body);
        let id = a.body["id"].as_str().unwrap().to_string();
        assert_eq!(s.wait_finished(&id, LONG).await["status"], "succeeded");
        ids.push(id);
    }
    (ids[0].clone(), ids[1].clone(), teacher)
}

#[tokio::test]
async fn every_page_loads_without_console_errors_and_shows_the_stored_figures() {
    let s = Server::start(&[]);
    let (first, second, teacher) = seed(&s).await;
    let b = Browser::start().await;

    b.open(&format!("{}/", s.base)).await;
    assert_eq!(b.title().await, "Evaluations · proctor");
    let rows = b.all("table#evaluations tr.row").await;
    assert_eq!(rows.len(), 2);
    assert_eq!(
        rows[0].attr("data-id").await.unwrap(),
        second,
        "newest first"
    );
    // Verdicts in words: blade-survey's 0.99 gate fails every candidate.
    assert!(
        rows[0].text().await.contains("NO-GO"),
        "{}",
        rows[0].text().await
    );
    let first_row = rows[1].text().await;
    assert!(
        first_row.contains("GO") && !first_row.contains("NO-GO"),
        "{first_row}"
    );
    b.screenshot("evaluations").await;

    let report = s.get(&format!("/v1/evaluations/{first}/report")).await.body;
    b.open(&format!("{}/evaluations/{first}", s.base)).await;
    assert!(b.title().await.starts_with("Evaluation "));
    let candidates = b.all("table#candidates tr.candidate").await;
    let want = report["candidates"].as_array().unwrap();
    assert_eq!(candidates.len(), want.len());
    for (row, c) in candidates.iter().zip(want) {
        assert_eq!(
            row.attr("data-model").await.unwrap(),
            c["model"]["name"].as_str().unwrap(),
            "rank order"
        );
        let cells = row.text().await;
        let agreement = format!("{:.4}", c["fidelity"]["agreement"].as_f64().unwrap());
        assert!(cells.contains(&agreement), "{cells} lacks {agreement}");
    }
    let failed = b.text("table#candidates").await;
    assert!(
        failed.contains("fails min_agreement"),
        "failed gates in words: {failed}"
    );
    assert!(
        b.text("#class-agreement")
            .await
            .contains("Teacher predictions")
    );
    let link = b.all("a[href$='/report']").await;
    assert_eq!(link.len(), 1, "a link to the JSON report");
    b.screenshot("evaluation").await;

    b.open(&format!("{}/teachers/{teacher}", s.base)).await;
    assert!(b.title().await.starts_with("Teacher teacher"));
    assert_eq!(b.all("table#evaluations tr.row").await.len(), 2);
    assert_eq!(
        b.all("svg.trend").await.len(),
        2,
        "agreement and p90 trends"
    );
    b.screenshot("teacher").await;

    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}

#[tokio::test]
async fn the_scatter_has_one_marker_per_candidate() {
    let s = Server::start(&[]);
    let (first, _, _) = seed(&s).await;
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{first}", s.base)).await;
    let markers = b.all("svg.scatter circle.marker").await;
    let report = s.get(&format!("/v1/evaluations/{first}/report")).await.body;
    let candidates = report["candidates"].as_array().unwrap();
    assert_eq!(markers.len(), candidates.len());
    let on_front = candidates
        .iter()
        .filter(|c| c["pareto_optimal"] == true)
        .count();
    assert_eq!(
        b.all("svg.scatter circle.marker.front").await.len(),
        on_front
    );
    b.close().await;
}

#[tokio::test]
async fn filters_narrow_the_list() {
    let s = Server::start(&[]);
    let (first, second, _) = seed(&s).await;
    let b = Browser::start().await;
    b.open(&format!("{}/", s.base)).await;
    b.select("#filter-project", "turbine-acoustics").await;
    b.click("#apply-filters").await;
    let ids = b.row_ids().await;
    assert_eq!(ids, vec![first.clone()]);
    b.open(&format!("{}/", s.base)).await;
    b.select("#filter-verdict", "no-go").await;
    b.click("#apply-filters").await;
    assert_eq!(b.row_ids().await, vec![second.clone()]);
    b.open(&format!("{}/", s.base)).await;
    b.type_into("#filter-tag", "branch:night-shift").await;
    b.click("#apply-filters").await;
    assert_eq!(b.row_ids().await, vec![second]);
    b.close().await;
}

#[tokio::test]
async fn a_running_evaluations_page_shows_its_stage_and_refreshes_itself_until_it_ends() {
    let s = Server::holding("bulk");
    let teacher = s.model_id(&demo("teacher.onnx")).await;
    let student = s.model_id(&demo("student_tiny_16.onnx")).await;
    let set = s.dataset_id(&demo("frames.npz")).await;
    let id = s.held_evaluation(&teacher, &[&student], &set, "bulk").await;
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{id}", s.base)).await;
    let (done, text, status) = b.progress().await;
    assert_eq!(status, "running");
    assert!(text.contains("bulk"), "the stage in words: {text}");
    assert_eq!(done, 0, "held at the start of the bulk pass");
    b.screenshot("running").await;
    s.release();
    // The page reloads itself every 2 s while the evaluation runs.
    let start = Instant::now();
    while b.progress().await.2 != "succeeded" {
        assert!(
            start.elapsed() < Duration::from_secs(60),
            "the page never showed the evaluation finished"
        );
        tokio::time::sleep(Duration::from_millis(250)).await;
    }
    b.close().await;
}
