//! Quality against p50 latency: one marker per candidate (area by file
//! size, colour and legend for the Pareto front), the teacher and the
//! baseline as reference shapes, p50 intervals as whiskers.

use maud::{Markup, html};

use super::labels::{Area, CHAR_W, Label, place};
use super::scale::{Fit, Scale};
use super::{Frame, frame};
use crate::report::numbers::significant;
use crate::web::format::{TimeUnit, bytes};

const W: f64 = 560.0;
const H: f64 = 400.0;
const PLOT: Frame = Frame {
    left: 66.0,
    right: W - 16.0,
    top: 16.0,
    bottom: 290.0,
};
/// The largest marker's radius; the others scale by the square root of
/// their bytes, so that area goes with size.
const R_MAX: f64 = 14.0;
const R_MIN: f64 = 3.0;

/// One candidate.
pub(in crate::web) struct Point {
    pub name: String,
    pub p50_ms: f64,
    pub p50_ci_ms: [f64; 2],
    pub quality: f64,
    pub bytes: u64,
    pub front: bool,
}

#[derive(Clone, Copy, PartialEq, Eq)]
pub(in crate::web) enum Role {
    Teacher,
    Baseline,
}

/// The teacher or the baseline, drawn for reference at a fixed size.
pub(in crate::web) struct Reference {
    pub role: Role,
    pub name: String,
    pub p50_ms: f64,
    pub p50_ci_ms: [f64; 2],
    pub quality: f64,
}

pub(in crate::web) struct Scatter<'a> {
    pub points: &'a [Point],
    pub references: &'a [Reference],
    /// "agreement" or "top-1".
    pub quality: &'a str,
    pub summary: &'a str,
}

/// ±20 % of the latencies' centre at least: closer than that, differences
/// are machine noise and must not look like a spread.
const MIN_RELATIVE_SPAN: f64 = 0.2;

pub(in crate::web) fn scatter(s: &Scatter<'_>) -> Markup {
    let all_ms: Vec<f64> = s
        .points
        .iter()
        .flat_map(|p| [p.p50_ms, p.p50_ci_ms[0], p.p50_ci_ms[1]])
        .chain(
            s.references
                .iter()
                .flat_map(|r| [r.p50_ms, r.p50_ci_ms[0], r.p50_ci_ms[1]]),
        )
        .collect();
    let unit = TimeUnit::for_ms(all_ms.iter().copied().fold(0.0, f64::max));
    let xs: Vec<f64> = all_ms.iter().map(|v| v * unit.per_ms).collect();
    // The minimum span is taken around the medians' centre, not the
    // intervals': a wide interval on one side must not shrink it.
    let medians: Vec<f64> = s
        .points
        .iter()
        .map(|p| p.p50_ms)
        .chain(s.references.iter().map(|r| r.p50_ms))
        .map(|v| v * unit.per_ms)
        .collect();
    let x = Scale::new(
        xs.iter().copied(),
        Fit::relative(&medians, MIN_RELATIVE_SPAN),
        PLOT.left,
        PLOT.right,
    );
    let y = Scale::new(
        s.points
            .iter()
            .map(|p| p.quality)
            .chain(s.references.iter().map(|r| r.quality)),
        Fit::proportion(0.05),
        PLOT.bottom,
        PLOT.top,
    );
    let px = |ms: f64| x.at(ms * unit.per_ms);
    let max_bytes = s.points.iter().map(|p| p.bytes).max().unwrap_or(1).max(1) as f64;
    let radius = |b: u64| (R_MAX * (b as f64 / max_bytes).sqrt()).max(R_MIN);
    let mut front: Vec<&Point> = s.points.iter().filter(|p| p.front).collect();
    front.sort_by(|a, b| a.p50_ms.total_cmp(&b.p50_ms));
    let path: Vec<String> = front
        .iter()
        .map(|p| format!("{:.1},{:.1}", px(p.p50_ms), y.at(p.quality)))
        .collect();
    let names: Vec<String> = s
        .references
        .iter()
        .map(|r| match r.role {
            Role::Teacher => format!("{} (teacher)", r.name),
            Role::Baseline => format!("{} (baseline)", r.name),
        })
        .chain(s.points.iter().map(|p| p.name.clone()))
        .collect();
    let marks: Vec<(f64, f64, f64)> = s
        .references
        .iter()
        .map(|r| (px(r.p50_ms), y.at(r.quality), 6.0))
        .chain(
            s.points
                .iter()
                .map(|p| (px(p.p50_ms), y.at(p.quality), radius(p.bytes))),
        )
        .collect();
    let labels: Vec<Label<'_>> = marks
        .iter()
        .zip(&names)
        .map(|(&(x, y, r), text)| Label { x, y, r, text })
        .collect();
    let placed = place(
        &labels,
        Area {
            x0: PLOT.left + 2.0,
            x1: PLOT.right,
            y0: PLOT.top,
            y1: PLOT.bottom,
        },
    );
    let q = s.quality;
    let u = unit.name;
    let time = |ms: f64| significant(ms * unit.per_ms);
    let span = |ci: [f64; 2]| format!("[{}, {}]", time(ci[0]), time(ci[1]));
    html! {
        svg class="chart scatter" viewBox=(format!("0 0 {W} {H}")) role="img" aria-label=(s.summary)
            data-x-lo-ms=(x.lo / unit.per_ms) data-x-hi-ms=(x.hi / unit.per_ms) {
            title { (s.summary) }
            (frame(&PLOT, &x, &y, None, &format!("p50 latency ({u})"), q))
            @if path.len() > 1 {
                polyline class="front-line" points=(path.join(" ")) {}
            }
            @for (p, (cx, cy, r)) in s.points.iter().zip(&marks[s.references.len()..]) {
                line class="whisker" x1=(format!("{:.1}", px(p.p50_ci_ms[0]))) x2=(format!("{:.1}", px(p.p50_ci_ms[1])))
                    y1=(format!("{cy:.1}")) y2=(format!("{cy:.1}")) {}
                circle class=(if p.front { "marker front" } else { "marker" }) data-model=(p.name)
                    cx=(format!("{cx:.1}")) cy=(format!("{cy:.1}")) r=(format!("{r:.1}")) {
                    title { (format!("{}: {q} {}, p50 {} {u} (95 % interval {} {u}), {}, {}", p.name,
                        significant(p.quality), time(p.p50_ms), span(p.p50_ci_ms), bytes(p.bytes),
                        if p.front { "on the Pareto front" } else { "not on the Pareto front" })) }
                }
            }
            @for (r, (cx, cy, _)) in s.references.iter().zip(&marks) {
                line class="whisker" x1=(format!("{:.1}", px(r.p50_ci_ms[0]))) x2=(format!("{:.1}", px(r.p50_ci_ms[1])))
                    y1=(format!("{cy:.1}")) y2=(format!("{cy:.1}")) {}
                @let tip = format!("{} ({}): {q} {}, p50 {} {u} (95 % interval {} {u})", r.name,
                    if r.role == Role::Teacher { "teacher" } else { "baseline" },
                    significant(r.quality), time(r.p50_ms), span(r.p50_ci_ms));
                (reference_mark(r.role, *cx, *cy, Some(&tip)))
            }
            @for ((p, &(cx, cy, _)), name) in placed.iter().zip(&marks).zip(&names) {
                @if p.moved {
                    line class="leader" x1=(format!("{cx:.1}")) y1=(format!("{cy:.1}"))
                        x2=(format!("{:.1}", p.x)) y2=(format!("{:.1}", p.y - 4.0)) {}
                }
                text class="name" x=(format!("{:.1}", p.x)) y=(format!("{:.1}", p.y)) text-anchor=(p.anchor) { (name) }
            }
            (legend(s, R_MIN.max(radius(s.points.iter().map(|p| p.bytes).min().unwrap_or(1))), R_MAX))
        }
    }
}

/// The teacher as a square, the baseline as a diamond: told apart by
/// shape, not only by colour.
fn reference_mark(role: Role, cx: f64, cy: f64, tip: Option<&str>) -> Markup {
    html! {
        @match role {
            Role::Teacher => rect class="ref teacher" x=(format!("{:.1}", cx - 5.5)) y=(format!("{:.1}", cy - 5.5))
                width="11" height="11" {
                @if let Some(t) = tip { title { (t) } }
            },
            Role::Baseline => polygon class="ref baseline"
                points=(format!("{:.1},{:.1} {:.1},{:.1} {:.1},{:.1} {:.1},{:.1}",
                    cx, cy - 7.0, cx + 7.0, cy, cx, cy + 7.0, cx - 7.0, cy)) {
                @if let Some(t) = tip { title { (t) } }
            },
        }
    }
}

/// A legend entry's mark.
#[derive(Clone, Copy)]
enum Mark {
    Front,
    Other,
    Reference(Role),
}

/// What colour, shape and area mean, in two rows under the plot; each
/// entry starts where the text before it ends (estimated widths).
fn legend(s: &Scatter<'_>, r_small: f64, r_large: f64) -> Markup {
    let (small, large) = (
        s.points.iter().map(|p| p.bytes).min().unwrap_or(0),
        s.points.iter().map(|p| p.bytes).max().unwrap_or(0),
    );
    let row1 = H - 52.0;
    let row2 = H - 22.0;
    let has = |role| s.references.iter().any(|r| r.role == role);
    let mut entries: Vec<(Mark, &str)> = vec![
        (Mark::Front, "on the Pareto front"),
        (Mark::Other, "not on the front"),
    ];
    if has(Role::Teacher) {
        entries.push((Mark::Reference(Role::Teacher), "teacher"));
    }
    if has(Role::Baseline) {
        entries.push((Mark::Reference(Role::Baseline), "baseline"));
    }
    let mut x = PLOT.left;
    let mut placed = Vec::new();
    for (mark, text) in entries {
        placed.push((x, mark, text));
        x += 16.0 + CHAR_W * text.chars().count() as f64 + 14.0;
    }
    let cy = row1 - 4.0;
    html! {
        g class="legend" {
            @for (x, mark, text) in placed {
                @match mark {
                    Mark::Front => circle class="marker front" cx=(x + 6.0) cy=(cy) r="6" {},
                    Mark::Other => circle class="marker" cx=(x + 6.0) cy=(cy) r="6" {},
                    Mark::Reference(role) => (reference_mark(role, x + 6.0, cy, None)),
                }
                text x=(x + 16.0) y=(row1) { (text) }
            }
            text x=(PLOT.left) y=(row2) { "marker area by file size:" }
            circle class="marker sample" cx=(PLOT.left + 160.0) cy=(row2 - 4.0) r=(format!("{r_small:.1}")) {}
            text x=(PLOT.left + 166.0 + r_small) y=(row2) { (bytes(small)) }
            circle class="marker sample" cx=(PLOT.left + 250.0 + r_large) cy=(row2 - 4.0) r=(format!("{r_large:.1}")) {}
            text x=(PLOT.left + 256.0 + 2.0 * r_large) y=(row2) { (bytes(large)) }
            @let wx = PLOT.left + 276.0 + 2.0 * r_large + CHAR_W * bytes(large).chars().count() as f64;
            line class="whisker" x1=(wx) x2=(wx + 14.0) y1=(row2 - 4.0) y2=(row2 - 4.0) {}
            text x=(wx + 18.0) y=(row2) { "95 % interval of p50" }
        }
    }
}
