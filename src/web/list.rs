//! The evaluations page: newest first, paged, filtered.

use maud::{Markup, html};

use super::format::{rfc3339, short_id, when};
use super::layout::{page, verdict_badge};
use crate::service::ListView;
use crate::store::{EvaluationRow, Status};

/// Filters as given, for the form and the pager links.
#[derive(Default)]
pub(super) struct Filters {
    pub project: Option<String>,
    pub teacher: Option<String>,
    pub verdict: Option<String>,
    pub tag: Option<String>,
}

impl Filters {
    fn query(&self) -> String {
        let pairs: Vec<(&str, &String)> = [
            ("project", &self.project),
            ("teacher", &self.teacher),
            ("verdict", &self.verdict),
            ("tag", &self.tag),
        ]
        .into_iter()
        .filter_map(|(k, v)| v.as_ref().map(|v| (k, v)))
        .collect();
        serde_urlencoded::to_string(pairs).unwrap_or_default()
    }
}

pub(super) fn status_cell(r: &EvaluationRow) -> Markup {
    let class = format!("status-{}", r.status.as_str());
    html! {
        @if r.status == Status::Running {
            span class=(class) { "running" }
            @if r.total > 0 {
                " — " (r.stage.as_str()) " " (r.done) "/" (r.total) " "
                progress value=(r.done) max=(r.total) aria-label="progress" {}
            } @else {
                " — " (r.stage.as_str())
            }
        } @else {
            span class=(class) { (r.status.as_str()) }
        }
    }
}

pub(super) fn rows_table(rows: &[EvaluationRow], caption: &str) -> Markup {
    html! {
        div.scroll {
            table #evaluations {
                caption { (caption) }
                thead { tr {
                    th scope="col" { "When" } th scope="col" { "Evaluation" } th scope="col" { "Project" }
                    th scope="col" { "Teacher" } th scope="col" class="num" { "Candidates" }
                    th scope="col" { "Recommended" } th scope="col" { "Verdict" } th scope="col" { "Status" }
                } }
                tbody {
                    @if rows.is_empty() {
                        tr { td colspan="8" { "No evaluations match." } }
                    }
                    @for r in rows {
                        tr.row data-id=(r.id) data-status=(r.status.as_str()) {
                            td title=(rfc3339(r.created_at)) { (when(r.created_at)) }
                            td { a href=(format!("/evaluations/{}", r.id)) { (short_id(&r.id)) } }
                            td { (r.project) }
                            td { a href=(format!("/teachers/{}", r.teacher)) { (r.teacher_name) } }
                            td.num { (r.candidates) }
                            td { @match &r.recommended { Some((_, name)) => (name), None => "—" } }
                            td { (verdict_badge(r.verdict)) }
                            td { (status_cell(r)) }
                        }
                    }
                }
            }
        }
    }
}

pub(super) fn render(view: &ListView, filters: &Filters) -> Markup {
    let running = view
        .rows
        .items
        .iter()
        .any(|r| matches!(r.status, Status::Running | Status::Queued));
    let selected = |current: &Option<String>, value: &str| current.as_deref() == Some(value);
    page(
        "Evaluations",
        running,
        html! {
            h1 { "Evaluations" }
            form.filters method="get" action="/" aria-label="filters" {
                label { "Project"
                    select name="project" id="filter-project" {
                        option value="" { "any" }
                        @for p in &view.projects { option value=(p) selected[selected(&filters.project, p)] { (p) } }
                    }
                }
                label { "Teacher"
                    select name="teacher" id="filter-teacher" {
                        option value="" { "any" }
                        @for (id, name) in &view.teachers {
                            option value=(id) selected[selected(&filters.teacher, &id.to_string())] { (name) " (" (short_id(id)) ")" }
                        }
                    }
                }
                label { "Verdict"
                    select name="verdict" id="filter-verdict" {
                        option value="" { "any" }
                        option value="go" selected[selected(&filters.verdict, "go")] { "go" }
                        option value="no-go" selected[selected(&filters.verdict, "no-go")] { "no-go" }
                    }
                }
                label { "Tag (key:value)"
                    input type="text" name="tag" id="filter-tag" placeholder="branch:main" value=(filters.tag.clone().unwrap_or_default());
                }
                button type="submit" id="apply-filters" { "Apply" }
                a href="/" { "Clear" }
            }
            (rows_table(&view.rows.items, "Newest first"))
            @if let Some(cursor) = &view.rows.next_cursor {
                p.pager { a href=(format!("/?{}&cursor={cursor}", filters.query())) rel="next" { "Older evaluations →" } }
            }
        },
    )
}
