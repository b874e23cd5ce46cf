//! Accuracy against labels (metrics.md, "Accuracy against labels"), for the
//! teacher and for each student, and the paired comparisons between them.

use serde::{Deserialize, Serialize};

use super::{argmax, in_top_k, log_softmax, top_k};
use crate::engine::logits::Logits;
use crate::engine::stats::{Z95, mcnemar_exact, paired_wald, wilson};

/// Bins of the expected calibration error (Guo et al. 2017's reference code).
pub const ECE_BINS: usize = 15;

/// A model's own accuracy figures; the teacher reports these alone.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Accuracy {
    pub top1: f64,
    pub top1_ci: [f64; 2],
    pub topk: f64,
    pub ece: f64,
    pub ece_bins: usize,
    pub nll: f64,
    /// Samples whose top class is the label.
    #[serde(skip)]
    pub correct: u64,
}

/// A student's accuracy, with the comparisons against its teacher.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StudentAccuracy {
    #[serde(flatten)]
    pub own: Accuracy,
    pub kd_loss: f64,
    pub delta: f64,
    pub delta_ci: [f64; 2],
    pub retention: Option<f64>,
    pub mcnemar_p: f64,
    pub negative_flip_rate: f64,
    /// Samples the teacher gets wrong and the student right.
    #[serde(skip)]
    pub gained: u64,
    /// Samples the teacher gets right and the student wrong.
    #[serde(skip)]
    pub lost: u64,
}

pub fn accuracy(z: &Logits, labels: &[i64]) -> Accuracy {
    assert_eq!(z.n, labels.len(), "labels and logits differ in length");
    let (n, k) = (z.n, top_k(z.c));
    let mut correct = 0u64;
    let mut in_k = 0u64;
    let mut nll = 0.0;
    let mut bins = [(0u64, 0u64, 0.0f64); ECE_BINS];
    let mut ls = Vec::new();
    for (row, &y) in z.rows().zip(labels) {
        let y = y as usize;
        let pred = argmax(row);
        let hit = pred == y;
        correct += hit as u64;
        in_k += in_top_k(row, y, k) as u64;
        log_softmax(row, 1.0, &mut ls);
        nll -= ls[y];
        let confidence = ls[pred].exp();
        let bin = ((ECE_BINS as f64 * confidence).ceil() as usize).clamp(1, ECE_BINS) - 1;
        bins[bin].0 += 1;
        bins[bin].1 += hit as u64;
        bins[bin].2 += confidence;
    }
    let nf = n as f64;
    let ece = bins
        .iter()
        .filter(|b| b.0 > 0)
        .map(|&(count, hits, conf)| {
            let m = count as f64;
            (m / nf) * (hits as f64 / m - conf / m).abs()
        })
        .sum();
    Accuracy {
        top1: correct as f64 / nf,
        top1_ci: wilson(correct, n as u64, Z95),
        topk: in_k as f64 / nf,
        ece,
        ece_bins: ECE_BINS,
        nll: nll / nf,
        correct,
    }
}

/// Mean soft cross-entropy -sum_c q log p at temperature T, q from the teacher.
pub fn soft_cross_entropy(teacher: &Logits, student: &Logits, temperature: f64) -> f64 {
    let (mut lq, mut lp) = (Vec::new(), Vec::new());
    let total: f64 = teacher
        .rows()
        .zip(student.rows())
        .map(|(zt, zs)| {
            log_softmax(zt, temperature, &mut lq);
            log_softmax(zs, temperature, &mut lp);
            -lq.iter().zip(&lp).map(|(&q, &p)| q.exp() * p).sum::<f64>()
        })
        .sum();
    total / teacher.n as f64
}

pub struct StudentInputs<'a> {
    pub teacher: &'a Logits,
    pub teacher_accuracy: &'a Accuracy,
    pub student: &'a Logits,
    pub labels: &'a [i64],
    pub temperature: f64,
    pub alpha: f64,
    /// `soft_cross_entropy` from the fidelity pass, so it is not computed twice.
    pub soft_cross_entropy: f64,
}

pub fn student_accuracy(inp: &StudentInputs<'_>) -> StudentAccuracy {
    let own = accuracy(inp.student, inp.labels);
    let (mut gained, mut lost) = (0u64, 0u64);
    for ((zt, zs), &y) in inp.teacher.rows().zip(inp.student.rows()).zip(inp.labels) {
        let y = y as usize;
        match (argmax(zt) == y, argmax(zs) == y) {
            (false, true) => gained += 1,
            (true, false) => lost += 1,
            _ => {}
        }
    }
    let n = inp.labels.len() as u64;
    let t2 = inp.temperature * inp.temperature;
    StudentAccuracy {
        kd_loss: inp.alpha * t2 * inp.soft_cross_entropy + (1.0 - inp.alpha) * own.nll,
        delta: own.top1 - inp.teacher_accuracy.top1,
        delta_ci: paired_wald(gained, lost, n, Z95),
        retention: (inp.teacher_accuracy.top1 > 0.0).then(|| own.top1 / inp.teacher_accuracy.top1),
        mcnemar_p: mcnemar_exact(gained, lost),
        negative_flip_rate: lost as f64 / n as f64,
        own,
        gained,
        lost,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Logits [a, 0] whose top class has softmax probability `p`.
    fn with_confidence(p: f64) -> [f64; 2] {
        [(p / (1.0 - p)).ln(), 0.0]
    }

    #[test]
    fn a_certain_prediction_falls_in_the_last_bin() {
        // metrics.md: bin m holds ((m-1)/15, m/15], so confidence 1 is in bin 15.
        // Both predictions are class 0 with confidence 1; one is right: ECE = |0.5 - 1|.
        let z = Logits::from_rows(2, vec![0.0, -1000.0, 0.0, -1000.0]);
        let a = accuracy(&z, &[0, 1]);
        assert_eq!(a.top1, 0.5);
        assert!((a.ece - 0.5).abs() < 1e-15, "{}", a.ece);
    }

    #[test]
    fn samples_in_different_bins_are_weighed_by_their_own_bin() {
        // Guo et al. 2017, eq. 3: confidence 0.6 (bin 9) right, 0.9 (bin 14) wrong:
        // ECE = 0.5 * |1 - 0.6| + 0.5 * |0 - 0.9| = 0.65. One shared bin would
        // give |0.5 - 0.75| = 0.25 instead.
        let rows = [with_confidence(0.6), with_confidence(0.9)].concat();
        let a = accuracy(&Logits::from_rows(2, rows), &[0, 1]);
        assert!((a.ece - 0.65).abs() < 1e-12, "{}", a.ece);
    }

    #[test]
    fn a_student_identical_to_its_teacher_has_mcnemar_p_one_and_no_flips() {
        // Common practice, no source.
        let z = Logits::from_rows(3, vec![1.0, 0.0, 0.0, 0.0, 2.0, 0.0, 0.0, 0.0, 3.0]);
        let labels = [0, 0, 2];
        let t = accuracy(&z, &labels);
        let sce = soft_cross_entropy(&z, &z, 4.0);
        let s = student_accuracy(&StudentInputs {
            teacher: &z,
            teacher_accuracy: &t,
            student: &z,
            labels: &labels,
            temperature: 4.0,
            alpha: 0.5,
            soft_cross_entropy: sce,
        });
        assert_eq!(s.mcnemar_p, 1.0);
        assert_eq!(s.negative_flip_rate, 0.0);
        assert_eq!(s.delta, 0.0);
        assert_eq!(s.delta_ci, [0.0, 0.0]);
        assert_eq!(s.retention, Some(1.0));
    }
}
