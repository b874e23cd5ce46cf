//! A candidate against the student in production, the baseline (metrics.md,
//! "Baseline"): does it decide like it, is it at least as faithful to the
//! teacher and as accurate, and what does it break that the baseline got
//! right (negative flips, Yan et al. 2021).

use super::argmax;
use crate::engine::logits::Logits;
use crate::engine::stats::{Z95, mcnemar_exact, paired_wald};

/// The figures computed from logits; speed and size are added from the
/// timed rounds and the files.
#[derive(Debug, Clone, PartialEq)]
pub struct VersusLogits {
    pub agreement: f64,
    pub agreement_delta: f64,
    pub agreement_delta_ci: [f64; 2],
    pub teacher_flip_rate: f64,
    pub top1_delta: Option<f64>,
    pub top1_delta_ci: Option<[f64; 2]>,
    pub mcnemar_p: Option<f64>,
    pub negative_flip_rate: Option<f64>,
    /// Samples where the baseline disagrees with the teacher and the
    /// candidate agrees (b), and the reverse (c).
    pub gained_agreement: u64,
    pub lost_agreement: u64,
    /// Samples the baseline gets wrong and the candidate right (b), and
    /// the reverse (c).
    pub gained_top1: u64,
    pub lost_top1: u64,
}

/// `agreement_*` are each model's agreement with the teacher, and `top1_*`
/// their accuracy, as the report already holds them.
pub struct Inputs<'a> {
    pub teacher: &'a Logits,
    pub baseline: &'a Logits,
    pub candidate: &'a Logits,
    pub labels: Option<&'a [i64]>,
    pub agreement_candidate: f64,
    pub agreement_baseline: f64,
    pub top1_candidate: Option<f64>,
    pub top1_baseline: Option<f64>,
}

pub fn versus_baseline(inp: &Inputs<'_>) -> VersusLogits {
    let t: Vec<usize> = inp.teacher.rows().map(argmax).collect();
    let b: Vec<usize> = inp.baseline.rows().map(argmax).collect();
    let c: Vec<usize> = inp.candidate.rows().map(argmax).collect();
    let n = t.len() as u64;
    let nf = n as f64;
    let alike = (0..t.len()).filter(|&i| b[i] == c[i]).count();
    let (mut gained, mut lost) = (0u64, 0u64);
    for i in 0..t.len() {
        match (b[i] == t[i], c[i] == t[i]) {
            (false, true) => gained += 1,
            (true, false) => lost += 1,
            _ => {}
        }
    }
    let (mut gained_top1, mut lost_top1) = (0u64, 0u64);
    if let Some(y) = inp.labels {
        for i in 0..t.len() {
            match (b[i] as i64 == y[i], c[i] as i64 == y[i]) {
                (false, true) => gained_top1 += 1,
                (true, false) => lost_top1 += 1,
                _ => {}
            }
        }
    }
    let labelled = inp.labels.is_some();
    VersusLogits {
        agreement: alike as f64 / nf,
        agreement_delta: inp.agreement_candidate - inp.agreement_baseline,
        agreement_delta_ci: paired_wald(gained, lost, n, Z95),
        teacher_flip_rate: lost as f64 / nf,
        top1_delta: inp
            .top1_candidate
            .zip(inp.top1_baseline)
            .map(|(s, b)| s - b),
        top1_delta_ci: labelled.then(|| paired_wald(gained_top1, lost_top1, n, Z95)),
        mcnemar_p: labelled.then(|| mcnemar_exact(gained_top1, lost_top1)),
        negative_flip_rate: labelled.then(|| lost_top1 as f64 / nf),
        gained_agreement: gained,
        lost_agreement: lost,
        gained_top1,
        lost_top1,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_candidate_identical_to_the_baseline_moves_nothing() {
        // metrics.md: a baseline identical to a candidate gives delta 0,
        // flips 0 and McNemar p 1.
        let t = Logits::from_rows(2, vec![1.0, 0.0, 0.0, 1.0, 1.0, 0.0]);
        let b = Logits::from_rows(2, vec![1.0, 0.0, 1.0, 0.0, 0.0, 1.0]);
        let v = versus_baseline(&Inputs {
            teacher: &t,
            baseline: &b,
            candidate: &b,
            labels: Some(&[0, 1, 1]),
            agreement_candidate: 1.0 / 3.0,
            agreement_baseline: 1.0 / 3.0,
            top1_candidate: Some(1.0 / 3.0),
            top1_baseline: Some(1.0 / 3.0),
        });
        assert_eq!(v.agreement, 1.0);
        assert_eq!((v.agreement_delta, v.agreement_delta_ci), (0.0, [0.0, 0.0]));
        assert_eq!(v.teacher_flip_rate, 0.0);
        assert_eq!(v.top1_delta, Some(0.0));
        assert_eq!(v.mcnemar_p, Some(1.0));
        assert_eq!(v.negative_flip_rate, Some(0.0));
    }
}
