//! Gates: a threshold on one figure of a candidate (metrics.md, "Gates").
//! With a `confidence`, gates on proportions judge the cautious end of their
//! interval instead of the estimate.

use serde::{Deserialize, Serialize};

use super::settings::Gates;
use super::stats::{paired_wald, wilson, z_for_confidence};
use crate::report::Candidate;

/// Every known gate, in the order of metrics.md's table.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum GateName {
    MinAgreement,
    MaxKl,
    MinTop1,
    MaxTop1Drop,
    MinRetention,
    MaxNegativeFlipRate,
    MaxEce,
    MaxP90Ms,
    MinSpeedup,
    MaxBytes,
    MaxSizeRatio,
    MaxParameters,
}

const ALL: [GateName; 12] = [
    GateName::MinAgreement,
    GateName::MaxKl,
    GateName::MinTop1,
    GateName::MaxTop1Drop,
    GateName::MinRetention,
    GateName::MaxNegativeFlipRate,
    GateName::MaxEce,
    GateName::MaxP90Ms,
    GateName::MinSpeedup,
    GateName::MaxBytes,
    GateName::MaxSizeRatio,
    GateName::MaxParameters,
];

impl GateName {
    pub fn as_str(self) -> &'static str {
        match self {
            GateName::MinAgreement => "min_agreement",
            GateName::MaxKl => "max_kl",
            GateName::MinTop1 => "min_top1",
            GateName::MaxTop1Drop => "max_top1_drop",
            GateName::MinRetention => "min_retention",
            GateName::MaxNegativeFlipRate => "max_negative_flip_rate",
            GateName::MaxEce => "max_ece",
            GateName::MaxP90Ms => "max_p90_ms",
            GateName::MinSpeedup => "min_speedup",
            GateName::MaxBytes => "max_bytes",
            GateName::MaxSizeRatio => "max_size_ratio",
            GateName::MaxParameters => "max_parameters",
        }
    }

    pub fn parse(name: &str) -> Option<GateName> {
        ALL.into_iter().find(|g| g.as_str() == name)
    }

    pub fn all_names() -> String {
        ALL.map(GateName::as_str).join(", ")
    }

    pub fn needs_labels(self) -> bool {
        matches!(
            self,
            GateName::MinTop1
                | GateName::MaxTop1Drop
                | GateName::MinRetention
                | GateName::MaxNegativeFlipRate
                | GateName::MaxEce
        )
    }

    /// True for `min_*` gates (judged >= threshold), false for `max_*`.
    fn is_floor(self) -> bool {
        self.as_str().starts_with("min_")
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Check {
    pub gate: String,
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
    pub checks: Vec<Check>,
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
    let checks: Vec<Check> = gates
        .thresholds
        .iter()
        .map(|&(gate, threshold)| {
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
            Check {
                gate: gate.as_str().to_string(),
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
