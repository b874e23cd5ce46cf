//! The files a CI job keeps: CSV of the ranked candidates, JUnit that holds
//! any name, and the baseline story from `--baseline` and `proctor adopt`.

use crate::harness::Server;
use crate::support::case_dir;
use crate::{file, proctor, submit, text};

#[tokio::test]
async fn the_csv_lists_the_ranked_candidates_as_the_api_serves_them() {
    let s = Server::start(&[]);
    let dir = tempfile::tempdir().unwrap();
    let csv = dir.path().join("candidates.csv");
    let json = dir.path().join("report.json");
    let narrow = file("mlp", "student_narrow.onnx");
    let out = submit(
        &s,
        &[
            "--student",
            &narrow,
            "--csv",
            csv.to_str().unwrap(),
            "--json",
            json.to_str().unwrap(),
        ],
    );
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let written = std::fs::read_to_string(&csv).unwrap();
    let mut rows = csv::Reader::from_reader(written.as_bytes());
    let header = rows.headers().unwrap().clone();
    assert_eq!(&header[0], "rank");
    let records: Vec<csv::StringRecord> = rows.records().map(Result::unwrap).collect();
    assert_eq!(records.len(), 2);
    let report: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    for (row, c) in records.iter().zip(report["candidates"].as_array().unwrap()) {
        assert_eq!(&row[1], c["model"]["name"].as_str().unwrap(), "rank order");
        let agreement: f64 = row[6].parse().unwrap();
        assert_eq!(agreement, c["fidelity"]["agreement"].as_f64().unwrap());
    }
    let id = report["evaluation"].as_str().unwrap();
    let served = reqwest::Client::new()
        .get(format!("{}/v1/evaluations/{id}/report", s.base))
        .header("accept", "text/csv")
        .send()
        .await
        .unwrap();
    assert!(
        served.headers()["content-type"]
            .to_str()
            .unwrap()
            .starts_with("text/csv")
    );
    assert_eq!(served.text().await.unwrap(), written);
}

#[tokio::test]
async fn junit_holds_names_with_markup_and_non_ascii_characters() {
    let s = Server::start(&[]);
    let dir = tempfile::tempdir().unwrap();
    let junit = dir.path().join("gates.xml");
    let wide = file("mlp", "student_wide.onnx");
    let named = format!("{wide}=wide <v2> & \"Ærø\"");
    let out = submit(
        &s,
        &[
            "--name",
            &named,
            "--gate",
            "min_agreement=0.99",
            "--junit",
            junit.to_str().unwrap(),
        ],
    );
    assert_eq!(out.status.code(), Some(1), "{}", text(&out.stderr));
    let xml = std::fs::read_to_string(&junit).unwrap();
    let doc = roxmltree::Document::parse(&xml).expect("JUnit XML parses");
    let suite = doc
        .descendants()
        .find(|n| n.has_tag_name("testsuite"))
        .unwrap();
    assert_eq!(suite.attribute("name"), Some("wide <v2> & \"Ærø\""));
}

#[tokio::test]
async fn an_adopted_candidate_is_the_baseline_the_next_submission_is_judged_against() {
    let s = Server::start(&[]);
    let m = |f: &str| case_dir("baseline").join(f).to_string_lossy().into_owned();
    let common = |extra: &[&str]| {
        let (t, d) = (m("teacher.onnx"), m("data.npz"));
        let mut a = vec!["submit", "--server", &s.base, "--teacher", &t, "--data", &d];
        a.extend(["--project", "seed-grading", "--iterations", "5"]);
        a.extend_from_slice(extra);
        proctor(&a)
    };
    let (wide, lean, prod) = (
        m("candidate_wide.onnx"),
        m("candidate_lean.onnx"),
        m("production.onnx"),
    );
    let first = common(&[
        "--student",
        &prod,
        "--student",
        &lean,
        "--gate",
        "min_agreement=0.8",
    ]);
    assert_eq!(first.status.code(), Some(0), "{}", text(&first.stderr));
    let listed = s.get("/v1/evaluations").await.body;
    let id = listed["items"][0]["id"].as_str().unwrap().to_string();
    let adopted = proctor(&["adopt", &id, "--server", &s.base]);
    assert_eq!(adopted.status.code(), Some(0), "{}", text(&adopted.stderr));
    assert!(
        text(&adopted.stdout).contains("production"),
        "{}",
        text(&adopted.stdout)
    );
    let project = s.get("/v1/projects/seed-grading").await.body;
    assert_eq!(project["baseline"]["model"]["name"], "production");
    assert_eq!(project["baseline"]["evaluation"], id.as_str());
    let next = common(&[
        "--student",
        &wide,
        "--baseline",
        "current",
        "--gate",
        "min_baseline_agreement_delta=0",
    ]);
    assert_eq!(next.status.code(), Some(0), "{}", text(&next.stderr));
    let table = text(&next.stdout);
    assert!(table.contains("against the baseline production"), "{table}");
    assert!(
        table.lines().any(|l| l.trim_start().starts_with("base")),
        "{table}"
    );
    // lean failed its gate in the first evaluation: it cannot be adopted.
    let report = s.get(&format!("/v1/evaluations/{id}/report")).await.body;
    let lean_id = report["candidates"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["model"]["name"] == "candidate_lean")
        .unwrap()["model"]["id"]
        .as_str()
        .unwrap()
        .to_string();
    let refused = proctor(&["adopt", &id, "--server", &s.base, "--model", &lean_id]);
    assert_eq!(refused.status.code(), Some(2), "{}", text(&refused.stderr));
    assert!(
        text(&refused.stderr).contains("passed every gate"),
        "{}",
        text(&refused.stderr)
    );
}
