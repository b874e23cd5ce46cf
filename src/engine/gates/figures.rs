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
    /// The baseline's timed runs, in the same rounds, when there is one.
    pub baseline_rounds: Option<&'a [f64]>,
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
    let versus = || {
        c.versus_baseline
            .as_ref()
            .ok_or_else(|| format!("{gate} needs a baseline"))
    };
    let labelled_versus = || {
        let v = versus()?;
        v.top1_delta
            .is_some()
            .then_some(v)
            .ok_or_else(|| format!("{gate} needs labels"))
    };
    // The lowest of several proportions (classes, slices), or under
    // `confidence` the lowest Wilson lower bound; the estimate is that one's.
    let lowest = |items: &mut dyn Iterator<Item = (Key, f64, u64, u64)>| {
        items
            .map(|(at, estimate, agreed, samples)| Figure {
                judged: z.map_or(estimate, |z| wilson(agreed, samples, z)[0]),
                estimate,
                at: Some(at),
            })
            .min_by(|a, b| a.judged.total_cmp(&b.judged))
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
        GateName::MinClassAgreement => lowest(
            &mut c
                .fidelity
                .class_agreement
                .iter()
                .map(|k| (Key::Int(k.class as i64), k.agreement, k.agreed, k.samples)),
        )
        .ok_or("the teacher predicts no class")?,
        GateName::MinSliceAgreement => lowest(
            &mut c
                .slices
                .as_ref()
                .ok_or_else(|| format!("{gate} needs a slices array"))?
                .iter()
                .map(|s| (s.slice.clone(), s.agreement, s.agreed, s.samples)),
        )
        .ok_or("the set has no slices")?,
        GateName::MinBaselineAgreementDelta => {
            let v = versus()?;
            let k = v.counts;
            cautious(
                v.agreement_delta,
                z.map(|z| paired_wald(k.gained_agreement, k.lost_agreement, n, z)[0]),
            )
        }
        GateName::MaxBaselineTeacherFlipRate => {
            let v = versus()?;
            cautious(
                v.teacher_flip_rate,
                z.map(|z| wilson(v.counts.lost_agreement, n, z)[1]),
            )
        }
        GateName::MinBaselineTop1Delta => {
            let v = labelled_versus()?;
            let k = v.counts;
            cautious(
                v.top1_delta.expect("labelled"),
                z.map(|z| paired_wald(k.gained_top1, k.lost_top1, n, z)[0]),
            )
        }
        GateName::MaxBaselineNegativeFlipRate => {
            let v = labelled_versus()?;
            cautious(
                v.negative_flip_rate.expect("labelled"),
                z.map(|z| wilson(v.counts.lost_top1, n, z)[1]),
            )
        }
        GateName::MinBaselineSpeedup => {
            let v = versus()?;
            let base = ev
                .baseline_rounds
                .ok_or_else(|| format!("{gate} needs a baseline"))?;
            cautious(
                v.speedup,
                confidence.map(|conf| paired_median(base, ev.rounds, conf).1[0]),
            )
        }
    })
}
