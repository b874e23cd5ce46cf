//! The figures of metrics.md, computed in f64 from logits [N, C].
//! `fidelity` compares a student with its teacher; `accuracy` compares a
//! model with the labels. Both are pure functions of their inputs.

pub mod accuracy;
pub mod baseline;
pub mod fidelity;
pub mod slices;

/// Top-k size used by `topk` and `topk_agreement`: min(5, C).
pub fn top_k(c: usize) -> usize {
    c.min(5)
}

/// argmax with numpy's rule: the lowest index among equal maxima.
pub fn argmax(row: &[f64]) -> usize {
    let mut best = 0;
    for (i, &v) in row.iter().enumerate().skip(1) {
        if v > row[best] {
            best = i;
        }
    }
    best
}

/// Whether class `class` is among the k largest of `row`, ordering by value
/// descending, then index ascending.
pub fn in_top_k(row: &[f64], class: usize, k: usize) -> bool {
    let v = row[class];
    let ahead = row
        .iter()
        .enumerate()
        .filter(|&(j, &w)| w > v || (w == v && j < class))
        .count();
    ahead < k
}

/// log softmax(row / t) into `out`, with the maximum subtracted first.
pub fn log_softmax(row: &[f64], t: f64, out: &mut Vec<f64>) {
    out.clear();
    out.extend(row.iter().map(|&z| z / t));
    let max = out.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let lse = out.iter().map(|&x| (x - max).exp()).sum::<f64>().ln();
    for x in out.iter_mut() {
        *x = *x - max - lse;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn argmax_takes_the_lowest_index_on_ties() {
        // numpy.argmax returns the first occurrence of the maximum (numpy docs).
        assert_eq!(argmax(&[1.0, 3.0, 3.0, 2.0]), 1);
        assert_eq!(argmax(&[5.0, 5.0]), 0);
    }

    #[test]
    fn top_k_breaks_ties_by_lowest_index() {
        let row = [2.0, 1.0, 1.0, 1.0, 0.0];
        assert!(in_top_k(&row, 0, 2));
        assert!(in_top_k(&row, 1, 2));
        assert!(!in_top_k(&row, 2, 2));
        assert!(in_top_k(&row, 3, 4));
        assert!(!in_top_k(&row, 4, 4));
    }

    #[test]
    fn log_softmax_is_shift_invariant_and_normalized() {
        let mut a = Vec::new();
        let mut b = Vec::new();
        log_softmax(&[1.0, 2.0, 3.0], 2.0, &mut a);
        log_softmax(&[1001.0, 1002.0, 1003.0], 2.0, &mut b);
        for (x, y) in a.iter().zip(&b) {
            assert!((x - y).abs() < 1e-12);
        }
        let total: f64 = a.iter().map(|x| x.exp()).sum();
        assert!((total - 1.0).abs() < 1e-15);
    }
}
