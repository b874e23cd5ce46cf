//! Every request setting has a flag, every flag a help line, and bad values
//! fail before any file is hashed.

use crate::harness::Server;
use crate::{file, proctor, submit, text};

#[test]
fn help_lists_every_gate_and_every_flag_says_what_it_does() {
    let out = proctor(&["submit", "--help"]);
    assert_eq!(out.status.code(), Some(0));
    let help = text(&out.stdout);
    for gate in proctor::engine::gates::GateName::ALL {
        assert!(help.contains(gate.as_str()), "{gate} missing from --help");
    }
    // Each flag's line, or the line after it, says something.
    let lines: Vec<&str> = help.lines().collect();
    for (i, line) in lines.iter().enumerate() {
        let flag = line.trim_start();
        if flag.starts_with("--") {
            let said = flag
                .split_once("  ")
                .is_some_and(|(_, rest)| !rest.trim().is_empty())
                || lines.get(i + 1).is_some_and(|next| {
                    let next = next.trim_start();
                    !next.is_empty() && !next.starts_with('-')
                });
            assert!(said, "no help for {flag}");
        }
    }
}

#[tokio::test]
async fn a_typo_in_a_gate_or_rank_fails_at_once_without_touching_the_server() {
    // A server that is not there: were any file hashed and sent, the error
    // would be exit 3 instead.
    let nobody = Server::start(&[]);
    let base = nobody.base.clone();
    drop(nobody);
    let (t, st, d) = (
        file("mlp", "teacher.onnx"),
        file("mlp", "student_wide.onnx"),
        file("mlp", "data.npz"),
    );
    let base_args = |extra: &[&str]| {
        let mut a = vec![
            "submit",
            "--server",
            &base,
            "--teacher",
            &t,
            "--timeout",
            "1s",
        ];
        a.extend(["--student", st.as_str(), "--data", d.as_str()]);
        a.extend_from_slice(extra);
        proctor(&a)
    };
    let gate = base_args(&["--gate", "min_agreemnt=0.9"]);
    assert_eq!(gate.status.code(), Some(2));
    assert!(text(&gate.stderr).contains("unknown gate 'min_agreemnt'"));
    let value = base_args(&["--gate", "min_agreement=high"]);
    assert_eq!(value.status.code(), Some(2));
    let rank = base_args(&["--rank-by", "speed"]);
    assert_eq!(rank.status.code(), Some(2));
    assert!(text(&rank.stderr).contains("--rank-by must be"));
    let kind = base_args(&["--output-kind", "teacher=odds"]);
    assert_eq!(kind.status.code(), Some(2));
}

#[tokio::test]
async fn every_setting_flag_reaches_the_request_as_applied() {
    let s = Server::start(&[]);
    let dir = tempfile::tempdir().unwrap();
    let json = dir.path().join("report.json");
    let teacher = file("mlp", "teacher.onnx");
    let named = format!("{teacher}=fleet-teacher");
    let out = submit(
        &s,
        &[
            "--batch-size",
            "16",
            "--warmup",
            "2",
            "--iterations",
            "7",
            "--tolerance",
            "0.05",
            "--output",
            "logits",
            "--output-kind",
            "teacher=logits",
            "--output-kind",
            "students=auto",
            "--name",
            &named,
            "--temperature",
            "2",
            "--alpha",
            "0.25",
            "--project",
            "ridge-line",
            "--json",
            json.to_str().unwrap(),
        ],
    );
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let st = &r["settings"];
    assert_eq!(st["batch_size"], 16);
    assert_eq!(
        st["latency"],
        serde_json::json!({"warmup": 2, "iterations": 7, "tolerance": 0.05})
    );
    assert_eq!(st["output"], "logits");
    assert_eq!(
        (st["temperature"].as_f64(), st["alpha"].as_f64()),
        (Some(2.0), Some(0.25))
    );
    assert_eq!(r["project"], "ridge-line");
    assert_eq!(r["teacher"]["model"]["name"], "fleet-teacher");
    assert_eq!(r["teacher"]["output_kind"], "logits");
}

#[tokio::test]
async fn an_output_per_model_names_models_by_their_file() {
    let s = Server::start(&[]);
    let (t, st) = (
        file("mlp", "teacher.onnx"),
        file("mlp", "student_wide.onnx"),
    );
    let per_teacher = format!("{t}=logits");
    let per_student = format!("{st}=logits");
    let out = submit(&s, &["--output", &per_teacher, "--output", &per_student]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let unknown = submit(
        &s,
        &[
            "--output",
            "elsewhere.onnx=logits",
            "--output",
            &per_student,
        ],
    );
    assert_eq!(unknown.status.code(), Some(2));
    assert!(text(&unknown.stderr).contains("is not a --teacher, --student or --baseline"));
}
