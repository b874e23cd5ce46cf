//! Candidates against the student in production, class names and slices,
//! against numpy / scipy / statsmodels (tests/reference/generate.py, case
//! "baseline"): from onnxruntime's logits at 1e-9, and through a whole
//! evaluation within float32 noise.

use std::path::Path;

use proctor::engine::dataset::EvalSet;
use proctor::engine::logits::{OutputKindChoice, Scores, to_logits};
use proctor::engine::metrics::baseline::{Inputs, versus_baseline};
use proctor::engine::metrics::fidelity::fidelity;
use proctor::engine::metrics::slices::slice_figures;
use proctor::engine::settings::Settings;
use proctor::engine::{
    Alone, DatasetRef, EngineError, Hooks, Job, ModelRef, Options, evaluate, inspect_dataset,
    prepare,
};
use serde_json::{Value, json};
use sha2::Digest;
use uuid::Uuid;

use crate::support::{ENGINES_F32, SAME_LOGITS, assert_matches, case_dir, expected};

const CASE: &str = "baseline";

fn ort(stem: &str) -> Scores {
    let (shape, data) =
        proctor::engine::npy::read_f64(&case_dir(CASE).join(format!("ort/{stem}.npy"))).unwrap();
    Scores::from_rows(shape[1], data)
}

fn logits(stem: &str) -> proctor::engine::logits::Logits {
    to_logits(ort(stem), OutputKindChoice::Auto).0
}

fn model(stem: &str) -> ModelRef {
    let path = case_dir(CASE).join(format!("{stem}.onnx"));
    let bytes = std::fs::read(&path).unwrap();
    ModelRef {
        id: Uuid::now_v7(),
        name: stem.into(),
        sha256: hex::encode(sha2::Sha256::digest(&bytes)),
        bytes: bytes.len() as u64,
        path,
    }
}

fn dataset(file: &str) -> DatasetRef {
    let path = case_dir(CASE).join(file);
    DatasetRef {
        id: Uuid::now_v7(),
        name: file.into(),
        sha256: hex::encode(sha2::Sha256::digest(std::fs::read(&path).unwrap())),
        path,
    }
}

fn job(set: &str) -> Job {
    let exp = expected(CASE);
    let mut settings = Settings {
        temperature: exp["temperature"].as_f64().unwrap(),
        alpha: exp["alpha"].as_f64().unwrap(),
        ..Settings::default()
    };
    settings.latency.warmup = 0;
    settings.latency.iterations = 5;
    Job {
        evaluation: Uuid::now_v7(),
        project: "reference".into(),
        created_at: time::OffsetDateTime::now_utc(),
        teacher: model("teacher"),
        baseline: Some(model("production")),
        students: ["candidate_wide", "candidate_lean", "twin"]
            .map(model)
            .to_vec(),
        dataset: dataset(set),
        settings,
        claimed_at: None,
        worker: None,
    }
}

fn run(job: &Job) -> Value {
    let out = evaluate(
        job,
        &Options::default(),
        &Hooks {
            progress: &|_, _, _| {},
            cpu: &Alone,
        },
    )
    .unwrap_or_else(|e| panic!("{e}"));
    serde_json::to_value(out.report).unwrap()
}

/// The report's versus_baseline without the figures that come from timing.
fn versus_without_timing(c: &Value) -> Value {
    let mut v = c["versus_baseline"].clone();
    let o = v.as_object_mut().unwrap();
    o.remove("speedup");
    o.remove("speedup_ci");
    v
}

fn candidate<'a>(report: &'a Value, stem: &str) -> &'a Value {
    report["candidates"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["model"]["name"] == stem)
        .unwrap()
}

#[test]
fn versus_baseline_and_slice_figures_match_the_reference_from_the_same_logits() {
    let exp = expected(CASE);
    let set = EvalSet::open(&case_dir(CASE).join("data.npz")).unwrap();
    let labels = set.labels();
    let (teacher, base) = (logits("teacher"), logits("production"));
    let t = exp["temperature"].as_f64().unwrap();
    let base_agreement = fidelity(&teacher, &base, t).agreement;
    let top1 = |z: &proctor::engine::logits::Logits| {
        proctor::engine::metrics::accuracy::accuracy(z, labels.unwrap()).top1
    };
    for (stem, want) in exp["students"].as_object().unwrap() {
        let cand = logits(stem);
        let v = versus_baseline(&Inputs {
            teacher: &teacher,
            baseline: &base,
            candidate: &cand,
            labels,
            agreement_candidate: fidelity(&teacher, &cand, t).agreement,
            agreement_baseline: base_agreement,
            top1_candidate: Some(top1(&cand)),
            top1_baseline: Some(top1(&base)),
        });
        let got = json!({
            "agreement": v.agreement, "agreement_delta": v.agreement_delta,
            "agreement_delta_ci": v.agreement_delta_ci, "teacher_flip_rate": v.teacher_flip_rate,
            "top1_delta": v.top1_delta, "top1_delta_ci": v.top1_delta_ci, "mcnemar_p": v.mcnemar_p,
            "negative_flip_rate": v.negative_flip_rate,
            "b_agree": v.gained_agreement, "c_agree": v.lost_agreement,
            "b_top1": v.gained_top1, "c_top1": v.lost_top1,
        });
        assert_matches(&got, &want["versus_baseline"], SAME_LOGITS, stem);
        let slices = slice_figures(&teacher, &cand, labels, set.slices().unwrap());
        assert_matches(
            &serde_json::to_value(slices).unwrap(),
            &want["slices"],
            SAME_LOGITS,
            &format!("{stem}/slices"),
        );
    }
    let slices = slice_figures(&teacher, &base, labels, set.slices().unwrap());
    assert_matches(
        &serde_json::to_value(slices).unwrap(),
        &exp["baseline_slices"],
        SAME_LOGITS,
        "production/slices",
    );
}

#[test]
fn a_whole_evaluation_with_a_baseline_reproduces_every_new_figure() {
    let exp = expected(CASE);
    let report = run(&job("data.npz"));
    assert_eq!(report["dataset"]["class_names"], exp["class_names"]);
    assert_eq!(
        report["settings"]["baseline"],
        report["baseline"]["model"]["id"]
    );
    let b = &report["baseline"];
    assert_eq!(b["model"]["name"], "production");
    for key in ["rank", "gates", "pareto_optimal", "versus_baseline"] {
        assert!(b.get(key).is_none(), "the baseline has no {key}");
    }
    let mut acc = b["accuracy"].clone();
    acc.as_object_mut().unwrap().remove("ece_bins");
    let mut want_acc = exp["baseline_figures"]["accuracy"].clone();
    for k in ["b", "c", "ece_bins"] {
        want_acc.as_object_mut().unwrap().remove(k);
    }
    assert_matches(
        &b["fidelity"],
        &exp["baseline_figures"]["fidelity"],
        ENGINES_F32,
        "baseline",
    );
    assert_matches(&acc, &want_acc, ENGINES_F32, "baseline");
    assert_matches(
        &b["slices"],
        &exp["baseline_slices"],
        ENGINES_F32,
        "baseline/slices",
    );
    for (stem, want) in exp["students"].as_object().unwrap() {
        let c = candidate(&report, stem);
        assert_matches(
            &versus_without_timing(c),
            &want["versus_baseline"],
            ENGINES_F32,
            stem,
        );
        assert_matches(
            &c["slices"],
            &want["slices"],
            ENGINES_F32,
            &format!("{stem}/slices"),
        );
        let speedup = c["versus_baseline"]["speedup"].as_f64().unwrap();
        assert!(speedup > 0.0 && speedup.is_finite(), "{stem}: {speedup}");
    }
    // metrics.md: a candidate identical to the baseline moves nothing.
    let twin = &candidate(&report, "twin")["versus_baseline"];
    assert_eq!(twin["agreement"], 1.0);
    assert_eq!(twin["agreement_delta"], 0.0);
    assert_eq!(twin["teacher_flip_rate"], 0.0);
    assert_eq!(twin["mcnemar_p"], 1.0);
}

#[test]
fn integer_slices_sort_numerically_and_unlabelled_slices_have_no_label_figures() {
    let exp = expected(CASE);
    for set in ["data_int_slices.npz", "unlabelled.npz"] {
        let report = run(&job(set));
        let want = &exp["sets"][set]["slices"];
        for (stem, slices) in want.as_object().unwrap() {
            let got = if stem == "production" {
                &report["baseline"]["slices"]
            } else {
                &candidate(&report, stem)["slices"]
            };
            assert_matches(got, slices, ENGINES_F32, &format!("{set}/{stem}"));
        }
        if set == "unlabelled.npz" {
            let wide = candidate(&report, "candidate_wide");
            assert!(wide["versus_baseline"]["top1_delta"].is_null());
            assert!(wide["slices"][0]["top1"].is_null());
            assert!(wide["accuracy"].is_null());
        }
    }
}

#[test]
fn class_names_of_the_wrong_length_are_refused_naming_the_dataset() {
    let err = prepare(&job("bad_class_names.npz")).err().unwrap();
    match err {
        EngineError::Settings(s) => {
            assert_eq!(s.field, "dataset");
            assert!(
                s.message.contains("7 names") && s.message.contains("6 classes"),
                "{}",
                s.message
            );
        }
        other => panic!("{other:?}"),
    }
}

#[test]
fn pickled_class_names_and_too_many_slices_are_refused_at_upload() {
    let bad = |f: &str| inspect_dataset(&case_dir("bad").join(f)).unwrap_err();
    let pickled = bad("pickled_class_names.npz");
    assert!(
        matches!(pickled, EngineError::InvalidDataset(_)),
        "{pickled:?}"
    );
    assert!(pickled.to_string().contains("object arrays"), "{pickled}");
    let many = bad("many_slices.npz");
    assert!(many.to_string().contains("at most 1000"), "{many}");
    let info = inspect_dataset(Path::new(&case_dir(CASE).join("data.npz"))).unwrap();
    assert_eq!(info.slice_count, Some(5));
    assert_eq!(
        info.class_names.as_deref().map(<[String]>::len),
        Some(expected(CASE)["classes"].as_u64().unwrap() as usize)
    );
}
