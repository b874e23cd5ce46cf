//! The top of an evaluation's page: what it runs (teacher, students,
//! baseline, set, gates), where it stands, the recommended candidate, and
//! while it runs, its progress and a way to cancel it.

use maud::{Markup, html};

use crate::engine::gates::Gates;
use crate::report::numbers::significant;
use crate::service::{EvaluationView, ReportView};
use crate::store::Status;
use crate::web::format::{bytes, project_link, rfc3339, when};
use crate::web::list::meter;

/// The gates as thresholds in words, and the confidence they judge at.
pub(super) fn gate_list(g: &Gates) -> Markup {
    html! {
        @if g.is_empty() {
            "none: every candidate passes, and the verdict is go"
        } @else {
            ul.gates {
                @for (gate, v) in g.thresholds() {
                    li { code { (gate.as_str()) } (if gate.is_floor() { " ≥ " } else { " ≤ " }) (significant(v)) }
                }
            }
            @match g.confidence {
                Some(c) => span.note { "judged at the cautious end of each interval, at confidence " (c) },
                None => span.note { "judged on the estimates" },
            }
        }
    }
}

fn set_facts(v: &EvaluationView) -> Markup {
    html! {
        @match &v.dataset {
            Some(d) => {
                strong { (d.name) } " · " (d.samples) " samples"
                @if !d.has_labels { " · no labels (no accuracy figures)" }
                @if let Some(c) = &d.class_names { " · " (c.len()) " named classes" }
                @if let Some(s) = d.slice_count { " · " (s) " slices" }
            }
            None => { "set " code { (v.record.dataset) } }
        }
    }
}

fn students(v: &EvaluationView) -> Markup {
    // The report's names are the ones scored; before it exists, the records'.
    let names: Vec<&str> = match &v.report {
        ReportView::Shown(r) => r.candidates.iter().map(|c| c.model.name.as_str()).collect(),
        _ => v.students.iter().map(|s| s.name.as_str()).collect(),
    };
    html! {
        ul.inline #students { @for n in names { li { (n) } } }
    }
}

fn recommended(v: &EvaluationView) -> Markup {
    let Some(r) = v.report.shown() else {
        return html! {};
    };
    let chosen = r
        .candidates
        .iter()
        .find(|c| Some(c.model.id) == r.recommended);
    html! {
        dt { "Recommended" }
        dd #recommended {
            @match chosen {
                Some(c) => {
                    strong { (c.model.name) } " — ranked first"
                    @if c.gates.checks.is_empty() { ", no gates set" }
                    @else { ", passes all " (c.gates.checks.len()) " gates" }
                }
                None => "none: no candidate passes every gate",
            }
        }
    }
}

fn status(v: &EvaluationView) -> Markup {
    let rec = &v.record;
    html! {
        dd #status data-status=(rec.status.as_str()) {
            span class=(format!("status-{}", rec.status.as_str())) { (rec.status.as_str()) }
            @match rec.status {
                Status::Running => {
                    " — " (rec.progress.stage.as_str())
                    @if rec.progress.total > 0 {
                        " " (rec.progress.done) "/" (rec.progress.total) " "
                        (meter(rec.progress.done, rec.progress.total, Some("progress")))
                    }
                }
                Status::Queued => " — waiting for a worker",
                _ => {}
            }
        }
    }
}

/// The cancel control: a plain form, so that it works without script.
fn cancel_form(v: &EvaluationView) -> Markup {
    html! {
        form.cancel #cancel-form method="post" action=(format!("/evaluations/{}/cancel", v.record.id)) {
            button.danger type="submit" id="cancel" { "Cancel this evaluation" }
            " " span.note { "Stops the run; no report is written." }
        }
    }
}

pub(super) fn summary(v: &EvaluationView) -> Markup {
    let rec = &v.record;
    let report_exists = !matches!(v.report, ReportView::Missing);
    let gates = match v.report.shown() {
        Some(r) => &r.settings.gates,
        None => &rec.request.settings.gates,
    };
    html! {
        dl.facts #summary {
            dt { "Project" } dd { (project_link(&rec.project)) }
            dt { "Teacher" } dd #teacher { a href=(format!("/teachers/{}", v.teacher.id)) { (v.teacher.name) } " · " (bytes(v.teacher.bytes)) }
            dt { "Students" } dd { (students(v)) }
            dt { "Baseline" } dd #baseline {
                @match &v.baseline {
                    Some(b) => { strong { (b.name) } " — the student in production, run beside the candidates" }
                    None => "none",
                }
            }
            dt { "Evaluation set" } dd #set { (set_facts(v)) }
            dt { "Gates" } dd #gates { (gate_list(gates)) }
            (recommended(v))
            dt { "Status" } (status(v))
            dt { "Created" } dd title=(rfc3339(rec.created_at)) { (when(rec.created_at))
                @if let Some(by) = &rec.created_by { " by " (by) } }
            @if let Some(f) = rec.finished_at { dt { "Finished" } dd title=(rfc3339(f)) { (when(f))
                @if let Some(by) = &rec.canceled_by { ", canceled by " (by) } } }
            @if !rec.tags.is_empty() {
                dt { "Tags" } dd { @for (k, t) in &rec.tags { code { (k) ":" (t) } " " } }
            }
            dt { "Full data" } dd {
                @if report_exists {
                    a href=(format!("/v1/evaluations/{}/report", rec.id)) { "JSON report" } " · "
                } @else if rec.status.is_finished() {
                    span.note { "no report: the evaluation " (rec.status.as_str()) } " · "
                } @else {
                    span.note { "the JSON report exists once the evaluation has succeeded" } " · "
                }
                a href=(format!("/v1/evaluations/{}", rec.id)) { "JSON status" }
            }
        }
        @if matches!(rec.status, Status::Queued | Status::Running) { (cancel_form(v)) }
    }
}
