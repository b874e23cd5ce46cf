//! Small statistics used by the metrics: intervals, exact tests, percentiles.

use statrs::distribution::{Binomial, ContinuousCDF, DiscreteCDF, Normal};

/// Two-sided z of a 95 % interval, Phi^-1(0.975), as metrics.md states it.
pub const Z95: f64 = 1.959963984540054;

/// Two-sided z for a confidence level in (0, 1): Phi^-1(1 - (1 - c) / 2).
pub fn z_for_confidence(confidence: f64) -> f64 {
    let normal = Normal::standard();
    normal.inverse_cdf(1.0 - (1.0 - confidence) / 2.0)
}

/// Wilson score interval (Wilson 1927) for `k` successes in `n` trials, in
/// the algebraic form statsmodels' `proportion_confint(method="wilson")` uses,
/// clamped to [0, 1] so that rounding cannot push an end past a bound.
pub fn wilson(k: u64, n: u64, z: f64) -> [f64; 2] {
    let n = n as f64;
    let p = k as f64 / n;
    let z2 = z * z;
    let denom = 1.0 + z2 / n;
    let center = (p + z2 / (2.0 * n)) / denom;
    let dist = z * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt() / denom;
    [(center - dist).max(0.0), (center + dist).min(1.0)]
}

/// Exact two-sided McNemar p-value (McNemar 1947; exact form as in
/// Dietterich 1998): p = min(1, 2 * P[X <= min(b, c)]), X ~ Binomial(b + c, 1/2).
pub fn mcnemar_exact(b: u64, c: u64) -> f64 {
    let n = b + c;
    if n == 0 {
        return 1.0;
    }
    let m = b.min(c);
    // Sum the lower tail relative to its largest term, pmf(m), so that no
    // term underflows; pmf(k - 1) = pmf(k) * k / (n - k + 1).
    let mut term = 1.0f64;
    let mut scaled_sum = 1.0f64;
    for k in (1..=m).rev() {
        term *= k as f64 / (n - k + 1) as f64;
        scaled_sum += term;
    }
    // ln pmf(m) = ln C(n, m) - n ln 2, with ln C(n, m) = sum_i ln((n - m + i) / i).
    let ln_choose: f64 = (1..=m).map(|i| ((n - m + i) as f64 / i as f64).ln()).sum();
    let ln_pmf = ln_choose - n as f64 * std::f64::consts::LN_2;
    (2.0 * (ln_pmf + scaled_sum.ln()).exp()).min(1.0)
}

/// Wald interval for the difference of paired proportions (Agresti,
/// Categorical Data Analysis, section 10.1): d = (b - c) / N and
/// se = sqrt((b + c) - (b - c)^2 / N) / N.
pub fn paired_wald(b: u64, c: u64, n: u64, z: f64) -> [f64; 2] {
    let (b, c, n) = (b as f64, c as f64, n as f64);
    let d = (b - c) / n;
    let se = ((b + c) - (b - c) * (b - c) / n).max(0.0).sqrt() / n;
    [d - z * se, d + z * se]
}

/// Nearest-rank percentile of sorted values: sorted[ceil(q * n) - 1], with
/// q given in hundredths so that the rank is computed exactly.
pub fn nearest_rank(sorted: &[f64], hundredths: u64) -> f64 {
    let n = sorted.len() as u64;
    let rank = (hundredths * n).div_ceil(100).max(1);
    sorted[(rank - 1) as usize]
}

/// The 1-based ranks (l, u) of the order statistics t(l) <= t(u) that bound
/// the q-quantile of r values at `confidence` (Conover, Practical
/// Nonparametric Statistics, 3rd ed., section 3.2): with B ~ Binomial(r, q),
/// l is the smallest k with P(B <= k) >= (1 - c) / 2 and u is one more than
/// the smallest k with P(B <= k) >= (1 + c) / 2, both clamped into [1, r].
pub fn quantile_ranks(r: usize, q: f64, confidence: f64) -> (usize, usize) {
    assert!(r >= 1, "a quantile needs at least one value");
    let b = Binomial::new(q, r as u64).expect("q lies in [0, 1]");
    // The smallest k in [0, r] with P(B <= k) >= level (P(B <= r) = 1).
    let smallest = |level: f64| {
        let (mut lo, mut hi) = (0u64, r as u64);
        while lo < hi {
            let mid = lo + (hi - lo) / 2;
            if b.cdf(mid) >= level {
                hi = mid;
            } else {
                lo = mid + 1;
            }
        }
        lo as usize
    };
    let l = smallest((1.0 - confidence) / 2.0);
    let u = smallest((1.0 + confidence) / 2.0) + 1;
    (l.max(1), u.min(r))
}

/// The distribution-free interval of the q-quantile of `values` at
/// `confidence`: [t(l), t(u)] of `quantile_ranks`.
pub fn quantile_interval(values: &[f64], q: f64, confidence: f64) -> [f64; 2] {
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let (l, u) = quantile_ranks(sorted.len(), q, confidence);
    [sorted[l - 1], sorted[u - 1]]
}

pub fn mean(values: &[f64]) -> f64 {
    values.iter().sum::<f64>() / values.len() as f64
}

/// Sample standard deviation (n - 1 in the denominator); `None` for n < 2.
pub fn sample_stdev(values: &[f64]) -> Option<f64> {
    if values.len() < 2 {
        return None;
    }
    let m = mean(values);
    let ss: f64 = values.iter().map(|v| (v - m) * (v - m)).sum();
    Some((ss / (values.len() - 1) as f64).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(a: f64, b: f64, rel: f64) -> bool {
        (a - b).abs() <= rel * b.abs().max(f64::MIN_POSITIVE)
    }

    #[test]
    fn z_at_95_percent_matches_the_published_quantile() {
        // Phi^-1(0.975) = 1.959963984540054 (metrics.md; scipy.stats.norm.ppf(0.975)).
        assert!(
            close(z_for_confidence(0.95), Z95, 1e-12),
            "{}",
            z_for_confidence(0.95)
        );
        // scipy 1.17 stats.norm.ppf(0.995).
        assert!(close(z_for_confidence(0.99), 2.5758293035489004, 1e-9));
    }

    #[test]
    fn wilson_at_zero_and_full_success_touches_the_bound() {
        // statsmodels 0.15 proportion_confint(0, 20) = (0.0, 0.1611251580528194) and
        // proportion_confint(20, 20) = (0.8388748419471804, 0.9999999999999999), method="wilson".
        let [lo, hi] = wilson(0, 20, Z95);
        assert_eq!(lo, 0.0);
        assert!(close(hi, 0.1611251580528194, 1e-12), "{hi}");
        let [lo, hi] = wilson(20, 20, Z95);
        assert!(close(lo, 0.8388748419471804, 1e-12), "{lo}");
        assert!(close(hi, 1.0, 1e-15) && hi <= 1.0, "{hi}");
    }

    #[test]
    fn wilson_matches_a_hand_computed_value() {
        // statsmodels 0.15 proportion_confint(7, 10, method="wilson").
        let [lo, hi] = wilson(7, 10, Z95);
        assert!(close(lo, 0.39677814746114537, 1e-12), "{lo}");
        assert!(close(hi, 0.8922087325936989, 1e-12), "{hi}");
    }

    #[test]
    fn mcnemar_of_no_discordant_pairs_is_one() {
        assert_eq!(mcnemar_exact(0, 0), 1.0);
        assert_eq!(mcnemar_exact(4, 4), 1.0);
    }

    #[test]
    fn mcnemar_matches_the_binomial_tail() {
        // b = 1, c = 9: 2 * (1 + 10) / 1024 (binomial arithmetic).
        assert!(close(mcnemar_exact(1, 9), 22.0 / 1024.0, 1e-14));
        assert!(close(mcnemar_exact(0, 5), 2.0 / 32.0, 1e-14));
        // Large counts must not underflow: b + c = 5000.
        let p = mcnemar_exact(2400, 2600);
        assert!(p > 0.0 && p < 1.0, "{p}");
    }

    #[test]
    fn nearest_rank_percentiles_follow_the_definition() {
        let v: Vec<f64> = (1..=10).map(f64::from).collect();
        assert_eq!(nearest_rank(&v, 50), 5.0);
        assert_eq!(nearest_rank(&v, 90), 9.0);
        assert_eq!(nearest_rank(&v, 99), 10.0);
        assert_eq!(nearest_rank(&[3.0], 99), 3.0);
        let h: Vec<f64> = (1..=100).map(f64::from).collect();
        assert_eq!(nearest_rank(&h, 99), 99.0);
        assert_eq!(nearest_rank(&h, 90), 90.0);
    }

    #[test]
    fn quantile_ranks_of_100_values_around_the_median_are_40_and_61() {
        // metrics.md: R = 100, q = 0.5 gives [t(40), t(61)]; scipy.stats.binom.ppf
        // (0.025, 100, 0.5) = 40 and ppf(0.975, 100, 0.5) + 1 = 61 (the reference
        // fixture checks many more R and q against scipy).
        assert_eq!(quantile_ranks(100, 0.5, 0.95), (40, 61));
        let v: Vec<f64> = (1..=100).rev().map(f64::from).collect();
        assert_eq!(quantile_interval(&v, 0.5, 0.95), [40.0, 61.0]);
    }

    #[test]
    fn quantile_ranks_are_clamped_to_the_values_there_are() {
        // One value: the interval is that value; few values: the ends clamp.
        assert_eq!(quantile_ranks(1, 0.5, 0.95), (1, 1));
        assert_eq!(quantile_ranks(3, 0.9, 0.95), (1, 3));
    }

    #[test]
    fn sample_stdev_divides_by_n_minus_one() {
        assert_eq!(sample_stdev(&[1.0, 3.0]), Some(2f64.sqrt()));
        assert_eq!(sample_stdev(&[1.0]), None);
    }
}
