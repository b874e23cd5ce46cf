//! The evaluations page: newest first, paged, filtered; its table is
//! shared by the project and teacher pages.

use maud::{Markup, html};

use super::format::{
    evaluation_href, id_text, project_link, rfc3339, short_commit, short_id, when,
};
use super::layout::{page, verdict_badge};
use crate::service::ListView;
use crate::store::{EvaluationRow, Status};

/// Filters as given, for the form and the pager links.
#[derive(Default)]
pub(super) struct Filters {
    pub project: Option<String>,
    pub teacher: Option<String>,
    pub status: Option<String>,
    pub verdict: Option<String>,
    pub tag: Option<String>,
}

impl Filters {
    pub(super) fn query(&self) -> String {
        let pairs: Vec<(&str, &String)> = [
            ("project", &self.project),
            ("teacher", &self.teacher),
            ("status", &self.status),
            ("verdict", &self.verdict),
            ("tag", &self.tag),
        ]
        .into_iter()
        .filter_map(|(k, v)| v.as_ref().map(|v| (k, v)))
        .collect();
        serde_urlencoded::to_string(pairs).unwrap_or_default()
    }
}

/// A progress bar of our own: a track and a fill drawn as SVG, with the
/// figures for assistive technology. The browser's `<progress>` looks
/// different on every system, and the pages' content security policy
/// allows no inline style to size a fill.
pub(super) fn meter(done: u64, total: u64, id: Option<&str>) -> Markup {
    let share = if total > 0 {
        done as f64 / total as f64
    } else {
        0.0
    };
    html! {
        svg.meter id=[id] role="progressbar" aria-label="progress" aria-valuemin="0"
            aria-valuemax=(total) aria-valuenow=(done) viewBox="0 0 100 10" preserveAspectRatio="none" {
            rect.track width="100" height="10" {}
            rect.fill width=(format!("{:.1}", 100.0 * share.clamp(0.0, 1.0))) height="10" {}
        }
    }
}

pub(super) fn status_cell(r: &EvaluationRow) -> Markup {
    let class = format!("status-{}", r.status.as_str());
    html! {
        span class=(class) { (r.status.as_str()) }
        @if r.status == Status::Running {
            br;
            span.stage { (r.stage.as_str()) @if r.total > 0 { " " (r.done) "/" (r.total) } }
            @if r.total > 0 { " " (meter(r.done, r.total, None)) }
        }
    }
}

fn tags_cell(r: &EvaluationRow) -> Markup {
    html! {
        @match &r.commit {
            Some(c) => code.commit title=(c) { (short_commit(c)) },
            None => span.none { "—" },
        }
        @if let Some(b) = &r.branch { br; span.branch { (b) } }
    }
}

pub(super) fn rows_table(rows: &[EvaluationRow], caption: &str) -> Markup {
    html! {
        div.scroll {
            table #evaluations.evaluations {
                caption { (caption) }
                thead { tr {
                    th scope="col" { "When" } th scope="col" { "Evaluation" } th scope="col" { "Project" }
                    th scope="col" { "Commit / branch" } th scope="col" { "Set" }
                    th scope="col" { "Teacher" } th scope="col" class="num" { "Candidates" }
                    th scope="col" { "Recommended" } th scope="col" { "Verdict" } th scope="col" { "Status" }
                } }
                tbody {
                    @if rows.is_empty() {
                        tr { td colspan="10" { "No evaluations match." } }
                    }
                    @for r in rows {
                        tr.row data-id=(r.id) data-status=(r.status.as_str()) {
                            td.when title=(rfc3339(r.created_at)) { (when(r.created_at)) }
                            td { a href=(evaluation_href(&r.id)) { (id_text(&r.id)) } }
                            td.name { (project_link(&r.project)) }
                            td.tags { (tags_cell(r)) }
                            td.name.set title=(r.dataset.to_string()) {
                                @match &r.dataset_name { Some(n) => (n), None => { "set " (short_id(&r.dataset)) } }
                            }
                            td.name { a href=(format!("/teachers/{}", r.teacher)) { (r.teacher_name) } }
                            td.num { (r.candidates) }
                            td.name { @match &r.recommended { Some((_, name)) => (name), None => "—" } }
                            td { (verdict_badge(r.verdict)) }
                            td.status { (status_cell(r)) }
                        }
                    }
                }
            }
        }
    }
}

fn select_filter(
    label: &str,
    name: &str,
    current: &Option<String>,
    options: &[(String, String)],
) -> Markup {
    html! {
        label { (label)
            select name=(name) id=(format!("filter-{name}")) {
                option value="" { "any" }
                // A filter from a link may name an entry the capped menu
                // left out; it stays visible and selected.
                @if let Some(c) = current.as_deref().filter(|c| !options.iter().any(|(v, _)| v == c)) {
                    option value=(c) selected { (c) }
                }
                @for (value, text) in options {
                    option value=(value) selected[current.as_deref() == Some(value.as_str())] { (text) }
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
    let projects: Vec<(String, String)> = view
        .projects
        .iter()
        .map(|p| (p.clone(), p.clone()))
        .collect();
    let teachers: Vec<(String, String)> = view
        .teachers
        .iter()
        .map(|(id, name)| (id.to_string(), format!("{name} (…{})", short_id(id))))
        .collect();
    let statuses: Vec<(String, String)> = Status::ALL
        .iter()
        .map(|s| (s.as_str().to_string(), s.as_str().to_string()))
        .collect();
    let verdicts: Vec<(String, String)> = ["go", "no-go"]
        .iter()
        .map(|v| (v.to_string(), v.to_string()))
        .collect();
    page(
        "Evaluations",
        running,
        html! {
            h1 { "Evaluations" }
            form.filters method="get" action="/" aria-label="filters" {
                (select_filter("Project", "project", &filters.project, &projects))
                (select_filter("Teacher", "teacher", &filters.teacher, &teachers))
                (select_filter("Status", "status", &filters.status, &statuses))
                (select_filter("Verdict", "verdict", &filters.verdict, &verdicts))
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
