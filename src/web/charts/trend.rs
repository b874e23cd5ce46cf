//! A figure over evaluations in time order, one small chart per project
//! and evaluation set. x is the evaluation's position, named by its commit
//! (or date); runs with a no-go verdict are drawn as crosses, not left out.

use maud::{Markup, html};

use super::scale::{Fit, Scale};
use super::{Frame, frame};

const W: f64 = 440.0;
const H: f64 = 288.0;
const PLOT: Frame = Frame {
    left: 60.0,
    right: W - 14.0,
    top: 14.0,
    bottom: 194.0,
};
/// Tick labels are about seven characters; more than this many crowd.
const MAX_TICKS: usize = 6;

/// One evaluation on a trend.
pub(in crate::web) struct TrendMark {
    /// The x tick: the commit, or the date.
    pub tick: String,
    /// The hover text, already rounded.
    pub title: String,
    pub value: f64,
    pub go: bool,
    pub href: String,
    pub evaluation: String,
}

pub(in crate::web) struct Trend<'a> {
    pub marks: &'a [TrendMark],
    pub y_label: &'a str,
    /// Proportions stop at 1.0; other figures span ±20 % of their centre
    /// at least.
    pub proportion: bool,
    /// A class naming the figure, for styles and tests.
    pub figure: &'a str,
    pub x_label: &'a str,
    pub summary: &'a str,
}

pub(in crate::web) fn trend(t: &Trend<'_>) -> Markup {
    let n = t.marks.len();
    let x = Scale::new(
        (0..n).map(|i| i as f64),
        Fit {
            min_span: 1.0,
            ceiling: None,
            floor: None,
        },
        PLOT.left,
        PLOT.right,
    );
    let values: Vec<f64> = t.marks.iter().map(|m| m.value).collect();
    let fit = if t.proportion {
        Fit::proportion(0.05)
    } else {
        Fit::relative(&values, 0.2)
    };
    let y = Scale::new(values.iter().copied(), fit, PLOT.bottom, PLOT.top);
    let step = n.div_ceil(MAX_TICKS).max(1);
    let ticks: Vec<(f64, String)> = t
        .marks
        .iter()
        .enumerate()
        .step_by(step)
        .map(|(i, m)| (i as f64, m.tick.clone()))
        .collect();
    let path: Vec<String> = t
        .marks
        .iter()
        .enumerate()
        .map(|(i, m)| format!("{:.1},{:.1}", x.at(i as f64), y.at(m.value)))
        .collect();
    let (row1, row2) = (H - 34.0, H - 14.0);
    html! {
        svg class=(format!("chart trend {}", t.figure)) viewBox=(format!("0 0 {W} {H}")) role="img"
            aria-label=(t.summary) data-y-hi=(y.hi) {
            title { (t.summary) }
            (frame(&PLOT, &x, &y, Some(ticks), t.x_label, t.y_label))
            polyline class="series-a" points=(path.join(" ")) {}
            @for (i, m) in t.marks.iter().enumerate() {
                @let (cx, cy) = (x.at(i as f64), y.at(m.value));
                a href=(m.href) data-evaluation=(m.evaluation) {
                    @if m.go {
                        circle class="point go" cx=(format!("{cx:.1}")) cy=(format!("{cy:.1}")) r="4.5" {
                            title { (m.title) }
                        }
                    } @else {
                        path class="point nogo" d=(cross(cx, cy)) {
                            title { (m.title) }
                        }
                    }
                }
            }
            g class="legend" {
                circle class="point go" cx=(PLOT.left + 5.0) cy=(row1 - 4.0) r="4.5" {}
                text x=(PLOT.left + 16.0) y=(row1) { "go: the recommended candidate" }
                path class="point nogo" d=(cross(PLOT.left + 5.0, row2 - 4.0)) {}
                text x=(PLOT.left + 16.0) y=(row2) { "no-go: the first-ranked candidate, which failed a gate" }
            }
        }
    }
}

/// An ✕ centred on (x, y).
fn cross(x: f64, y: f64) -> String {
    let r = 4.5;
    format!(
        "M{:.1},{:.1}L{:.1},{:.1}M{:.1},{:.1}L{:.1},{:.1}",
        x - r,
        y - r,
        x + r,
        y + r,
        x - r,
        y + r,
        x + r,
        y - r
    )
}
