//! Whole evaluations through `engine::evaluate`, compared with the fixtures.

use std::path::Path;
use std::sync::Mutex;

use proctor::engine::gates::{GateName, Gates};
use proctor::engine::settings::Settings;
use proctor::engine::{
    Alone, DatasetRef, EngineError, Hooks, Job, ModelRef, Options, Outcome, Stage, evaluate,
    prepare,
};
use proctor::report::Verdict;
use serde_json::{Value, json};
use uuid::Uuid;

use crate::support::{ENGINES_F32, assert_matches, case_dir, expected};

fn model_ref(case: &str, file: &str) -> ModelRef {
    let path = case_dir(case).join(file);
    let bytes = std::fs::read(&path).unwrap();
    use sha2::Digest;
    ModelRef {
        id: Uuid::now_v7(),
        name: file.trim_end_matches(".onnx").to_string(),
        sha256: hex::encode(sha2::Sha256::digest(&bytes)),
        bytes: bytes.len() as u64,
        path,
    }
}

fn dataset_ref(path: &Path) -> DatasetRef {
    use sha2::Digest;
    DatasetRef {
        id: Uuid::now_v7(),
        name: "set".into(),
        sha256: hex::encode(sha2::Sha256::digest(std::fs::read(path).unwrap())),
        path: path.to_owned(),
    }
}

fn job(case: &str, students: &[&str], settings: Settings) -> Job {
    Job {
        evaluation: Uuid::now_v7(),
        project: "reference".into(),
        created_at: time::OffsetDateTime::now_utc(),
        teacher: model_ref(case, "teacher.onnx"),
        baseline: None,
        students: students.iter().map(|s| model_ref(case, s)).collect(),
        dataset: dataset_ref(&case_dir(case).join("data.npz")),
        settings,
        claimed_at: None,
        worker: None,
    }
}

fn settings_of(case: &str) -> Settings {
    let exp = expected(case);
    Settings {
        temperature: exp["temperature"].as_f64().unwrap(),
        alpha: exp["alpha"].as_f64().unwrap(),
        ..Settings::default()
    }
}

fn quick(mut s: Settings) -> Settings {
    s.latency.warmup = 1;
    s.latency.iterations = 5;
    s
}

fn run(job: &Job, options: &Options) -> Result<Outcome, EngineError> {
    evaluate(
        job,
        options,
        &Hooks {
            progress: &|_, _, _| {},
            cpu: &Alone,
        },
    )
}

/// The figures a report holds for a candidate, shaped like expected.json.
fn candidate_figures(report: &Value, name: &str) -> Value {
    let c = report["candidates"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["model"]["name"] == name)
        .unwrap_or_else(|| panic!("no candidate {name}"));
    let mut acc = c["accuracy"].clone();
    if let Some(a) = acc.as_object_mut() {
        a.remove("ece_bins");
    }
    json!({"fidelity": c["fidelity"], "accuracy": acc})
}

#[test]
fn a_full_evaluation_reproduces_the_reference_figures_within_float32_noise() {
    for case in [
        "mlp",
        "text",
        "softmax_head",
        "ties",
        "fixed_batch",
        "unlabeled",
    ] {
        let exp = expected(case);
        let students: Vec<String> = exp["models"]
            .as_object()
            .unwrap()
            .iter()
            .filter(|(stem, _)| *stem != "teacher")
            .map(|(_, m)| m["file"].as_str().unwrap().to_string())
            .collect();
        let refs: Vec<&str> = students.iter().map(String::as_str).collect();
        let out = run(
            &job(case, &refs, quick(settings_of(case))),
            &Options::default(),
        )
        .unwrap_or_else(|e| panic!("{case}: {e}"));
        let report = serde_json::to_value(&out.report).unwrap();
        for (stem, want) in exp["students"].as_object().unwrap() {
            let mut want = want.clone();
            if let Some(a) = want["accuracy"].as_object_mut() {
                a.remove("b");
                a.remove("c");
                a.remove("ece_bins");
            }
            let got = candidate_figures(&report, stem);
            assert_matches(&got, &want, ENGINES_F32, &format!("{case}/{stem}"));
        }
        assert_eq!(
            report["teacher"]["output_kind"],
            exp["models"]["teacher"]["output_kind"]
        );
        assert_eq!(report["dataset"]["samples"], exp["samples"]);
    }
}

#[test]
fn a_report_has_every_section_of_the_contract() {
    let out = run(
        &job("mlp", &["student_wide.onnx"], quick(Settings::default())),
        &Options::default(),
    )
    .unwrap();
    let r = serde_json::to_value(&out.report).unwrap();
    for key in [
        "evaluation",
        "project",
        "created_at",
        "finished_at",
        "environment",
        "settings",
        "dataset",
        "teacher",
        "candidates",
        "verdict",
        "recommended",
    ] {
        assert!(r.get(key).is_some(), "report lacks {key}");
    }
    let c = &r["candidates"][0];
    for key in [
        "p50_ms",
        "p90_ms",
        "p99_ms",
        "mean_ms",
        "stdev_ms",
        "throughput_sps",
        "speedup",
    ] {
        assert!(
            c["latency"][key].is_number(),
            "latency lacks {key}: {}",
            c["latency"]
        );
    }
    assert!(r["teacher"]["latency"].get("speedup").is_none());
    assert_eq!(r["environment"]["engine"]["name"], "tract");
    assert_eq!(r["environment"]["threads"]["timing"], 1);
    assert_eq!(r["teacher"]["accuracy"]["ece_bins"], 15);
    // No gates: every candidate passes, so the verdict is go (metrics.md, Ranking 4).
    assert_eq!(out.report.verdict, Verdict::Go);
    assert_eq!(
        out.report.recommended,
        Some(out.report.candidates[0].model.id)
    );
}

#[test]
fn the_timed_rounds_run_exactly_the_requested_iterations_of_every_model() {
    let mut s = Settings::default();
    s.latency.warmup = 0;
    s.latency.iterations = 7;
    let out = run(
        &job("mlp", &["student_narrow.onnx", "student_wide.onnx"], s),
        &Options::default(),
    )
    .unwrap();
    assert_eq!(out.rounds.len(), 7, "one row per round");
    for round in &out.rounds {
        assert_eq!(round.len(), 3, "the teacher and both students, once each");
        assert!(round.iter().all(|ms| *ms > 0.0), "{round:?}");
    }
}

#[test]
fn a_single_round_makes_every_percentile_that_round_and_leaves_stdev_undefined() {
    let mut s = Settings::default();
    s.latency.warmup = 0;
    s.latency.iterations = 1;
    let out = run(
        &job("mlp", &["student_narrow.onnx"], s),
        &Options::default(),
    )
    .unwrap();
    let l = &out.report.candidates[0].latency.own;
    assert_eq!(out.rounds.len(), 1);
    assert_eq!(l.p50_ms, out.rounds[0][1]);
    assert_eq!(l.p99_ms, out.rounds[0][1]);
    assert_eq!(l.mean_ms, out.rounds[0][1]);
    assert_eq!(l.stdev_ms, None);
}

#[test]
fn a_second_evaluation_against_the_same_teacher_and_set_reuses_its_scores() {
    let cache = tempfile::tempdir().unwrap();
    let options = Options {
        teacher_cache: Some(cache.path().to_owned()),
        bulk_threads: 1,
    };
    let first = run(
        &job("mlp", &["student_wide.onnx"], quick(Settings::default())),
        &options,
    )
    .unwrap();
    let second = run(
        &job("mlp", &["student_narrow.onnx"], quick(Settings::default())),
        &options,
    )
    .unwrap();
    assert!(!first.teacher_from_cache);
    assert!(second.teacher_from_cache);
    assert_eq!(
        first.report.teacher.accuracy,
        second.report.teacher.accuracy
    );
    assert_eq!(
        first.report.teacher.latency.throughput_sps,
        second.report.teacher.latency.throughput_sps
    );
}

#[test]
fn progress_walks_through_every_stage_in_order_and_ends_complete() {
    let seen: Mutex<Vec<(Stage, u64, u64)>> = Mutex::new(Vec::new());
    let progress = |s: Stage, d: u64, t: u64| seen.lock().unwrap().push((s, d, t));
    evaluate(
        &job(
            "binary",
            &["student_small.onnx"],
            quick(Settings::default()),
        ),
        &Options::default(),
        &Hooks {
            progress: &progress,
            cpu: &Alone,
        },
    )
    .unwrap();
    let seen = seen.into_inner().unwrap();
    let mut order: Vec<Stage> = seen.iter().map(|(s, _, _)| *s).collect();
    order.dedup();
    assert_eq!(
        order,
        vec![Stage::Loading, Stage::Bulk, Stage::Timing, Stage::Scoring],
        "api.md's stage names, each entered once"
    );
    for stage in &order {
        let last = seen.iter().rev().find(|(s, _, _)| s == stage).unwrap();
        assert_eq!(last.1, last.2, "{stage:?} did not finish: {last:?}");
    }
}

#[test]
fn teacher_and_student_with_different_class_counts_are_refused_before_running() {
    let mut j = job("mlp", &[], Settings::default());
    j.students = vec![model_ref("bad", "six_classes.onnx")];
    let err = prepare(&j).err().unwrap();
    assert!(matches!(err, EngineError::Mismatch(_)), "{err:?}");
    let msg = err.to_string();
    assert!(
        msg.contains("10 classes") && msg.contains("scores 6"),
        "{msg}"
    );
}

#[test]
fn labels_beyond_the_class_count_are_refused_before_running() {
    let mut j = job("mlp", &["student_wide.onnx"], Settings::default());
    j.dataset = dataset_ref(&case_dir("bad").join("big_labels.npz"));
    let err = prepare(&j).err().unwrap();
    let msg = err.to_string();
    assert!(
        msg.contains("label 12 at sample 9") && msg.contains("[0, 10)"),
        "{msg}"
    );
}

#[test]
fn a_model_that_outputs_nan_fails_naming_the_model_and_the_sample() {
    let mut j = job("mlp", &[], quick(Settings::default()));
    j.students = vec![model_ref("bad", "nan_output.onnx")];
    let err = run(&j, &Options::default()).err().unwrap();
    assert!(matches!(err, EngineError::BadOutput(_)), "{err:?}");
    let msg = err.to_string();
    assert!(
        msg.contains("student 'nan_output' gave NaN for sample"),
        "{msg}"
    );
}

#[test]
fn a_gate_that_fails_makes_the_verdict_no_go_and_says_which() {
    let mut s = quick(Settings::default());
    s.gates =
        serde_json::from_value::<Gates>(json!({"min_agreement": 0.99, "max_bytes": 1e9})).unwrap();
    let out = run(&job("mlp", &["student_wide.onnx"], s), &Options::default()).unwrap();
    assert_eq!(out.report.verdict, Verdict::NoGo);
    assert_eq!(out.report.recommended, None);
    let checks = &out.report.candidates[0].gates.checks;
    assert_eq!(checks.len(), 2);
    assert_eq!(checks[0].gate, GateName::MinAgreement);
    assert!(!checks[0].passed);
    assert!(checks[1].passed);
}

#[test]
fn the_teacher_listed_as_a_student_is_a_self_check() {
    let out = run(
        &job("mlp", &["teacher.onnx"], quick(Settings::default())),
        &Options::default(),
    )
    .unwrap();
    let f = &out.report.candidates[0].fidelity;
    assert_eq!(f.agreement, 1.0);
    assert_eq!(f.kl, 0.0);
    assert_eq!(out.report.candidates[0].size.size_ratio, 1.0);
}
