//! The figure each gate judges, and under `confidence` which end of which
//! interval (metrics.md, "Gates"): Wilson for proportions, the paired Wald
//! interval for differences, order statistics for latency.

use super::GateName;
use crate::engine::speed::paired_median;
use crate::engine::stats::{paired_wald, quantile_interval, wilson, z_for_confidence};
use crate::report::{Candidate, Key};

/// What a gate may need beside the candidate's own figures.
pub struct Evidence<'a> {
    pub samples: u64,
    /// The candidate's timed runs, in round order.
    pub rounds: &'a [f64],
    /// The teacher's timed runs, in the same rounds.
    pub teacher_rounds: &'a [f64],
}

/// The estimate and the value judged; `at` names the class or slice judged.
pub(super) struct Figure {
    pub(super) estimate: f64,
    pub(super) judged: f64,
    pub(super) at: Option<Key>,
}

fn plain(v: f64) -> Figure {
    Figure {
        estimate: v,
        judged: v,
        at: None,
    }
}

fn cautious(estimate: f64, judged: Option<f64>) -> Figure {
    Figure {
        estimate,
        judged: judged.unwrap_or(estimate),
        at: None,
    }
}

/// One gate's figure for one candidate; `Err` says why it has none.
pub(super) fn figure(
    gate: GateName,
    c: &Candidate,
    ev: &Evidence<'_>,
    confidence: Option<f64>,
) -> Result<Figure, String> {
    let z = confidence.map(z_for_confidence);
    let n = ev.samples;
    let labels = || {
        c.accuracy
            .as_ref()
            .ok_or_else(|| format!("{gate} needs labels"))
    };
    Ok(match gate {
        GateName::MinAgreement => cautious(
            c.fidelity.agreement,
            z.map(|z| wilson(c.fidelity.agreed, n, z)[0]),
        ),
        GateName::MaxKl => plain(c.fidelity.kl),
        GateName::MinTop1 => {
            let a = labels()?;
            cautious(a.own.top1, z.map(|z| wilson(a.own.correct, n, z)[0]))
        }
        GateName::MaxTop1Drop => {
            let a = labels()?;
            cautious(-a.delta, z.map(|z| -paired_wald(a.gained, a.lost, n, z)[0]))
        }
        GateName::MinRetention => plain(
            labels()?
                .retention
                .ok_or("retention is undefined because the teacher's top1 is 0")?,
        ),
        GateName::MaxNegativeFlipRate => {
            let a = labels()?;
            cautious(a.negative_flip_rate, z.map(|z| wilson(a.lost, n, z)[1]))
        }
        GateName::MaxEce => plain(labels()?.own.ece),
        GateName::MaxP50Ms => cautious(
            c.latency.own.p50_ms,
            confidence.map(|conf| quantile_interval(ev.rounds, 0.5, conf)[1]),
        ),
        GateName::MaxP90Ms => cautious(
            c.latency.own.p90_ms,
            confidence.map(|conf| quantile_interval(ev.rounds, 0.9, conf)[1]),
        ),
        GateName::MinSpeedup => cautious(
            c.latency.speedup,
            confidence.map(|conf| paired_median(ev.teacher_rounds, ev.rounds, conf).1[0]),
        ),
        GateName::MaxBytes => plain(c.size.bytes as f64),
        GateName::MaxSizeRatio => plain(c.size.size_ratio),
        GateName::MaxParameters => plain(c.size.parameters as f64),
        GateName::MinClassAgreement => {
            // The class with the lowest agreement, or under `confidence` the
            // lowest Wilson lower bound; the estimate is that class's.
            let judged_of = |k: &crate::engine::metrics::fidelity::ClassAgreement| {
                z.map_or(k.agreement, |z| wilson(k.agreed, k.samples, z)[0])
            };
            let lowest = c
                .fidelity
                .class_agreement
                .iter()
                .min_by(|a, b| judged_of(a).total_cmp(&judged_of(b)))
                .ok_or("the teacher predicts no class")?;
            Figure {
                estimate: lowest.agreement,
                judged: judged_of(lowest),
                at: Some(Key::Int(lowest.class as i64)),
            }
        }
    })
}
