#![allow(unreachable_pub)]
//! `proctor submit` and `proctor demo` against a real server.

#[path = "../support/mod.rs"]
mod support;

#[path = "../support/server.rs"]
#[allow(dead_code)]
mod harness;

use std::path::Path;
use std::process::{Command, Output};

use harness::Server;
use support::case_dir;

mod following;
mod outputs;
mod settings;

fn proctor(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_proctor"))
        .args(args)
        .output()
        .unwrap()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn file(case: &str, name: &str) -> String {
    case_dir(case).join(name).to_string_lossy().into_owned()
}

/// `proctor submit` for the mlp case with extra arguments.
fn submit(server: &Server, extra: &[&str]) -> Output {
    let (t, s, d) = (
        file("mlp", "teacher.onnx"),
        file("mlp", "student_wide.onnx"),
        file("mlp", "data.npz"),
    );
    let mut args = vec![
        "submit",
        "--server",
        &server.base,
        "--teacher",
        &t,
        "--student",
        &s,
        "--data",
        &d,
    ];
    args.extend_from_slice(extra);
    proctor(&args)
}

#[tokio::test]
async fn a_candidate_that_passes_exits_0_with_the_teacher_as_the_reference_row() {
    let s = Server::start(&[]);
    let out = submit(&s, &["--gate", "min_agreement=0.5"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let table = text(&out.stdout);
    let lines: Vec<&str> = table.lines().collect();
    assert!(
        lines[0].contains("agreement") && lines[0].contains("p90 ms"),
        "{table}"
    );
    assert!(
        lines[1].trim_start().starts_with("ref") && lines[1].contains("teacher"),
        "{table}"
    );
    assert!(
        !lines[1].contains("teacher (teacher)"),
        "the name says the role: {table}"
    );
    assert!(
        lines[2].contains("student_wide") && lines[2].contains("pass 1/1"),
        "{table}"
    );
    assert!(table.contains("verdict: GO"), "{table}");
}

#[tokio::test]
async fn a_failed_gate_exits_1_and_the_junit_file_has_one_testcase_per_gate() {
    let s = Server::start(&[]);
    let dir = tempfile::tempdir().unwrap();
    let junit = dir.path().join("gates.xml");
    let summary = dir.path().join("summary.md");
    let out = submit(
        &s,
        &[
            "--gate",
            "min_agreement=0.99",
            "--gate",
            "max_size_ratio=1",
            "--junit",
            junit.to_str().unwrap(),
            "--summary",
            summary.to_str().unwrap(),
        ],
    );
    assert_eq!(out.status.code(), Some(1), "{}", text(&out.stderr));
    let xml = std::fs::read_to_string(&junit).unwrap();
    let doc = roxmltree::Document::parse(&xml).expect("JUnit XML parses");
    let suites: Vec<_> = doc
        .descendants()
        .filter(|n| n.has_tag_name("testsuite"))
        .collect();
    assert_eq!(suites.len(), 1, "one testsuite per candidate");
    assert_eq!(
        suites[0].attribute("name"),
        Some("student_wide"),
        "named by the model alone, so CI histories do not churn with the rank"
    );
    let cases: Vec<_> = suites[0]
        .children()
        .filter(|n| n.has_tag_name("testcase"))
        .collect();
    assert_eq!(cases.len(), 2, "one testcase per gate");
    let failed: Vec<_> = cases
        .iter()
        .filter(|c| c.children().any(|f| f.has_tag_name("failure")))
        .collect();
    assert_eq!(failed.len(), 1);
    assert_eq!(failed[0].attribute("name"), Some("min_agreement"));
    let failure = failed[0]
        .children()
        .find(|f| f.has_tag_name("failure"))
        .unwrap();
    let body = failure.text().unwrap();
    assert!(
        body.contains("threshold=0.99") && body.contains("judged="),
        "{body}"
    );
    let md = std::fs::read_to_string(&summary).unwrap();
    assert!(md.contains("verdict: NO-GO"), "{md}");
    assert!(
        md.contains("min_agreement >= 0.99") && md.contains("max_size_ratio <= 1"),
        "the thresholds: {md}"
    );
}

#[tokio::test]
async fn every_failed_gate_is_listed_with_what_was_judged() {
    let s = Server::start(&[]);
    let out = submit(
        &s,
        &[
            "--gate",
            "min_agreement=0.999",
            "--gate",
            "max_kl=0.0001",
            "--gate",
            "max_bytes=1e12",
            "--gate",
            "confidence=0.95",
        ],
    );
    assert_eq!(out.status.code(), Some(1), "{}", text(&out.stderr));
    let table = text(&out.stdout);
    assert!(table.contains("FAIL 2 of 3"), "{table}");
    let failed: Vec<&str> = table
        .lines()
        .filter(|l| l.trim_start().starts_with("student_wide:"))
        .collect();
    assert_eq!(
        failed.len(),
        2,
        "both failures, not only the first: {table}"
    );
    assert!(
        failed[0].contains("min_agreement") && failed[0].contains("Wilson lower bound at 95 %"),
        "{table}"
    );
    assert!(
        failed[1].contains("max_kl") && failed[1].contains("(estimate)"),
        "{table}"
    );
}

#[tokio::test]
async fn the_summary_names_the_recommended_candidate() {
    let s = Server::start(&[]);
    let dir = tempfile::tempdir().unwrap();
    let summary = dir.path().join("summary.md");
    let json = dir.path().join("report.json");
    let out = submit(
        &s,
        &[
            "--summary",
            summary.to_str().unwrap(),
            "--json",
            json.to_str().unwrap(),
        ],
    );
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let md = std::fs::read_to_string(&summary).unwrap();
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let id = report["recommended"].as_str().unwrap();
    assert!(
        md.contains(&format!("recommended student_wide ({id})")),
        "{md}"
    );
    let evaluation = report["evaluation"].as_str().unwrap();
    assert!(
        md.contains(&format!("({}/evaluations/{evaluation})", s.base)),
        "a link to the dashboard page: {md}"
    );
}

#[tokio::test]
async fn a_teacher_already_on_the_server_is_not_uploaded_again() {
    let s = Server::start(&[]);
    assert_eq!(submit(&s, &[]).status.code(), Some(0));
    let second = submit(&s, &["--student", &file("mlp", "student_narrow.onnx")]);
    assert_eq!(second.status.code(), Some(0), "{}", text(&second.stderr));
    let log = text(&second.stderr);
    assert!(
        log.contains(&format!("{}: already stored", file("mlp", "teacher.onnx"))),
        "{log}"
    );
    let models = s.get("/v1/models").await.body;
    assert_eq!(
        models["items"].as_array().unwrap().len(),
        3,
        "teacher, wide, narrow: each stored once"
    );
}

#[tokio::test]
async fn input_errors_exit_2_and_server_errors_exit_3() {
    let s = Server::start(&[]);
    let missing = proctor(&[
        "submit",
        "--server",
        &s.base,
        "--teacher",
        "/nonexistent.onnx",
        "--student",
        "x",
        "--data",
        "y",
    ]);
    assert_eq!(missing.status.code(), Some(2), "{}", text(&missing.stderr));
    let unknown_gate = submit(&s, &["--gate", "min_agreemnt=0.9"]);
    assert_eq!(
        unknown_gate.status.code(),
        Some(2),
        "{}",
        text(&unknown_gate.stderr)
    );
    assert!(text(&unknown_gate.stderr).contains("min_agreemnt"));
    let usage = proctor(&["submit", "--teacher", "t"]);
    assert_eq!(usage.status.code(), Some(2));
    let nobody = Server::start(&[]);
    let base = nobody.base.clone();
    drop(nobody);
    let (t, st, d) = (
        file("mlp", "teacher.onnx"),
        file("mlp", "student_wide.onnx"),
        file("mlp", "data.npz"),
    );
    let down = proctor(&[
        "submit",
        "--timeout",
        "2s",
        "--server",
        &base,
        "--teacher",
        &t,
        "--student",
        &st,
        "--data",
        &d,
    ]);
    assert_eq!(down.status.code(), Some(3), "{}", text(&down.stderr));
}

/// The demo's story (demo/README.md): distillation beats hard labels at the
/// same size, a slice gate stops the student that regresses at one position,
/// and the distilled student is recommended against the production baseline.
#[test]
fn the_demo_recommends_the_distilled_student_and_a_slice_gate_stops_the_wide_one() {
    let dir = tempfile::tempdir().unwrap();
    let out = proctor(&["demo", "--exit", "--data-dir", dir.path().to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let table = text(&out.stdout);
    let row = |name: &str| -> &str {
        table
            .lines()
            .find(|l| l.split_whitespace().nth(1) == Some(name))
            .unwrap_or_else(|| panic!("no row {name}:\n{table}"))
    };
    // rank, model, an optional Pareto star, then agreement.
    let agreement = |name: &str| -> f64 {
        row(name)
            .split_whitespace()
            .skip(2)
            .find(|t| *t != "*")
            .unwrap()
            .parse()
            .unwrap()
    };
    assert!(
        agreement("student_distilled_64") > agreement("student_hard_64"),
        "{table}"
    );
    assert!(row("student_production").starts_with("base"), "{table}");
    assert!(row("student_distilled_64").contains("pass 5/5"), "{table}");
    assert!(
        table.contains("student_wide_96: min_slice_agreement at tower_base"),
        "{table}"
    );
    assert!(
        table.contains("verdict: GO — recommended student_distilled_64"),
        "{table}"
    );
    // The service is gone once --exit returns: no address to visit, but the
    // kept data dir is named.
    assert!(!table.contains("dashboard: http"), "{table}");
    assert!(
        table.contains(&format!("kept in {}", dir.path().display())),
        "{table}"
    );
    assert!(Path::new(dir.path()).join("proctor.db").exists());
}

#[tokio::test]
async fn a_torch_export_with_external_data_is_sent_as_a_bundle_of_the_files_it_names() {
    // The exporter's folder holds the .onnx and its .data file; a stray
    // entry beside them must not be read (a dangling link fails any read).
    let dir = tempfile::tempdir().unwrap();
    for folder in ["teacher", "student_small"] {
        let to = dir.path().join(folder);
        std::fs::create_dir(&to).unwrap();
        for entry in std::fs::read_dir(case_dir("torch_external").join(folder)).unwrap() {
            let from = entry.unwrap().path();
            std::fs::copy(&from, to.join(from.file_name().unwrap())).unwrap();
        }
    }
    std::os::unix::fs::symlink("/nonexistent/old.data", dir.path().join("teacher/old.data"))
        .unwrap();
    let s = Server::start(&[]);
    let (t, st, d) = (
        dir.path().join("teacher/teacher.onnx"),
        dir.path().join("student_small/student_small.onnx"),
        file("torch_external", "data.npz"),
    );
    let args = [
        "submit",
        "--server",
        &s.base,
        "--teacher",
        t.to_str().unwrap(),
        "--student",
        st.to_str().unwrap(),
        "--data",
        &d,
    ];
    let out = proctor(&args);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let models = s.get("/v1/models").await.body;
    let want = &support::expected("torch_external")["models"];
    assert_eq!(models["items"].as_array().unwrap().len(), 2, "{models}");
    for m in models["items"].as_array().unwrap() {
        let stem = m["name"].as_str().unwrap().trim_end_matches(".onnx");
        assert_eq!(m["external_data"], want[stem]["external_data"], "{m}");
    }
    // A second submit finds both models by the hash of the self-contained
    // file it computes itself, and uploads nothing.
    let again = proctor(&args);
    assert_eq!(again.status.code(), Some(0), "{}", text(&again.stderr));
    assert!(
        !text(&again.stderr).contains("uploaded"),
        "{}",
        text(&again.stderr)
    );
}
