//! Per-model and per-figure checks against the reference fixtures.

use proctor::engine::evaluate::model_scores;
use proctor::engine::logits::{OutputKind, OutputKindChoice, Scores, to_logits};
use proctor::engine::metrics::accuracy::{StudentInputs, accuracy, student_accuracy};
use proctor::engine::metrics::fidelity::fidelity;
use proctor::engine::model::Model;
use proctor::engine::npy;
use serde_json::{Value, json};

use crate::support::{CASES, ENGINES_F32, SAME_LOGITS, assert_matches, case_dir, expected};

fn models(exp: &Value) -> Vec<(String, Value)> {
    exp["models"]
        .as_object()
        .unwrap()
        .iter()
        .map(|(k, v)| (k.clone(), v.clone()))
        .collect()
}

/// onnxruntime's output for one model, as saved by the generator.
fn ort_scores(case: &str, stem: &str) -> Scores {
    let (shape, data) = npy::read_f64(&case_dir(case).join(format!("ort/{stem}.npy"))).unwrap();
    assert_eq!(
        shape.len(),
        2,
        "{case}/{stem}: reference output is not [N, C]"
    );
    Scores::from_rows(shape[1], data)
}

/// Asserts tract's output is onnxruntime's within float32 engine noise, row
/// by row and element by element; returns the largest difference and where.
fn assert_same_as_onnxruntime(what: &str, got: &Scores, want: &Scores) -> (f64, usize) {
    assert_eq!((got.n, got.c), (want.n, want.c), "{what}: shape");
    let (mut worst, mut at) = (0.0f64, 0);
    for (i, (g, w)) in got.data.iter().zip(&want.data).enumerate() {
        assert!(
            ENGINES_F32.accepts(*g, *w),
            "{what}: row {} element {}: tract {g}, onnxruntime {w}",
            i / got.c,
            i % got.c
        );
        if (g - w).abs() > worst {
            (worst, at) = ((g - w).abs(), i);
        }
    }
    (worst, at)
}

#[test]
fn tract_reproduces_onnxruntime_outputs_for_every_reference_model() {
    for case in CASES {
        let exp = expected(case);
        for (stem, info) in models(&exp) {
            let dir = case_dir(case);
            let path = dir.join(info["file"].as_str().unwrap());
            let got = model_scores(&path, &dir.join("data.npz"), 32, None)
                .unwrap_or_else(|e| panic!("{case}/{stem}: {e}"));
            let (worst, at) = assert_same_as_onnxruntime(
                &format!("{case}/{stem}"),
                &got,
                &ort_scores(case, &stem),
            );
            eprintln!("{case}/{stem}: max |tract - onnxruntime| = {worst:e} at element {at}");
        }
    }
}

/// Grouped, strided and dilated, 5×5 and depthwise convolutions over 45
/// images: one bulk batch of 32 and a short one of 13. All but the depthwise
/// one (tract's own op) gather their patches lazily at every position of a
/// batch, the vendored tract-core change (vendor/README.md).
#[test]
fn batched_convolutions_of_every_layout_match_onnxruntime_element_by_element() {
    let case = "conv_layouts";
    let dir = case_dir(case);
    for (stem, info) in models(&expected(case)) {
        let got = model_scores(
            &dir.join(info["file"].as_str().unwrap()),
            &dir.join(info["data"].as_str().unwrap()),
            32,
            None,
        )
        .unwrap_or_else(|e| panic!("{case}/{stem}: {e}"));
        assert_same_as_onnxruntime(&format!("{case}/{stem}"), &got, &ort_scores(case, &stem));
    }
}

#[test]
fn introspection_matches_what_the_onnx_package_reads() {
    for case in CASES {
        let exp = expected(case);
        for (stem, info) in models(&exp) {
            let m = Model::load(&case_dir(case).join(info["file"].as_str().unwrap())).unwrap();
            let what = format!("{case}/{stem}");
            assert_eq!(
                m.info.parameters,
                info["parameters"].as_u64().unwrap(),
                "{what}: parameters"
            );
            assert_eq!(m.info.opset, info["opset"].as_i64(), "{what}: opset");
            assert!(
                m.info
                    .producer
                    .starts_with(info["producer"].as_str().unwrap()),
                "{what}: producer {}",
                m.info.producer
            );
            assert_eq!(
                serde_json::to_value(&m.info.inputs).unwrap(),
                info["inputs"],
                "{what}: inputs"
            );
            assert_eq!(
                serde_json::to_value(&m.info.outputs).unwrap(),
                info["outputs"],
                "{what}: outputs"
            );
            if let Some(macs) = info["macs_analytic"].as_u64() {
                // Common practice: a Gemm of [1, i] by [i, o] is i * o multiply-accumulates.
                assert_eq!(m.info.macs, Some(macs), "{what}: macs");
            }
        }
    }
}

/// The report's view of one student's figures, computed from onnxruntime's
/// own logits so that both sides start from the same numbers.
fn figures_from_reference_logits(case: &str, exp: &Value, stem: &str) -> Value {
    let t = exp["temperature"].as_f64().unwrap();
    let alpha = exp["alpha"].as_f64().unwrap();
    let teacher_stem = exp["teacher"].as_str().unwrap();
    let (teacher, tk) = to_logits(ort_scores(case, teacher_stem), OutputKindChoice::Auto);
    let (student, sk) = to_logits(ort_scores(case, stem), OutputKindChoice::Auto);
    let kind = |k: OutputKind| serde_json::to_value(k).unwrap();
    assert_eq!(
        kind(tk),
        exp["models"][teacher_stem]["output_kind"],
        "{case}: teacher kind"
    );
    assert_eq!(
        kind(sk),
        exp["models"][stem]["output_kind"],
        "{case}/{stem}: kind"
    );
    let fid = fidelity(&teacher, &student, t);
    let labels: Option<Vec<i64>> = exp["has_labels"].as_bool().unwrap().then(|| {
        let set =
            proctor::engine::dataset::EvalSet::open(&case_dir(case).join("data.npz")).unwrap();
        set.labels().unwrap().to_vec()
    });
    let acc = labels.as_ref().map(|y| {
        let ta = accuracy(&teacher, y);
        student_accuracy(&StudentInputs {
            teacher: &teacher,
            teacher_accuracy: &ta,
            student: &student,
            labels: y,
            temperature: t,
            alpha,
            soft_cross_entropy: fid.soft_cross_entropy,
        })
    });
    json!({"fidelity": fid, "accuracy": acc})
}

#[test]
fn every_figure_matches_numpy_scipy_and_statsmodels_from_the_same_logits() {
    // Reference: tests/reference/generate.py (scipy.special, scipy.stats.binomtest,
    // statsmodels proportion_confint(method="wilson"), numpy ECE), 1e-9 relative.
    for case in CASES {
        let exp = expected(case);
        for (stem, want) in exp["students"].as_object().unwrap() {
            let got = figures_from_reference_logits(case, &exp, stem);
            assert_matches(
                &got["fidelity"],
                &want["fidelity"],
                SAME_LOGITS,
                &format!("{case}/{stem}"),
            );
            assert_matches(
                &got["accuracy"],
                &want["accuracy"],
                SAME_LOGITS,
                &format!("{case}/{stem}"),
            );
        }
        if let Some(want) = exp["teacher_accuracy"].as_object() {
            let teacher_stem = exp["teacher"].as_str().unwrap();
            let (t, _) = to_logits(ort_scores(case, teacher_stem), OutputKindChoice::Auto);
            let set =
                proctor::engine::dataset::EvalSet::open(&case_dir(case).join("data.npz")).unwrap();
            let got = serde_json::to_value(accuracy(&t, set.labels().unwrap())).unwrap();
            assert_matches(
                &got,
                &Value::Object(want.clone()),
                SAME_LOGITS,
                &format!("{case}/teacher"),
            );
        }
    }
}

#[test]
fn a_student_identical_to_its_teacher_agrees_fully_with_zero_divergence() {
    // Common practice, no source: agreement 1, kl 0, mcnemar_p 1.
    let exp = expected("mlp");
    let got = figures_from_reference_logits("mlp", &exp, "student_twin");
    assert_eq!(got["fidelity"]["agreement"], 1.0);
    assert_eq!(got["fidelity"]["kl"], 0.0);
    assert_eq!(got["accuracy"]["mcnemar_p"], 1.0);
}
