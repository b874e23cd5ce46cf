//! Gates: a threshold on one figure of a candidate (metrics.md, "Gates").
//! With a `confidence`, gates judge the cautious end of an interval at that
//! confidence instead of the estimate; `figures` says which figure and
//! which end for each gate.

mod figures;
mod table;

pub use figures::Evidence;
pub use table::{GateName, Gates, Needs};

use serde::{Deserialize, Serialize};

use crate::report::{Candidate, Key};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GateCheck {
    pub gate: GateName,
    pub threshold: f64,
    /// The value compared with the threshold: the estimate, or the cautious
    /// end of its interval under `confidence`. Null when the figure is undefined.
    pub judged: Option<f64>,
    pub estimate: Option<f64>,
    pub passed: bool,
    /// The class (or slice) judged, for the gates on the lowest of several.
    pub at: Option<Key>,
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

impl GateOutcome {
    /// The checks that failed, in gate order.
    pub fn failed(&self) -> impl Iterator<Item = &GateCheck> {
        self.checks.iter().filter(|k| !k.passed)
    }
}

/// Judges every gate for one candidate.
pub fn judge(gates: &Gates, candidate: &Candidate, evidence: &Evidence<'_>) -> GateOutcome {
    let checks: Vec<GateCheck> = gates
        .thresholds()
        .into_iter()
        .map(|(gate, threshold)| {
            match figures::figure(gate, candidate, evidence, gates.confidence) {
                Ok(f) => GateCheck {
                    gate,
                    threshold,
                    judged: Some(f.judged),
                    estimate: Some(f.estimate),
                    passed: if gate.is_floor() {
                        f.judged >= threshold
                    } else {
                        f.judged <= threshold
                    },
                    at: f.at,
                    reason: None,
                },
                Err(reason) => GateCheck {
                    gate,
                    threshold,
                    judged: None,
                    estimate: None,
                    passed: false,
                    at: None,
                    reason: Some(reason),
                },
            }
        })
        .collect();
    GateOutcome {
        passed: checks.iter().all(|c| c.passed),
        checks,
    }
}

#[cfg(test)]
pub(crate) mod tests;
