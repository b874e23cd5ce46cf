//! Charts drawn on the server as inline SVG: no script, no external asset.
//! Every mark carries a `<title>` with its values, rounded for reading.

mod bars;
mod labels;
mod scale;
mod scatter;
mod trend;

pub(super) use bars::BarScale;
pub(super) use scatter::{Point, Reference, Role, Scatter, scatter};
pub(super) use trend::{Trend, TrendMark, trend};

use maud::{Markup, html};

use scale::Scale;

/// Where a chart's plot area lies inside its SVG.
pub(super) struct Frame {
    pub left: f64,
    pub right: f64,
    pub top: f64,
    pub bottom: f64,
}

/// Axes, grid and tick labels. `x_ticks` replaces the round ticks of x
/// (a trend's x is an evaluation's position, named by commit or date).
fn frame(
    f: &Frame,
    x: &Scale,
    y: &Scale,
    x_ticks: Option<Vec<(f64, String)>>,
    x_label: &str,
    y_label: &str,
) -> Markup {
    let x_ticks =
        x_ticks.unwrap_or_else(|| x.ticks().into_iter().map(|t| (t, x.label(t))).collect());
    let middle = (f.top + f.bottom) / 2.0;
    html! {
        @for t in y.ticks() {
            line class="grid" x1=(f.left) x2=(f.right) y1=(format!("{:.1}", y.at(t))) y2=(format!("{:.1}", y.at(t))) {}
            text class="y-tick" x=(f.left - 6.0) y=(format!("{:.1}", y.at(t) + 4.0)) text-anchor="end" data-value=(t) { (y.label(t)) }
        }
        @for (t, label) in &x_ticks {
            line class="tick" x1=(format!("{:.1}", x.at(*t))) x2=(format!("{:.1}", x.at(*t))) y1=(f.bottom) y2=(f.bottom + 4.0) {}
            text class="x-tick" x=(format!("{:.1}", x.at(*t))) y=(f.bottom + 16.0) text-anchor="middle" { (label) }
        }
        line class="axis" x1=(f.left) x2=(f.right) y1=(f.bottom) y2=(f.bottom) {}
        line class="axis" x1=(f.left) x2=(f.left) y1=(f.top) y2=(f.bottom) {}
        text class="axis-title" x=(format!("{:.1}", (f.left + f.right) / 2.0)) y=(f.bottom + 34.0) text-anchor="middle" { (x_label) }
        text class="axis-title" x="12" y=(format!("{middle:.1}")) text-anchor="middle"
            transform=(format!("rotate(-90 12 {middle:.1})")) { (y_label) }
    }
}
