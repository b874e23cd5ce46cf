//! Comparing the speed of two models from their paired timed rounds
//! (metrics.md, "Latency and throughput"): every round times every model
//! once on the same sample, so the per-round ratio cancels drift that hits
//! both runs of a round, and its median's interval says whether a
//! difference is more than machine noise.

use super::stats::{nearest_rank, quantile_interval};

/// The intervals of a report are at 95 %.
pub const CONFIDENCE_95: f64 = 0.95;

/// How model A's speed compares with model B's.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pace {
    Faster,
    Slower,
    /// The difference lies within the evaluation's tolerance.
    Equal,
}

impl Pace {
    /// B's pace against A, from A's against B.
    pub fn flip(self) -> Pace {
        match self {
            Pace::Faster => Pace::Slower,
            Pace::Slower => Pace::Faster,
            Pace::Equal => Pace::Equal,
        }
    }
}

/// Per-round ratios a_r / b_r over the rounds both were timed in.
pub fn ratios(a: &[f64], b: &[f64]) -> Vec<f64> {
    a.iter().zip(b).map(|(x, y)| x / y).collect()
}

/// The nearest-rank median of the per-round ratios, and its
/// order-statistic interval at `confidence`.
pub fn paired_median(a: &[f64], b: &[f64], confidence: f64) -> (f64, [f64; 2]) {
    let mut r = ratios(a, b);
    let interval = quantile_interval(&r, 0.5, confidence);
    r.sort_by(f64::total_cmp);
    (nearest_rank(&r, 50), interval)
}

/// A against B with tolerance `tol`: faster when the 95 % interval of the
/// median ratio A/B lies wholly below 1 / (1 + tol), slower when it lies
/// wholly above 1 + tol, equal otherwise.
pub fn pace(a: &[f64], b: &[f64], tol: f64) -> Pace {
    let (_, [lo, hi]) = paired_median(a, b, CONFIDENCE_95);
    if hi < 1.0 / (1.0 + tol) {
        Pace::Faster
    } else if lo > 1.0 + tol {
        Pace::Slower
    } else {
        Pace::Equal
    }
}

/// Paces between the timed rounds of several models, computed once per
/// pair and always from the same side, so that A is faster than B exactly
/// when B is slower than A, to the last bit.
pub struct Paces<'a> {
    rounds: Vec<&'a [f64]>,
    tol: f64,
    known: std::cell::RefCell<std::collections::HashMap<(usize, usize), Pace>>,
}

impl<'a> Paces<'a> {
    pub fn new(rounds: Vec<&'a [f64]>, tol: f64) -> Self {
        Paces {
            rounds,
            tol,
            known: Default::default(),
        }
    }

    /// Model i's pace against model j.
    pub fn of(&self, i: usize, j: usize) -> Pace {
        if i == j {
            return Pace::Equal;
        }
        let (lo, hi) = (i.min(j), i.max(j));
        let p = *self
            .known
            .borrow_mut()
            .entry((lo, hi))
            .or_insert_with(|| pace(self.rounds[lo], self.rounds[hi], self.tol));
        if i == lo { p } else { p.flip() }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rounds(base: f64, n: usize) -> Vec<f64> {
        // A small deterministic wobble, as a machine's noise would give.
        (0..n)
            .map(|i| base * (1.0 + 0.001 * ((i * 7) % 5) as f64))
            .collect()
    }

    #[test]
    fn a_model_twice_as_fast_is_faster_and_the_other_slower() {
        let (a, b) = (rounds(1.0, 100), rounds(2.0, 100));
        assert_eq!(pace(&a, &b, 0.03), Pace::Faster);
        assert_eq!(pace(&b, &a, 0.03), Pace::Slower);
    }

    #[test]
    fn differences_inside_the_tolerance_are_equal() {
        // 2 % apart with a 3 % tolerance: equal both ways (common practice).
        let (a, b) = (rounds(1.0, 100), rounds(1.02, 100));
        assert_eq!(pace(&a, &b, 0.03), Pace::Equal);
        assert_eq!(pace(&b, &a, 0.03), Pace::Equal);
        assert_eq!(pace(&a, &b, 0.01), Pace::Faster);
    }

    #[test]
    fn the_median_ratio_of_paired_rounds_cancels_drift_that_hits_both() {
        // The machine slows down tenfold halfway through; each round's pair
        // slows alike, so the ratio stays exactly 2.
        let slow: Vec<f64> = (0..100).map(|i| if i < 50 { 1.0 } else { 10.0 }).collect();
        let fast: Vec<f64> = slow.iter().map(|x| x / 2.0).collect();
        let (median, ci) = paired_median(&slow, &fast, CONFIDENCE_95);
        assert_eq!((median, ci), (2.0, [2.0, 2.0]));
    }

    #[test]
    fn paces_are_symmetric_whichever_side_is_asked_first() {
        let a = rounds(1.0, 60);
        let b: Vec<f64> = rounds(1.0, 60).iter().map(|x| x * 1.0300000001).collect();
        let paces = Paces::new(vec![&a, &b], 0.03);
        assert_eq!(paces.of(1, 0), paces.of(0, 1).flip());
        assert_eq!(paces.of(0, 0), Pace::Equal);
    }
}
