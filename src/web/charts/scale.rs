//! Linear scales from data onto pixels, with round ticks. A scale never
//! zooms into noise: it spans at least a minimum width around its values'
//! centre, so that two latencies 0.1 µs apart do not fill the plot.

/// How a scale fits its values.
#[derive(Clone, Copy)]
pub(in crate::web) struct Fit {
    /// The narrowest span shown, in data units.
    pub min_span: f64,
    /// No tick or padding above this (agreement stops at 1.0).
    pub ceiling: Option<f64>,
    /// No tick or padding below this (latency and size stay positive).
    pub floor: Option<f64>,
}

impl Fit {
    /// At least ±`share` of the values' centre, e.g. 0.2 for ±20 %.
    pub(in crate::web) fn relative(values: &[f64], share: f64) -> Fit {
        let (lo, hi) = extent(values.iter().copied()).unwrap_or((0.0, 1.0));
        Fit {
            min_span: (2.0 * share * (lo + hi).abs() / 2.0).max(1e-9),
            ceiling: None,
            floor: Some(0.0),
        }
    }

    /// Proportions: at least `min_span` wide, never past 0 or 1.
    pub(in crate::web) fn proportion(min_span: f64) -> Fit {
        Fit {
            min_span,
            ceiling: Some(1.0),
            floor: Some(0.0),
        }
    }
}

pub(in crate::web) struct Scale {
    pub lo: f64,
    pub hi: f64,
    from: f64,
    to: f64,
}

fn extent(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| {
            (l.min(v), h.max(v))
        });
    lo.is_finite().then_some((lo, hi))
}

impl Scale {
    /// Spans `values` padded by 8 % each side, widened to `fit.min_span`
    /// around their centre, and kept inside the ceiling and floor.
    pub(in crate::web) fn new(
        values: impl Iterator<Item = f64>,
        fit: Fit,
        from: f64,
        to: f64,
    ) -> Scale {
        let (lo, hi) = extent(values).unwrap_or((0.0, 1.0));
        let pad = (hi - lo) * 0.08;
        let (mut lo, mut hi) = (lo - pad, hi + pad);
        if hi - lo < fit.min_span {
            let centre = (lo + hi) / 2.0;
            (lo, hi) = (centre - fit.min_span / 2.0, centre + fit.min_span / 2.0);
        }
        // Pushed back inside the limits by shifting, so the span is kept.
        if let Some(c) = fit.ceiling.filter(|c| hi > *c) {
            lo -= hi - c;
            hi = c;
        }
        if let Some(f) = fit.floor.filter(|f| lo < *f) {
            hi = (hi + (f - lo)).min(fit.ceiling.unwrap_or(f64::INFINITY));
            lo = f;
        }
        Scale { lo, hi, from, to }
    }

    pub(in crate::web) fn at(&self, v: f64) -> f64 {
        self.from + (v - self.lo) / (self.hi - self.lo) * (self.to - self.from)
    }

    /// The tick step: 1, 2, 2.5 or 5 times a power of ten, the finest
    /// that gives at most six steps over the span.
    fn step(&self) -> f64 {
        let raw = (self.hi - self.lo) / 6.0;
        let magnitude = 10f64.powf(raw.log10().floor());
        [1.0, 2.0, 2.5, 5.0, 10.0]
            .into_iter()
            .map(|m| m * magnitude)
            .find(|s| *s >= raw * 0.999)
            .unwrap_or(10.0 * magnitude)
    }

    /// Round values inside the span.
    pub(in crate::web) fn ticks(&self) -> Vec<f64> {
        let step = self.step();
        let first = (self.lo / step - 1e-9).ceil() as i64;
        let last = (self.hi / step + 1e-9).floor() as i64;
        (first..=last).map(|k| k as f64 * step).collect()
    }

    /// A tick label with just the decimals its step needs.
    pub(in crate::web) fn label(&self, v: f64) -> String {
        let step = self.step();
        let mut digits = (-step.log10().floor()).max(0.0) as usize;
        if ((step / 10f64.powf(step.log10().floor())) - 2.5).abs() < 1e-9 {
            digits += 1;
        }
        format!("{v:.digits$}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn latencies_a_hair_apart_span_forty_percent_of_their_centre() {
        let values = [0.0101, 0.01010015];
        let s = Scale::new(values.into_iter(), Fit::relative(&values, 0.2), 0.0, 100.0);
        assert!(s.hi - s.lo >= 0.4 * 0.0101 * 0.999, "{} .. {}", s.lo, s.hi);
    }

    #[test]
    fn agreement_never_runs_past_one() {
        let s = Scale::new([0.97, 1.0].into_iter(), Fit::proportion(0.05), 0.0, 100.0);
        assert!(s.hi <= 1.0);
        assert!(s.ticks().iter().all(|t| *t <= 1.0 + 1e-12));
        assert!(s.hi - s.lo >= 0.05 - 1e-12);
    }

    #[test]
    fn ticks_are_round_numbers() {
        let s = Scale::new([0.71, 0.93].into_iter(), Fit::proportion(0.05), 0.0, 100.0);
        let labels: Vec<String> = s.ticks().iter().map(|t| s.label(*t)).collect();
        assert_eq!(labels, ["0.70", "0.75", "0.80", "0.85", "0.90"]);
    }
}
