//! One teacher: every evaluation against it, and whether new candidates improve.

use maud::{Markup, html};

use super::charts::trend;
use super::format::{bytes, short_id, when};
use super::layout::page;
use super::list::rows_table;
use crate::service::TeacherView;
use crate::store::Status;

pub(super) fn render(v: &TeacherView) -> Markup {
    let t = &v.teacher;
    let running = v
        .rows
        .items
        .iter()
        .any(|r| matches!(r.status, Status::Running | Status::Queued));
    let label = |p: &crate::store::TrendPoint| {
        format!(
            "{} ({}, {})",
            p.model,
            short_id(&p.evaluation),
            when(p.created_at)
        )
    };
    let agreement: Vec<(String, f64)> = v.trend.iter().map(|p| (label(p), p.agreement)).collect();
    let p90: Vec<(String, f64)> = v.trend.iter().map(|p| (label(p), p.p90_ms)).collect();
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
            h2 { "Best passing candidate over time" }
            @if v.trend.is_empty() {
                p { "No evaluation against this teacher has a candidate that passes every gate yet." }
            } @else {
                div.charts {
                    (trend(&agreement, "agreement", "Agreement of the recommended candidate, evaluation by evaluation"))
                    (trend(&p90, "p90 latency (ms)", "p90 latency of the recommended candidate, evaluation by evaluation"))
                }
            }
            h2 { "Evaluations against this teacher" }
            (rows_table(&v.rows.items, "Newest first"))
            @if let Some(cursor) = &v.rows.next_cursor {
                p.pager { a href=(format!("/teachers/{}?cursor={cursor}", t.id)) rel="next" { "Older evaluations →" } }
            }
        },
    )
}
