//! One project: the student in production (its baseline) now and before,
//! a form to set two of its evaluations side by side, and its evaluations.

use maud::{Markup, html};

use super::format::{evaluation_href, id_text, project_href, rfc3339, short_commit, when};
use super::layout::page;
use super::list::rows_table;
use crate::service::ListView;
use crate::store::{BaselineRecord, EvaluationRow, Project, Status};

fn set_by(b: &BaselineRecord) -> Markup {
    html! {
        @match &b.set_by {
            Some(name) => (name),
            None => span.none title="access control was off, so no token named who set it" { "not recorded (access off)" },
        }
    }
}

fn from_evaluation(b: &BaselineRecord) -> Markup {
    html! {
        @match &b.evaluation {
            Some(e) => a href=(evaluation_href(e)) { (id_text(e)) },
            None => span.none { "set directly, from no evaluation" },
        }
    }
}

fn baseline_now(p: &Project) -> Markup {
    html! {
        @match &p.summary.baseline {
            None => p #baseline-now { "No baseline yet. A maintainer sets one with "
                code { "PUT /v1/projects/" (p.summary.name) "/baseline" } "." },
            Some(b) => dl.facts #baseline-now {
                dt { "Model" } dd { strong { (b.model.name) } " " code.id title=(b.model.sha256) { (b.model.sha256.get(..12).unwrap_or(&b.model.sha256)) "…" } }
                dt { "Since" } dd title=(rfc3339(b.set_at)) { (when(b.set_at)) }
                dt { "Set by" } dd { (set_by(b)) }
                dt { "From evaluation" } dd { (from_evaluation(b)) }
            },
        }
    }
}

fn history(p: &Project) -> Markup {
    html! {
        @if p.baseline_history.is_empty() {
            p { "None." }
        } @else {
            div.scroll { table #baseline-history {
                caption { "Every baseline the project had, newest first" }
                thead { tr { th scope="col" { "Model" } th scope="col" { "Since" } th scope="col" { "Set by" } th scope="col" { "From evaluation" } } }
                tbody { @for (i, b) in p.baseline_history.iter().enumerate() {
                    tr.baseline data-model=(b.model.id) {
                        td { (b.model.name) @if i == 0 { " " span.tag { "current" } } }
                        td title=(rfc3339(b.set_at)) { (when(b.set_at)) }
                        td { (set_by(b)) }
                        td { (from_evaluation(b)) }
                    }
                } }
            } }
        }
    }
}

/// An evaluation as a menu entry: when, commit and verdict, so that two
/// runs can be told apart without opening them.
fn choice(r: &EvaluationRow) -> String {
    let mut s = format!("{} · …{}", when(r.created_at), &r.id.to_string()[28..]);
    if let Some(c) = &r.commit {
        s.push_str(&format!(" · {}", short_commit(c)));
    }
    match r.verdict {
        Some(v) => s.push_str(&format!(" · {}", v.as_str())),
        None => s.push_str(&format!(" · {}", r.status.as_str())),
    }
    s
}

fn compare_form(rows: &[EvaluationRow]) -> Markup {
    let done: Vec<&EvaluationRow> = rows
        .iter()
        .filter(|r| r.status == Status::Succeeded)
        .collect();
    html! {
        @if done.len() < 2 {
            p { "Two succeeded evaluations are needed to compare; this project has "
                (done.len()) " on this page." }
        } @else {
            form.filters #compare-form method="get" action="/compare" aria-label="compare two evaluations" {
                label { "Earlier (A)"
                    select name="a" id="compare-a" {
                        @for (i, r) in done.iter().enumerate() {
                            option value=(r.id) selected[i == 1] { (choice(r)) }
                        }
                    }
                }
                label { "Later (B)"
                    select name="b" id="compare-b" {
                        @for (i, r) in done.iter().enumerate() {
                            option value=(r.id) selected[i == 0] { (choice(r)) }
                        }
                    }
                }
                button type="submit" id="compare" { "Compare" }
            }
        }
    }
}

pub(super) fn render(view: &ListView) -> Markup {
    let Some(p) = &view.project else {
        return html! {};
    };
    let name = &p.summary.name;
    let running = view
        .rows
        .items
        .iter()
        .any(|r| matches!(r.status, Status::Running | Status::Queued));
    page(
        &format!("Project {name}"),
        running,
        html! {
            h1 { "Project " (name) }
            p { (p.summary.evaluations) " evaluations"
                @if let Some(t) = p.summary.last_evaluation_at { ", the latest " span title=(rfc3339(t)) { (when(t)) } } "." }
            h2 { "Baseline: the student in production" }
            (baseline_now(p))
            h3 { "Baseline history" }
            (history(p))
            h2 { "Compare two evaluations" }
            (compare_form(&view.rows.items))
            h2 { "Evaluations of this project" }
            (rows_table(&view.rows.items, "Newest first"))
            @if let Some(cursor) = &view.rows.next_cursor {
                p.pager { a href=(format!("{}?cursor={cursor}", project_href(name))) rel="next" { "Older evaluations →" } }
            }
        },
    )
}
