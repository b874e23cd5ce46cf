//! Charts drawn on the server as inline SVG: no script, no external asset.
//! Every mark carries a `<title>` with its exact values.

use maud::{Markup, html};

use crate::report::numbers::{interval, significant};

const W: f64 = 520.0;
const H: f64 = 320.0;
const PAD_L: f64 = 66.0;
const PAD_R: f64 = 16.0;
const PAD_T: f64 = 16.0;
const PAD_B: f64 = 44.0;

/// A linear scale from a data range onto pixels, padded a little.
struct Scale {
    lo: f64,
    hi: f64,
    from: f64,
    to: f64,
}

impl Scale {
    fn new(values: impl Iterator<Item = f64>, from: f64, to: f64) -> Scale {
        let (mut lo, mut hi) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| {
            (l.min(v), h.max(v))
        });
        if !lo.is_finite() {
            (lo, hi) = (0.0, 1.0);
        }
        let span = (hi - lo).abs().max(hi.abs() * 0.05).max(1e-9);
        Scale {
            lo: lo - span * 0.08,
            hi: hi + span * 0.08,
            from,
            to,
        }
    }

    fn at(&self, v: f64) -> f64 {
        self.from + (v - self.lo) / (self.hi - self.lo) * (self.to - self.from)
    }

    fn ticks(&self) -> Vec<f64> {
        (0..=4)
            .map(|i| self.lo + (self.hi - self.lo) * i as f64 / 4.0)
            .collect()
    }

    /// A tick label with just enough decimals to tell neighbours apart.
    fn label(&self, v: f64) -> String {
        let step = (self.hi - self.lo) / 4.0;
        let digits = (1.0 - step.log10().floor()).clamp(0.0, 8.0) as usize;
        format!("{v:.digits$}")
    }
}

/// Axes, grid and labels. `x_ticks` replaces the evenly spaced ticks of x
/// (the trend's x is an evaluation's position, not a quantity).
fn frame(
    x: &Scale,
    y: &Scale,
    x_ticks: Option<Vec<(f64, String)>>,
    x_label: &str,
    y_label: &str,
) -> Markup {
    let x_ticks =
        x_ticks.unwrap_or_else(|| x.ticks().into_iter().map(|t| (t, x.label(t))).collect());
    html! {
        @for t in y.ticks() {
            line class="grid" x1=(PAD_L) x2=(W - PAD_R) y1=(y.at(t)) y2=(y.at(t)) {}
            text x=(PAD_L - 6.0) y=(y.at(t) + 4.0) text-anchor="end" { (y.label(t)) }
        }
        @for (t, label) in &x_ticks {
            text x=(x.at(*t)) y=(H - PAD_B + 16.0) text-anchor="middle" { (label) }
        }
        line class="axis" x1=(PAD_L) x2=(W - PAD_R) y1=(H - PAD_B) y2=(H - PAD_B) {}
        line class="axis" x1=(PAD_L) x2=(PAD_L) y1=(PAD_T) y2=(H - PAD_B) {}
        text x=((PAD_L + W - PAD_R) / 2.0) y=(H - 8.0) text-anchor="middle" { (x_label) }
        text x="11" y=((PAD_T + H - PAD_B) / 2.0) text-anchor="middle"
            transform=(format!("rotate(-90 11 {})", (PAD_T + H - PAD_B) / 2.0)) { (y_label) }
    }
}

/// One candidate on the quality/latency scatter.
pub(super) struct Point {
    pub name: String,
    pub x: f64,
    /// The 95 % interval of x, drawn as whiskers.
    pub x_ci: [f64; 2],
    pub y: f64,
    pub bytes: u64,
    pub front: bool,
}

/// Quality against p50 latency, marker area by file size, the Pareto front drawn.
pub(super) fn scatter(points: &[Point], x_label: &str, y_label: &str, summary: &str) -> Markup {
    let x = Scale::new(
        points.iter().flat_map(|p| [p.x, p.x_ci[0], p.x_ci[1]]),
        PAD_L,
        W - PAD_R,
    );
    let y = Scale::new(points.iter().map(|p| p.y), H - PAD_B, PAD_T);
    let max_bytes = points.iter().map(|p| p.bytes).max().unwrap_or(1).max(1) as f64;
    // Area proportional to bytes: the radius goes with the square root.
    let radius = |b: u64| 4.0 + 14.0 * (b as f64 / max_bytes).sqrt();
    let mut front: Vec<&Point> = points.iter().filter(|p| p.front).collect();
    front.sort_by(|a, b| a.x.total_cmp(&b.x));
    let path: Vec<String> = front
        .iter()
        .map(|p| format!("{:.1},{:.1}", x.at(p.x), y.at(p.y)))
        .collect();
    html! {
        svg class="chart scatter" viewBox=(format!("0 0 {W} {H}")) role="img" aria-label=(summary) {
            title { (summary) }
            (frame(&x, &y, None, x_label, y_label))
            @if path.len() > 1 {
                polyline class="front-line" points=(path.join(" ")) {}
            }
            @for p in points {
                line class="whisker" x1=(format!("{:.1}", x.at(p.x_ci[0]))) x2=(format!("{:.1}", x.at(p.x_ci[1])))
                    y1=(format!("{:.1}", y.at(p.y))) y2=(format!("{:.1}", y.at(p.y))) {}
                circle class=(if p.front { "marker front" } else { "marker" }) data-model=(p.name)
                    cx=(format!("{:.1}", x.at(p.x))) cy=(format!("{:.1}", y.at(p.y))) r=(format!("{:.1}", radius(p.bytes))) {
                    title { (format!("{}: {y_label} {}, {x_label} {} (95 % interval {}), {} bytes{}", p.name,
                        significant(p.y), significant(p.x), interval(p.x_ci), p.bytes,
                        if p.front { ", on the Pareto front" } else { "" })) }
                }
                // Names go right of their marker, or left of it near the right edge.
                @let right = x.at(p.x) < PAD_L + 0.6 * (W - PAD_L - PAD_R);
                @let dx = if right { radius(p.bytes) + 3.0 } else { -radius(p.bytes) - 3.0 };
                text x=(format!("{:.1}", x.at(p.x) + dx)) y=(format!("{:.1}", y.at(p.y) + 4.0))
                    text-anchor=(if right { "start" } else { "end" }) { (p.name) }
            }
        }
    }
}

/// A line over evaluations in time order; x is the evaluation's position.
pub(super) fn trend(values: &[(String, f64)], y_label: &str, summary: &str) -> Markup {
    let x = Scale::new((0..values.len()).map(|i| i as f64), PAD_L, W - PAD_R);
    let y = Scale::new(values.iter().map(|(_, v)| *v), H - PAD_B, PAD_T);
    let path: Vec<String> = values
        .iter()
        .enumerate()
        .map(|(i, (_, v))| format!("{:.1},{:.1}", x.at(i as f64), y.at(*v)))
        .collect();
    html! {
        svg class="chart trend" viewBox=(format!("0 0 {W} {H}")) role="img" aria-label=(summary) {
            title { (summary) }
            (frame(&x, &y, Some(positions(values.len())), "evaluation, oldest to newest", y_label))
            polyline class="series-a" points=(path.join(" ")) {}
            @for (i, (label, v)) in values.iter().enumerate() {
                circle class="point" cx=(format!("{:.1}", x.at(i as f64))) cy=(format!("{:.1}", y.at(*v))) r="4" {
                    title { (format!("{label}: {y_label} {v}")) }
                }
            }
        }
    }
}

/// Ticks at evaluation positions 1..=n, at most eight of them.
fn positions(n: usize) -> Vec<(f64, String)> {
    let step = n.div_ceil(8).max(1);
    (0..n)
        .step_by(step)
        .map(|i| (i as f64, format!("#{}", i + 1)))
        .collect()
}
