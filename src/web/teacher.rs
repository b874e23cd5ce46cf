//! One teacher: whether new candidates improve, one small pair of trends
//! per project and evaluation set (figures on two sets are not one
//! series), and every evaluation against it.

use maud::{Markup, html};

use super::charts::{Trend, TrendMark, trend};
use super::format::{
    TimeUnit, bytes, evaluation_href, project_link, short_commit, short_id, short_when, when,
};
use super::layout::page;
use super::list::rows_table;
use crate::report::Verdict;
use crate::report::numbers::significant;
use crate::service::TeacherView;
use crate::store::{Status, TrendPoint};

/// The x tick of one evaluation: its commit when CI tagged one, else when.
fn tick(p: &TrendPoint) -> String {
    match &p.commit {
        Some(c) => short_commit(c),
        None => short_when(p.created_at),
    }
}

fn marks(
    points: &[&TrendPoint],
    value: impl Fn(&TrendPoint) -> f64,
    figure: &str,
) -> Vec<TrendMark> {
    points
        .iter()
        .map(|p| {
            let v = value(p);
            let go = p.verdict == Verdict::Go;
            TrendMark {
                tick: tick(p),
                title: format!(
                    "{}{}, {}: {} — {figure} {}, {}",
                    p.commit
                        .as_deref()
                        .map(|c| format!("commit {}, ", short_commit(c)))
                        .unwrap_or_default(),
                    when(p.created_at),
                    short_id(&p.evaluation),
                    p.model,
                    significant(v),
                    if go {
                        "go (recommended)"
                    } else {
                        "no-go (first-ranked, failed a gate)"
                    }
                ),
                value: v,
                go,
                href: evaluation_href(&p.evaluation),
                evaluation: p.evaluation.to_string(),
            }
        })
        .collect()
}

fn group(points: &[&TrendPoint]) -> Markup {
    let first = points[0];
    let set = first
        .dataset_name
        .clone()
        .unwrap_or_else(|| "set".to_string());
    let x_label = if points.iter().all(|p| p.commit.is_some()) {
        "commit, oldest to newest"
    } else {
        "commit or date (UTC), oldest to newest"
    };
    let unit = TimeUnit::for_ms(points.iter().map(|p| p.p90_ms).fold(0.0, f64::max));
    let agreement = marks(points, |p| p.agreement, "agreement");
    let p90 = marks(
        points,
        |p| p.p90_ms * unit.per_ms,
        &format!("p90 ({})", unit.name),
    );
    let nogo = points.iter().filter(|p| p.verdict == Verdict::NoGo).count();
    html! {
        section.trend-group data-project=(first.project) data-dataset=(first.dataset) {
            h3 { "Project " (project_link(&first.project)) " · set " strong { (set) } " " code.id title=(first.dataset.to_string()) { "…" (short_id(&first.dataset)) } }
            p.note { (points.len()) @if points.len() == 1 { " succeeded evaluation" } @else { " succeeded evaluations" }
                @if nogo > 0 { ", " (nogo) " of them no-go (drawn as ✕)" } "." }
            div.charts {
                (trend(&Trend {
                    marks: &agreement,
                    y_label: "agreement",
                    proportion: true,
                    figure: "agreement",
                    x_label,
                    summary: &format!("Agreement of the first-ranked candidate on set {set} of project {}, evaluation by evaluation", first.project),
                }))
                (trend(&Trend {
                    marks: &p90,
                    y_label: &format!("p90 latency ({})", unit.name),
                    proportion: false,
                    figure: "p90",
                    x_label,
                    summary: &format!("p90 latency of the first-ranked candidate on set {set} of project {}, evaluation by evaluation", first.project),
                }))
            }
        }
    }
}

pub(super) fn render(v: &TeacherView) -> Markup {
    let t = &v.teacher;
    let running = v
        .rows
        .items
        .iter()
        .any(|r| matches!(r.status, Status::Running | Status::Queued));
    // The store orders by (project, set, time): consecutive runs of equal
    // keys are one group.
    let all: Vec<&TrendPoint> = v.trend.iter().collect();
    let groups: Vec<&[&TrendPoint]> = all
        .chunk_by(|a, b| a.project == b.project && a.dataset == b.dataset)
        .collect();
    page(
        &format!("Teacher {}", t.name),
        running,
        html! {
            h1 { "Teacher " (t.name) }
            dl.facts {
                dt { "SHA-256" } dd { code { (t.sha256) } }
                dt { "Size" } dd { (bytes(t.bytes)) ", " (t.info.parameters) " parameters" }
                dt { "Producer" } dd { (t.info.producer) }
            }
            h2 { "The first-ranked candidate over time" }
            @if groups.is_empty() {
                p { "No evaluation against this teacher has succeeded yet." }
            } @else {
                p.note { "One pair of charts per project and evaluation set. A filled dot is a go run and its \
                    recommended candidate; a ✕ is a no-go run and its first-ranked candidate, which failed a gate. \
                    Each mark links to its evaluation." }
                @for g in &groups { (group(g)) }
            }
            h2 { "Evaluations against this teacher" }
            (rows_table(&v.rows.items, "Newest first"))
            @if let Some(cursor) = &v.rows.next_cursor {
                p.pager { a href=(format!("/teachers/{}?cursor={cursor}", t.id)) rel="next" { "Older evaluations →" } }
            }
        },
    )
}
