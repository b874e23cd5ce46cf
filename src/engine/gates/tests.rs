//! Every gate at exactly its threshold and just past it, with and without
//! `confidence` (metrics.md, "Gates").

use serde_json::{Value, json};

use super::*;
use crate::engine::metrics::accuracy::{Accuracy, StudentAccuracy};
use crate::engine::metrics::fidelity::{ClassAgreement, Fidelity};
use crate::engine::metrics::slices::SliceFigures;
use crate::engine::speed::paired_median;
use crate::engine::stats::{Z95, paired_wald, quantile_interval, wilson};
use crate::report::{FlipCounts, Key, Latency, ModelSummary, Size, StudentLatency, VersusBaseline};

/// Timed runs 0.02, 0.04, ... 2.00 ms in some order: t(k) = k / 50.
pub(crate) fn own_rounds() -> Vec<f64> {
    (1..=100)
        .map(|k| ((k * 37) % 100 + 1) as f64 / 50.0)
        .collect()
}

/// The teacher's runs, exactly three times as long in every round.
pub(crate) fn teacher_rounds() -> Vec<f64> {
    own_rounds().iter().map(|x| 3.0 * x).collect()
}

/// The baseline's runs, one and a half times as long in every round.
pub(crate) fn baseline_rounds() -> Vec<f64> {
    own_rounds().iter().map(|x| 1.5 * x).collect()
}

fn slice(name: &str, samples: u64, agreed: u64) -> SliceFigures {
    SliceFigures {
        slice: Key::Text(name.into()),
        samples,
        agreement: agreed as f64 / samples as f64,
        agreement_ci: [0.0, 1.0],
        top1: None,
        top1_ci: None,
        negative_flip_rate: None,
        agreed,
    }
}

fn class(class: usize, samples: u64, agreed: u64) -> ClassAgreement {
    ClassAgreement {
        class,
        samples,
        agreement: agreed as f64 / samples as f64,
        agreed,
    }
}

/// A candidate with round figures: 90 of 100 samples agree (57 of 60 on
/// class 0, 33 of 40 on class 1), top1 0.8, the teacher at 0.85 (gained 2,
/// lost 7), p50 1 ms and p90 1.8 ms (own_rounds), speedup 3.
pub(crate) fn candidate() -> Candidate {
    let own = Accuracy {
        top1: 0.8,
        top1_ci: [0.0, 1.0],
        topk: 1.0,
        ece: 0.05,
        ece_bins: 15,
        nll: 0.5,
        correct: 80,
    };
    Candidate {
        rank: 0,
        model: ModelSummary {
            id: uuid::Uuid::nil(),
            name: "s".into(),
            sha256: "0".into(),
            notes: Vec::new(),
        },
        output: "logits".into(),
        output_kind: crate::engine::logits::OutputKind::Logits,
        fidelity: Fidelity {
            agreement: 0.9,
            agreement_ci: [0.0, 1.0],
            topk_agreement: 1.0,
            kl: 0.25,
            kl_t1: 0.5,
            js: 0.1,
            soft_cross_entropy: 1.0,
            logit_mse: 1.0,
            class_agreement: vec![class(0, 60, 57), class(1, 40, 33)],
            disagreements: vec![],
            agreed: 90,
        },
        accuracy: Some(StudentAccuracy {
            own,
            kd_loss: 1.0,
            delta: 0.8 - 0.85,
            delta_ci: [-0.1, 0.0],
            retention: Some(0.8 / 0.85),
            mcnemar_p: 0.1,
            negative_flip_rate: 0.07,
            gained: 2,
            lost: 7,
        }),
        size: Size {
            bytes: 1000,
            parameters: 500,
            macs: None,
            size_ratio: 0.25,
            parameter_ratio: Some(0.25),
        },
        latency: StudentLatency {
            own: Latency {
                p50_ms: 1.0,
                p50_ci_ms: [0.8, 1.22],
                p90_ms: 1.8,
                p90_ci_ms: [1.68, 1.94],
                p99_ms: 1.98,
                mean_ms: 1.01,
                stdev_ms: None,
                throughput_sps: 1e3,
            },
            speedup: 3.0,
            speedup_ci: [3.0, 3.0],
        },
        slices: Some(vec![slice("harbour", 50, 42), slice("north", 50, 48)]),
        // Against the baseline: 5 samples gained agreement with the teacher,
        // 3 lost; 4 gained the label, 3 lost it.
        versus_baseline: Some(VersusBaseline {
            agreement: 0.93,
            agreement_delta: 0.02,
            agreement_delta_ci: [-0.1, 0.1],
            teacher_flip_rate: 0.03,
            top1_delta: Some(0.01),
            top1_delta_ci: Some([-0.1, 0.1]),
            mcnemar_p: Some(1.0),
            negative_flip_rate: Some(0.03),
            speedup: 1.5,
            speedup_ci: [1.5, 1.5],
            size_ratio: 0.8,
            counts: FlipCounts {
                gained_agreement: 5,
                lost_agreement: 3,
                gained_top1: 4,
                lost_top1: 3,
            },
        }),
        pareto_optimal: true,
        gates: GateOutcome::default(),
    }
}

fn judged_with(gates: Value) -> GateOutcome {
    let (own, teacher, base) = (own_rounds(), teacher_rounds(), baseline_rounds());
    let evidence = Evidence {
        samples: 100,
        rounds: &own,
        teacher_rounds: &teacher,
        baseline_rounds: Some(&base),
    };
    judge(
        &serde_json::from_value(gates).unwrap(),
        &candidate(),
        &evidence,
    )
}

/// One gate alone, with an optional confidence.
fn single(gate: GateName, threshold: f64, confidence: Option<f64>) -> GateCheck {
    let mut body = json!({ gate.as_str(): threshold });
    if let Some(c) = confidence {
        body["confidence"] = json!(c);
    }
    let out = judged_with(body);
    assert_eq!(out.checks.len(), 1);
    out.checks.into_iter().next().unwrap()
}

/// The value each gate judges: the estimate without `confidence`, its
/// cautious end at 0.95 with it (z = 1.959963984540054, metrics.md).
fn expected(gate: GateName, cautious: bool) -> f64 {
    let c = candidate();
    let a = c.accuracy.as_ref().unwrap();
    let est = match gate {
        GateName::MinAgreement => 0.9,
        GateName::MaxKl => 0.25,
        GateName::MinTop1 => 0.8,
        GateName::MaxTop1Drop => -a.delta,
        GateName::MinRetention => 0.8 / 0.85,
        GateName::MaxNegativeFlipRate => 0.07,
        GateName::MaxEce => 0.05,
        GateName::MaxP50Ms => 1.0,
        GateName::MaxP90Ms => 1.8,
        GateName::MinSpeedup => 3.0,
        GateName::MaxBytes => 1000.0,
        GateName::MaxSizeRatio => 0.25,
        GateName::MaxParameters => 500.0,
        GateName::MinClassAgreement => 33.0 / 40.0,
        GateName::MinSliceAgreement => 42.0 / 50.0,
        GateName::MinBaselineAgreementDelta => 0.02,
        GateName::MaxBaselineTeacherFlipRate => 0.03,
        GateName::MinBaselineTop1Delta => 0.01,
        GateName::MaxBaselineNegativeFlipRate => 0.03,
        GateName::MinBaselineSpeedup => 1.5,
    };
    if !cautious {
        return est;
    }
    match gate {
        GateName::MinAgreement => wilson(90, 100, Z95)[0],
        GateName::MinTop1 => wilson(80, 100, Z95)[0],
        GateName::MaxTop1Drop => -paired_wald(2, 7, 100, Z95)[0],
        GateName::MaxNegativeFlipRate => wilson(7, 100, Z95)[1],
        GateName::MaxP50Ms => quantile_interval(&own_rounds(), 0.5, 0.95)[1],
        GateName::MaxP90Ms => quantile_interval(&own_rounds(), 0.9, 0.95)[1],
        GateName::MinSpeedup => paired_median(&teacher_rounds(), &own_rounds(), 0.95).1[0],
        GateName::MinClassAgreement => wilson(57, 60, Z95)[0].min(wilson(33, 40, Z95)[0]),
        GateName::MinSliceAgreement => wilson(48, 50, Z95)[0].min(wilson(42, 50, Z95)[0]),
        GateName::MinBaselineAgreementDelta => paired_wald(5, 3, 100, Z95)[0],
        GateName::MaxBaselineTeacherFlipRate => wilson(3, 100, Z95)[1],
        GateName::MinBaselineTop1Delta => paired_wald(4, 3, 100, Z95)[0],
        GateName::MaxBaselineNegativeFlipRate => wilson(3, 100, Z95)[1],
        GateName::MinBaselineSpeedup => paired_median(&baseline_rounds(), &own_rounds(), 0.95).1[0],
        _ => est,
    }
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * b.abs().max(1.0)
}

/// A threshold just past `v`, in the direction that must fail.
fn just_past(gate: GateName, v: f64) -> f64 {
    let step = 1e-9 * v.abs().max(1.0);
    if gate.is_floor() { v + step } else { v - step }
}

#[test]
fn every_gate_passes_at_exactly_its_threshold_and_fails_just_past_it() {
    for cautious in [false, true] {
        let confidence = cautious.then_some(0.95);
        for &gate in GateName::ALL {
            let want = expected(gate, cautious);
            let at = single(gate, want, confidence);
            assert!(
                close(at.judged.unwrap(), want),
                "{gate} (confidence {confidence:?}): judged {:?}, expected {want}",
                at.judged
            );
            assert!(at.passed, "{gate} at its threshold: {at:?}");
            assert_eq!(at.estimate, Some(expected(gate, false)), "{gate}");
            let past = single(gate, just_past(gate, at.judged.unwrap()), confidence);
            assert!(!past.passed, "{gate} just past its threshold: {past:?}");
        }
    }
}

#[test]
fn confidence_makes_every_interval_gate_more_cautious() {
    for &gate in GateName::ALL {
        let (est, cautious) = (expected(gate, false), expected(gate, true));
        if est == cautious {
            continue;
        }
        let stricter = if gate.is_floor() {
            cautious < est
        } else {
            cautious > est
        };
        assert!(stricter, "{gate}: estimate {est}, judged {cautious}");
    }
}

#[test]
fn the_class_gate_names_the_class_it_judged() {
    // Without confidence the lowest agreement is class 1's (0.825); the
    // Wilson lower bound of 33/40 is lower than that of 57/60 as well.
    let plain = single(GateName::MinClassAgreement, 0.5, None);
    assert_eq!(plain.at, Some(Key::Int(1)));
    let at_95 = single(GateName::MinClassAgreement, 0.5, Some(0.95));
    assert_eq!(at_95.at, Some(Key::Int(1)));
    let worst = single(GateName::MinSliceAgreement, 0.5, Some(0.95));
    assert_eq!(worst.at, Some(Key::Text("harbour".into())));
    assert_eq!(single(GateName::MaxKl, 1.0, None).at, None);
}

#[test]
fn an_undefined_retention_fails_its_gate_saying_why() {
    let mut c = candidate();
    c.accuracy.as_mut().unwrap().retention = None;
    let gates: Gates = serde_json::from_value(json!({"min_retention": 0.5})).unwrap();
    let (own, teacher) = (own_rounds(), teacher_rounds());
    let evidence = Evidence {
        samples: 100,
        rounds: &own,
        teacher_rounds: &teacher,
        baseline_rounds: None,
    };
    let out = judge(&gates, &c, &evidence);
    assert!(!out.passed);
    assert!(
        out.checks[0]
            .reason
            .as_deref()
            .unwrap()
            .contains("teacher's top1 is 0")
    );
}
