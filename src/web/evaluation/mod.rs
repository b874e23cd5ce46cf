//! One evaluation's page: what it runs and where it stands, then (once a
//! report exists) the ranked candidates beside the teacher and baseline,
//! the comparison with the baseline, the quality/latency scatter, slices,
//! per-class figures of any model, and the settings.

mod candidates;
mod classes;
mod quality;
mod slices;
mod summary;
mod versus;

use maud::{Markup, html};
use uuid::Uuid;

use super::format::short_id;
use super::layout::{page, verdict_badge};
use crate::engine::settings::RankBy;
use crate::report::Report;
use crate::service::{EvaluationView, ReportView};
use crate::store::Status;

pub(super) fn rank_name(r: RankBy) -> &'static str {
    match r {
        RankBy::Agreement => "agreement",
        RankBy::Kl => "KL",
        RankBy::Top1 => "top-1",
        RankBy::P50Ms => "p50 latency",
        RankBy::Bytes => "bytes",
    }
}

fn settings(r: &Report) -> Markup {
    let s = &r.settings;
    html! {
        dl.facts #settings {
            dt { "Temperature" } dd { (s.temperature) }
            dt { "Alpha" } dd { (s.alpha) }
            dt { "Batch size" } dd { (s.batch_size) }
            dt { "Latency" } dd { (s.latency.warmup) " warm-up runs, " (s.latency.iterations)
                " rounds, batch 1, one thread; speeds within " (crate::report::numbers::significant(s.latency.tolerance * 100.0)) " % count as equal" }
            dt { "Ranked by" } dd { (rank_name(s.rank_by)) }
            dt { "Gates" } dd { (summary::gate_list(&s.gates)) }
            dt { "Scored output" } dd { (r.teacher.output) " of the teacher; "
                @for c in &r.candidates { (c.model.name) ": " (c.output) "; " } }
            dt { "Measured on" } dd { (r.environment.cpu) ", " (r.environment.logical_cores) " cores; "
                (r.environment.engine.name) " " (r.environment.engine.version) "; bulk pass on "
                (r.environment.threads.bulk) " threads" }
        }
    }
}

/// What the engine says about how some models ran (e.g. float emulation of
/// quantized operators), next to the figures it qualifies.
fn model_notes(r: &Report) -> Markup {
    let notes = r.model_notes();
    html! {
        @if !notes.is_empty() {
            ul #model-notes {
                @for (model, note) in notes {
                    li { strong { (model) } ": " (note) }
                }
            }
        }
    }
}

fn report_sections(r: &Report, classes: Option<Uuid>) -> Markup {
    html! {
        h2 { "Candidates" }
        (candidates::table(r))
        (model_notes(r))
        (versus::section(r))
        h2 { "Quality against latency" }
        div.charts { (quality::scatter_of(r)) }
        (slices::section(r))
        (classes::section(r, classes))
        h2 { "Settings" }
        (settings(r))
    }
}

/// `classes`: whose per-class figures to show (a model id from the link).
pub(super) fn render(v: &EvaluationView, classes: Option<Uuid>) -> Markup {
    let rec = &v.record;
    let running = matches!(rec.status, Status::Running | Status::Queued);
    let title = format!("Evaluation {}", short_id(&rec.id));
    page(
        &title,
        running,
        html! {
            h1 { (title) @if rec.verdict.is_some() { " " (verdict_badge(rec.verdict)) } }
            (summary::summary(v))
            @if let Some(err) = &rec.error {
                h2 { "Why it failed" }
                p.fail #error { (err.detail) }
            }
            @match &v.report {
                ReportView::Unreadable => p #report-unreadable { "This report was written by an earlier version of \
                    Proctor, whose shape this page does not read; every figure is in its JSON report." },
                ReportView::Shown(r) => (report_sections(r, classes)),
                ReportView::Missing => {},
            }
        },
    )
}
