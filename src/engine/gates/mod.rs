//! Gates: a threshold on one figure of a candidate (metrics.md, "Gates").
//! With a `confidence`, gates on proportions judge the cautious end of their
//! interval instead of the estimate.

mod table;

pub use table::{GateName, Gates, Needs};

use serde::{Deserialize, Serialize};

use super::stats::{paired_wald, wilson, z_for_confidence};
use crate::report::Candidate;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GateCheck {
    pub gate: GateName,
    pub threshold: f64,
    /// The value compared with the threshold: the estimate, or the cautious
    /// end of its interval under `confidence`. Null when the figure is undefined.
    pub judged: Option<f64>,
    pub estimate: Option<f64>,
    pub passed: bool,
    /// Why a check failed without a figure to judge, e.g. a retention that is
    /// undefined because the teacher's top1 is 0.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub reason: Option<String>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
pub struct GateOutcome {
    pub passed: bool,
    pub checks: Vec<GateCheck>,
}

/// The estimate and the judged value of one gate for one candidate.
fn figures(
    gate: GateName,
    c: &Candidate,
    samples: u64,
    z: Option<f64>,
) -> (Option<f64>, Option<f64>) {
    let acc = c.accuracy.as_ref();
    match gate {
        GateName::MinAgreement => {
            let est = c.fidelity.agreement;
            (
                Some(est),
                Some(z.map_or(est, |z| wilson(c.fidelity.agreed, samples, z)[0])),
            )
        }
        GateName::MaxKl => (Some(c.fidelity.kl), Some(c.fidelity.kl)),
        GateName::MinTop1 => acc.map_or((None, None), |a| {
            let est = a.own.top1;
            (
                Some(est),
                Some(z.map_or(est, |z| wilson(a.own.correct, samples, z)[0])),
            )
        }),
        GateName::MaxTop1Drop => acc.map_or((None, None), |a| {
            let est = -a.delta;
            let judged = z.map_or(est, |z| -paired_wald(a.gained, a.lost, samples, z)[0]);
            (Some(est), Some(judged))
        }),
        GateName::MinRetention => acc.map_or((None, None), |a| (a.retention, a.retention)),
        GateName::MaxNegativeFlipRate => acc.map_or((None, None), |a| {
            let est = a.negative_flip_rate;
            (
                Some(est),
                Some(z.map_or(est, |z| wilson(a.lost, samples, z)[1])),
            )
        }),
        GateName::MaxEce => acc.map_or((None, None), |a| (Some(a.own.ece), Some(a.own.ece))),
        GateName::MaxP90Ms => (Some(c.latency.own.p90_ms), Some(c.latency.own.p90_ms)),
        GateName::MinSpeedup => (Some(c.latency.speedup), Some(c.latency.speedup)),
        GateName::MaxBytes => (Some(c.size.bytes as f64), Some(c.size.bytes as f64)),
        GateName::MaxSizeRatio => (Some(c.size.size_ratio), Some(c.size.size_ratio)),
        GateName::MaxParameters => (
            Some(c.size.parameters as f64),
            Some(c.size.parameters as f64),
        ),
    }
}

/// Judges every gate for one candidate over a set of `samples`.
pub fn judge(gates: &Gates, candidate: &Candidate, samples: u64) -> GateOutcome {
    let z = gates.confidence.map(z_for_confidence);
    let checks: Vec<GateCheck> = gates
        .thresholds()
        .into_iter()
        .map(|(gate, threshold)| {
            let (estimate, judged) = figures(gate, candidate, samples, z);
            let passed = judged.is_some_and(|v| {
                if gate.is_floor() {
                    v >= threshold
                } else {
                    v <= threshold
                }
            });
            let reason = match (gate, judged) {
                (GateName::MinRetention, None) => {
                    Some("retention is undefined because the teacher's top1 is 0".to_string())
                }
                (_, None) => Some(format!("{} needs labels", gate.as_str())),
                _ => None,
            };
            GateCheck {
                gate,
                threshold,
                judged,
                estimate,
                passed,
                reason,
            }
        })
        .collect();
    GateOutcome {
        passed: checks.iter().all(|c| c.passed),
        checks,
    }
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::engine::metrics::accuracy::{Accuracy, StudentAccuracy};
    use crate::engine::metrics::fidelity::Fidelity;
    use crate::engine::stats::Z95;
    use crate::report::{Latency, ModelSummary, Size, StudentLatency};
    use serde_json::json;

    /// A candidate with round figures: 90 of 100 samples agree, top1 0.8,
    /// the teacher at 0.85 (gained 2, lost 7), p90 2 ms, speedup 3.
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
                class_agreement: vec![],
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
                    p90_ms: 2.0,
                    p99_ms: 3.0,
                    mean_ms: 1.2,
                    stdev_ms: None,
                    throughput_sps: 1e3,
                },
                speedup: 3.0,
            },
            pareto_optimal: true,
            gates: GateOutcome::default(),
        }
    }

    fn judged(gates: serde_json::Value) -> GateOutcome {
        judge(&serde_json::from_value(gates).unwrap(), &candidate(), 100)
    }

    #[test]
    fn every_gate_passes_at_exactly_its_threshold() {
        // metrics.md: min_* passes when the figure >= value, max_* when <= value.
        let c = candidate();
        let out = judged(json!({
            "min_agreement": 0.9, "max_kl": 0.25, "min_top1": 0.8, "max_top1_drop": -c.accuracy.as_ref().unwrap().delta,
            "min_retention": 0.8 / 0.85, "max_negative_flip_rate": 0.07, "max_ece": 0.05, "max_p90_ms": 2.0,
            "min_speedup": 3.0, "max_bytes": 1000, "max_size_ratio": 0.25, "max_parameters": 500,
        }));
        assert_eq!(out.checks.len(), 12);
        for check in &out.checks {
            assert!(check.passed, "{check:?}");
        }
        assert!(out.passed);
    }

    #[test]
    fn every_gate_fails_just_past_its_threshold() {
        let out = judged(json!({
            "min_agreement": 0.9000001, "max_kl": 0.2499999, "min_top1": 0.8000001, "max_top1_drop": 0.0499999,
            "min_retention": 0.95, "max_negative_flip_rate": 0.0699999, "max_ece": 0.0499999, "max_p90_ms": 1.9999999,
            "min_speedup": 3.0000001, "max_bytes": 999, "max_size_ratio": 0.2499999, "max_parameters": 499,
        }));
        for check in &out.checks {
            assert!(!check.passed, "{check:?}");
        }
        assert!(!out.passed);
    }

    #[test]
    fn confidence_judges_the_cautious_end_of_each_interval() {
        let out = judged(json!({
            "min_agreement": 0.0, "min_top1": 0.0, "max_top1_drop": 1.0, "max_negative_flip_rate": 1.0,
            "confidence": 0.95,
        }));
        let judged = |g: &str| {
            out.checks
                .iter()
                .find(|c| c.gate.as_str() == g)
                .unwrap()
                .judged
                .unwrap()
        };
        // z of 0.95 is Phi^-1(0.975) = 1.959963984540054 (metrics.md), to within an ulp.
        let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * b.abs();
        assert!(close(judged("min_agreement"), wilson(90, 100, Z95)[0]));
        assert!(close(judged("min_top1"), wilson(80, 100, Z95)[0]));
        assert!(close(
            judged("max_negative_flip_rate"),
            wilson(7, 100, Z95)[1]
        ));
        assert!(close(
            judged("max_top1_drop"),
            -paired_wald(2, 7, 100, Z95)[0]
        ));
        let agreement = out
            .checks
            .iter()
            .find(|c| c.gate == GateName::MinAgreement)
            .unwrap();
        assert_eq!(agreement.estimate, Some(0.9));
        assert!(
            agreement.judged.unwrap() < 0.9,
            "the lower bound lies below the estimate"
        );
    }

    #[test]
    fn an_undefined_retention_fails_its_gate_saying_why() {
        let mut c = candidate();
        c.accuracy.as_mut().unwrap().retention = None;
        let gates: Gates = serde_json::from_value(json!({"min_retention": 0.5})).unwrap();
        let out = judge(&gates, &c, 100);
        assert!(!out.passed);
        assert!(
            out.checks[0]
                .reason
                .as_deref()
                .unwrap()
                .contains("teacher's top1 is 0")
        );
    }
}
