//! A cumulative histogram as the Prometheus text format writes it:
//! `_bucket{le=…}` counts of observations at or under each bound, then
//! `+Inf`, `_sum` and `_count`.

use std::fmt::Write;

#[derive(Debug, Clone)]
pub(super) struct Histogram {
    bounds: &'static [f64],
    /// Observations at or under each bound (not cumulative; summed on render).
    counts: Vec<u64>,
    over: u64,
    sum: f64,
}

impl Histogram {
    pub(super) fn new(bounds: &'static [f64]) -> Histogram {
        Histogram {
            bounds,
            counts: vec![0; bounds.len()],
            over: 0,
            sum: 0.0,
        }
    }

    pub(super) fn observe(&mut self, v: f64) {
        self.sum += v;
        match self.bounds.iter().position(|&b| v <= b) {
            Some(i) => self.counts[i] += 1,
            None => self.over += 1,
        }
    }

    fn count(&self) -> u64 {
        self.counts.iter().sum::<u64>() + self.over
    }

    pub(super) fn render(&self, out: &mut String, name: &str, labels: &str) {
        let mut running = 0;
        for (b, n) in self.bounds.iter().zip(&self.counts) {
            running += n;
            let _ = writeln!(out, "{name}_bucket{{{labels},le=\"{b}\"}} {running}");
        }
        let _ = writeln!(
            out,
            "{name}_bucket{{{labels},le=\"+Inf\"}} {}",
            self.count()
        );
        let _ = writeln!(out, "{name}_sum{{{labels}}} {}", self.sum);
        let _ = writeln!(out, "{name}_count{{{labels}}} {}", self.count());
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn buckets_are_cumulative_and_an_observation_on_a_bound_falls_in_it() {
        // The text format's `le` is "less than or equal" (common practice
        // of the Prometheus exposition format).
        let mut h = Histogram::new(&[1.0, 2.0]);
        for v in [0.5, 1.0, 1.5, 7.0] {
            h.observe(v);
        }
        let mut out = String::new();
        h.render(&mut out, "x", "k=\"v\"");
        assert_eq!(
            out,
            "x_bucket{k=\"v\",le=\"1\"} 2\nx_bucket{k=\"v\",le=\"2\"} 3\n\
             x_bucket{k=\"v\",le=\"+Inf\"} 4\nx_sum{k=\"v\"} 10\nx_count{k=\"v\"} 4\n"
        );
    }
}
