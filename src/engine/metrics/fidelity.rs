//! How closely a student reproduces its teacher (metrics.md, "Fidelity").

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::{argmax, in_top_k, log_softmax, top_k};
use crate::engine::logits::Logits;
use crate::engine::stats::{Z95, wilson};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ClassAgreement {
    pub class: usize,
    pub samples: u64,
    pub agreement: f64,
    /// Of `samples`, those the student predicts as the teacher does.
    #[serde(skip)]
    pub agreed: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Disagreement {
    pub teacher_class: usize,
    pub student_class: usize,
    pub count: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Fidelity {
    pub agreement: f64,
    pub agreement_ci: [f64; 2],
    pub topk_agreement: f64,
    pub kl: f64,
    pub kl_t1: f64,
    pub js: f64,
    pub soft_cross_entropy: f64,
    pub logit_mse: f64,
    pub class_agreement: Vec<ClassAgreement>,
    pub disagreements: Vec<Disagreement>,
    /// Samples where the student's top class is the teacher's.
    #[serde(skip)]
    pub agreed: u64,
}

/// Per-sample sums accumulated in one pass over the rows.
#[derive(Default)]
struct Sums {
    agree: u64,
    topk: u64,
    kl: f64,
    kl_t1: f64,
    js: f64,
    soft_ce: f64,
    mse: f64,
}

/// KL(q || p) and the cross-entropy -sum q log p of one row, from logs,
/// with 0 log 0 = 0: one exp per class serves both.
fn kl_and_cross_entropy(log_q: &[f64], log_p: &[f64]) -> (f64, f64) {
    let (mut kl, mut ce) = (0.0, 0.0);
    for (&lq, &lp) in log_q.iter().zip(log_p) {
        let q = lq.exp();
        if q != 0.0 {
            kl += q * (lq - lp);
            ce -= q * lp;
        }
    }
    (kl, ce)
}

/// KL(a || b) and the Jensen-Shannon divergence (Lin 1991) of one row,
/// natural log, from the two distributions' logs. JS uses the ratio form
/// x ln(x / m), which is exactly 0 for identical rows (the log form
/// x (ln x - ln m) is not, by rounding, and can dip below 0).
fn kl_and_js(log_a: &[f64], log_b: &[f64]) -> (f64, f64) {
    let term = |x: f64, m: f64| if x == 0.0 { 0.0 } else { x * (x / m).ln() };
    let (mut kl, mut js) = (0.0, 0.0);
    for (&la, &lb) in log_a.iter().zip(log_b) {
        let (a, b) = (la.exp(), lb.exp());
        if a != 0.0 {
            kl += a * (la - lb);
        }
        let m = 0.5 * (a + b);
        js += 0.5 * (term(a, m) + term(b, m));
    }
    (kl, js)
}

/// Mean squared difference of per-row centred logits.
fn centred_mse_row(zs: &[f64], zt: &[f64]) -> f64 {
    let c = zs.len() as f64;
    let ms = zs.iter().sum::<f64>() / c;
    let mt = zt.iter().sum::<f64>() / c;
    zs.iter()
        .zip(zt)
        .map(|(s, t)| ((s - ms) - (t - mt)).powi(2))
        .sum::<f64>()
        / c
}

pub fn fidelity(teacher: &Logits, student: &Logits, temperature: f64) -> Fidelity {
    assert_eq!(
        (teacher.n, teacher.c),
        (student.n, student.c),
        "logit shapes differ"
    );
    let (n, k) = (teacher.n, top_k(teacher.c));
    let mut s = Sums::default();
    let mut per_class: BTreeMap<usize, (u64, u64)> = BTreeMap::new();
    let mut pairs: BTreeMap<(usize, usize), u64> = BTreeMap::new();
    let (mut lq, mut lp, mut lq1, mut lp1) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    for (zt, zs) in teacher.rows().zip(student.rows()) {
        let (ct, cs) = (argmax(zt), argmax(zs));
        let entry = per_class.entry(ct).or_default();
        entry.0 += 1;
        if ct == cs {
            s.agree += 1;
            entry.1 += 1;
        } else {
            *pairs.entry((ct, cs)).or_default() += 1;
        }
        s.topk += in_top_k(zs, ct, k) as u64;
        log_softmax(zt, temperature, &mut lq);
        log_softmax(zs, temperature, &mut lp);
        log_softmax(zt, 1.0, &mut lq1);
        log_softmax(zs, 1.0, &mut lp1);
        let (kl, ce) = kl_and_cross_entropy(&lq, &lp);
        let (kl_t1, js) = kl_and_js(&lq1, &lp1);
        s.kl += kl;
        s.soft_ce += ce;
        s.kl_t1 += kl_t1;
        s.js += js;
        s.mse += centred_mse_row(zs, zt);
    }
    let nf = n as f64;
    let mut disagreements: Vec<Disagreement> = pairs
        .into_iter()
        .map(|((t, st), count)| Disagreement {
            teacher_class: t,
            student_class: st,
            count,
        })
        .collect();
    disagreements.sort_by(|a, b| {
        b.count
            .cmp(&a.count)
            .then(a.teacher_class.cmp(&b.teacher_class))
            .then(a.student_class.cmp(&b.student_class))
    });
    disagreements.truncate(10);
    Fidelity {
        agreement: s.agree as f64 / nf,
        agreement_ci: wilson(s.agree, n as u64, Z95),
        topk_agreement: s.topk as f64 / nf,
        kl: s.kl / nf,
        kl_t1: s.kl_t1 / nf,
        js: s.js / nf,
        soft_cross_entropy: s.soft_ce / nf,
        logit_mse: s.mse / nf,
        class_agreement: per_class
            .into_iter()
            .map(|(class, (samples, agree))| ClassAgreement {
                class,
                samples,
                agreement: agree as f64 / samples as f64,
                agreed: agree,
            })
            .collect(),
        disagreements,
        agreed: s.agree,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn logits(c: usize, v: &[f64]) -> Logits {
        Logits::from_rows(c, v.to_vec())
    }

    #[test]
    fn a_student_identical_to_its_teacher_agrees_fully_and_diverges_nowhere() {
        // Common practice, no source: identical predictions give agreement 1 and KL 0.
        let t = logits(3, &[1.0, 2.0, 0.5, -1.0, 0.0, 4.0, 3.0, 3.0, 1.0]);
        let f = fidelity(&t, &t, 4.0);
        assert_eq!(f.agreement, 1.0);
        assert_eq!(f.kl, 0.0);
        assert_eq!(f.kl_t1, 0.0);
        assert_eq!(f.js, 0.0);
        assert_eq!(f.logit_mse, 0.0);
        assert!(f.disagreements.is_empty());
    }

    #[test]
    fn kl_is_never_negative_and_js_never_exceeds_ln_2() {
        // Common practice, no source (Gibbs' inequality; JS bound from Lin 1991).
        let t = logits(2, &[50.0, -50.0, 0.0, 0.0, 3.0, 1.0]);
        let s = logits(2, &[-50.0, 50.0, 0.1, 0.0, 1.0, 3.0]);
        let f = fidelity(&t, &s, 1.0);
        assert!(f.kl >= 0.0 && f.kl_t1 >= 0.0);
        assert!(f.js <= std::f64::consts::LN_2, "{}", f.js);
    }

    #[test]
    fn disagreements_are_sorted_by_count_then_classes() {
        let t = logits(
            3,
            &[1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0],
        );
        let s = logits(
            3,
            &[0.0, 1.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, 1.0, 0.0, 0.0],
        );
        let f = fidelity(&t, &s, 1.0);
        let got: Vec<(usize, usize, u64)> = f
            .disagreements
            .iter()
            .map(|d| (d.teacher_class, d.student_class, d.count))
            .collect();
        assert_eq!(got, vec![(0, 1, 2), (1, 2, 1), (2, 0, 1)]);
        assert_eq!(f.class_agreement.len(), 3);
        assert_eq!(f.agreement, 0.0);
    }
}
