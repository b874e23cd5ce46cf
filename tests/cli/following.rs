//! Coming back to an evaluation, time limits, and a service that restarts
//! while a CI job waits on it.

use std::process::{Command, Stdio};
use std::time::Duration;

use crate::harness::Server;
use crate::{file, proctor, submit, text};

#[tokio::test]
async fn no_wait_prints_the_id_and_says_that_exit_0_means_queued() {
    let s = Server::holding("bulk");
    let out = submit(&s, &["--no-wait"]);
    assert_eq!(out.status.code(), Some(0));
    let id = text(&out.stdout).trim().to_string();
    assert!(uuid::Uuid::parse_str(&id).is_ok(), "{id}");
    assert!(
        text(&out.stderr).contains("exit 0 here means queued, not go"),
        "{}",
        text(&out.stderr)
    );
}

#[tokio::test]
async fn wait_and_report_end_as_submit_would_have() {
    let s = Server::holding("bulk");
    let id = text(&submit(&s, &["--no-wait", "--gate", "min_agreement=0.99"]).stdout)
        .trim()
        .to_string();
    s.wait_stage(&id, "bulk", Duration::from_secs(60)).await;
    let early = proctor(&["report", &id, "--server", &s.base]);
    assert_eq!(early.status.code(), Some(2), "{}", text(&early.stderr));
    assert!(text(&early.stderr).contains("still running"));
    s.release();
    let dir = tempfile::tempdir().unwrap();
    let junit = dir.path().join("gates.xml");
    let waited = proctor(&[
        "wait",
        &id,
        "--server",
        &s.base,
        "--junit",
        junit.to_str().unwrap(),
    ]);
    assert_eq!(
        waited.status.code(),
        Some(1),
        "no-go: {}",
        text(&waited.stderr)
    );
    assert!(text(&waited.stdout).contains("verdict: NO-GO"));
    assert!(
        std::fs::read_to_string(&junit)
            .unwrap()
            .contains("min_agreement")
    );
    let fetched = proctor(&["report", &id, "--server", &s.base]);
    assert_eq!(fetched.status.code(), Some(1));
    assert_eq!(
        text(&fetched.stdout),
        text(&waited.stdout),
        "the same table"
    );
}

#[tokio::test]
async fn past_its_time_limit_submit_exits_3_naming_the_evaluation() {
    let s = Server::holding("timing");
    let out = submit(&s, &["--timeout", "2s"]);
    assert_eq!(out.status.code(), Some(3), "{}", text(&out.stderr));
    let stderr = text(&out.stderr);
    let listed = s.get("/v1/evaluations").await.body;
    let id = listed["items"][0]["id"].as_str().unwrap();
    assert!(
        stderr.contains(&format!("gave up waiting for evaluation {id}"))
            && stderr.contains(&format!("proctor wait {id}")),
        "{stderr}"
    );
}

#[tokio::test]
async fn a_service_restart_while_waiting_does_not_fail_the_job() {
    let mut s = Server::holding("timing");
    let (t, st, d) = (
        file("mlp", "teacher.onnx"),
        file("mlp", "student_wide.onnx"),
        file("mlp", "data.npz"),
    );
    let job = Command::new(env!("CARGO_BIN_EXE_proctor"))
        .args([
            "submit",
            "--server",
            &s.base,
            "--teacher",
            &t,
            "--student",
            &st,
        ])
        .args(["--data", &d, "--timeout", "3m"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let id = loop {
        let listed = s.get("/v1/evaluations").await.body;
        if let Some(id) = listed["items"][0]["id"].as_str() {
            break id.to_string();
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    };
    s.wait_stage(&id, "timing", Duration::from_secs(60)).await;
    // The evaluation goes back to the queue and runs again after the restart;
    // the job rides through the refused connections in between.
    s.restart();
    let out = tokio::task::spawn_blocking(move || job.wait_with_output().unwrap())
        .await
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    assert!(text(&out.stdout).contains("verdict: GO"));
}

#[tokio::test]
async fn progress_in_a_log_reads_as_plain_lines_in_words() {
    let s = Server::start(&[]);
    let out = submit(&s, &["--iterations", "5"]);
    assert_eq!(out.status.code(), Some(0));
    let log = text(&out.stderr);
    assert!(!log.contains("running waiting"), "{log}");
    assert!(!log.contains('\r'), "no terminal redraws in a log: {log:?}");
    let progress: Vec<&str> = log
        .lines()
        .filter(|l| l.starts_with("queued") || l.starts_with("running") || l == &"succeeded")
        .collect();
    assert_eq!(progress.last(), Some(&"succeeded"), "{log}");
    assert!(
        progress
            .iter()
            .all(|l| !l.starts_with("running") || l.starts_with("running: ")),
        "{log}"
    );
}
