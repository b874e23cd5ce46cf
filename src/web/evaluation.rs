//! One evaluation: settings, the ranked candidates against the teacher, the
//! quality/latency scatter, and where the recommended candidate disagrees.

use maud::{Markup, html};

use super::charts::{Point, scatter};
use super::format::{
    bytes, exact, interval, ms, ms_interval, prop, ratio, rfc3339, short_id, signed, when,
};
use super::layout::{page, verdict_badge};
use crate::engine::settings::RankBy;
use crate::report::numbers::significant;
use crate::report::{Candidate, Report};
use crate::service::{EvaluationView, ReportView};
use crate::store::Status;

/// A number rounded for reading with its exact value on hover.
fn num(text: String, value: f64) -> Markup {
    html! { span title=(exact(value)) { (text) } }
}

fn gates_cell(c: &Candidate, confidence: Option<f64>) -> Markup {
    html! {
        @if c.gates.checks.is_empty() {
            span { "no gates" }
        } @else if c.gates.passed {
            span.pass { "passes all " (c.gates.checks.len()) }
        } @else {
            ul.fail {
                @for k in c.gates.checks.iter().filter(|k| !k.passed) {
                    li {
                        "fails " (k.gate)
                        @if let Some(at) = &k.at { " at " (at) }
                        ": "
                        @match (&k.reason, k.judged) {
                            (Some(r), _) => (r),
                            (None, Some(j)) => {
                                "judged " (num(significant(j), j))
                                " (" (k.gate.judged_as(confidence)) "), needs "
                                (k.gate.passes_when()) " " (significant(k.threshold))
                            }
                            (None, None) => "no figure",
                        }
                    }
                }
            }
        }
    }
}

fn candidates_table(r: &Report) -> Markup {
    let t = &r.teacher;
    html! {
        div.scroll {
            table #candidates {
                caption { "Candidates, ranked (passing every gate first, then by " (rank_name(r.settings.rank_by)) ")" }
                thead { tr {
                    th scope="col" { "Rank" } th scope="col" { "Model" }
                    th scope="col" class="num" { "Agreement" } th scope="col" class="num" { "KL (T)" }
                    th scope="col" class="num" { "Top-1" } th scope="col" class="num" { "Δ top-1" }
                    th scope="col" class="num" { "p90 ms" } th scope="col" class="num" { "Speedup" }
                    th scope="col" class="num" { "Size ratio" } th scope="col" { "Gates" }
                } }
                tbody {
                    tr.reference {
                        td { "ref" }
                        td { (t.model.name) " (teacher)" }
                        td.num { "—" } td.num { "—" }
                        td.num { @match &t.accuracy {
                            Some(a) => { (num(prop(a.top1), a.top1)) br; span.ci { (interval(a.top1_ci)) } }
                            None => "—",
                        } }
                        td.num { "—" }
                        td.num { (num(ms(t.latency.p90_ms), t.latency.p90_ms)) br;
                            span.ci { (ms_interval(t.latency.p90_ci_ms)) } }
                        td.num { "1.00×" } td.num { "1.000" } td { "—" }
                    }
                    @for c in &r.candidates {
                        tr.candidate data-model=(c.model.name) {
                            td { (c.rank) @if c.pareto_optimal { " ◆" } }
                            td { (c.model.name) }
                            td.num { (num(prop(c.fidelity.agreement), c.fidelity.agreement)) br;
                                span.ci { (interval(c.fidelity.agreement_ci)) } }
                            td.num { (num(format!("{:.4}", c.fidelity.kl), c.fidelity.kl)) }
                            @match &c.accuracy {
                                Some(a) => {
                                    td.num { (num(prop(a.own.top1), a.own.top1)) br; span.ci { (interval(a.own.top1_ci)) } }
                                    td.num { (num(signed(a.delta), a.delta)) br; span.ci { (interval(a.delta_ci)) } }
                                }
                                None => { td.num { "—" } td.num { "—" } }
                            }
                            td.num { (num(ms(c.latency.own.p90_ms), c.latency.own.p90_ms)) br;
                                span.ci { (ms_interval(c.latency.own.p90_ci_ms)) } }
                            td.num { (num(format!("{}×", significant(c.latency.speedup)), c.latency.speedup)) br;
                                span.ci { (interval(c.latency.speedup_ci)) } }
                            td.num { (num(ratio(c.size.size_ratio), c.size.size_ratio)) }
                            td { (gates_cell(c, r.settings.gates.confidence)) }
                        }
                    }
                }
            }
        }
        p.ci { "◆ on the Pareto front (quality, speed, bytes). Intervals are 95 %: Wilson for proportions, \
            paired Wald for Δ top-1, order statistics for latency and for the per-round speedup over the teacher." }
    }
}

fn rank_name(r: RankBy) -> &'static str {
    match r {
        RankBy::Agreement => "agreement",
        RankBy::Kl => "KL",
        RankBy::Top1 => "top-1",
        RankBy::P50Ms => "p50 latency",
        RankBy::Bytes => "bytes",
    }
}

fn scatter_of(r: &Report) -> Markup {
    let by_top1 = r.settings.rank_by == RankBy::Top1;
    let quality = if by_top1 { "top-1" } else { "agreement" };
    let points: Vec<Point> = r
        .candidates
        .iter()
        .map(|c| Point {
            name: c.model.name.clone(),
            x: c.latency.own.p50_ms,
            x_ci: c.latency.own.p50_ci_ms,
            y: if by_top1 {
                c.accuracy.as_ref().map_or(0.0, |a| a.own.top1)
            } else {
                c.fidelity.agreement
            },
            bytes: c.size.bytes,
            front: c.pareto_optimal,
        })
        .collect();
    let summary = format!(
        "{quality} against p50 latency for {} candidates, with 95 % intervals of p50 as whiskers; marker area by file size; the dashed line joins the Pareto front",
        points.len()
    );
    scatter(&points, "p50 latency (ms)", quality, &summary)
}

fn focus_sections(r: &Report) -> Markup {
    let Some(c) = r
        .candidates
        .iter()
        .find(|c| Some(c.model.id) == r.recommended)
        .or(r.candidates.first())
    else {
        return html! {};
    };
    let label = if Some(c.model.id) == r.recommended {
        "recommended"
    } else {
        "first-ranked"
    };
    html! {
        h2 { "Per-class agreement of " (c.model.name) " (" (label) ")" }
        div.scroll { table #class-agreement {
            caption { "For each class the teacher predicts: how often the student predicts it too" }
            thead { tr { th scope="col" { "Class" } th scope="col" class="num" { "Teacher predictions" } th scope="col" { "Agreement" } } }
            tbody { @for k in &c.fidelity.class_agreement {
                tr {
                    td { (k.class) } td.num { (k.samples) }
                    td { span.bar style=(format!("width: {:.1}px", 120.0 * k.agreement)) {} (num(prop(k.agreement), k.agreement)) }
                }
            } }
        } }
        h2 { "Most frequent disagreements of " (c.model.name) }
        @if c.fidelity.disagreements.is_empty() {
            p { "None: the student's top class is the teacher's on every sample." }
        } @else {
            div.scroll { table #disagreements {
                caption { "Teacher class → student class, most frequent first" }
                thead { tr { th scope="col" class="num" { "Teacher says" } th scope="col" class="num" { "Student says" } th scope="col" class="num" { "Samples" } } }
                tbody { @for d in &c.fidelity.disagreements {
                    tr { td.num { (d.teacher_class) } td.num { (d.student_class) } td.num { (d.count) } }
                } }
            } }
        }
    }
}

fn settings(r: &Report) -> Markup {
    let s = &r.settings;
    html! {
        dl.facts #settings {
            dt { "Temperature" } dd { (s.temperature) }
            dt { "Alpha" } dd { (s.alpha) }
            dt { "Batch size" } dd { (s.batch_size) }
            dt { "Latency" } dd { (s.latency.warmup) " warm-up runs, " (s.latency.iterations) " rounds, batch 1, one thread" }
            dt { "Ranked by" } dd { (rank_name(s.rank_by)) }
            dt { "Gates" } dd {
                @if s.gates.is_empty() { "none" }
                @for (g, v) in s.gates.thresholds() { code { (g.as_str()) " " (v) } " " }
                @if let Some(c) = s.gates.confidence { "(judged at confidence " (c) ")" }
            }
            dt { "Scored output" } dd { (r.teacher.output) " of the teacher; "
                @for c in &r.candidates { (c.model.name) ": " (c.output) "; " } }
            dt { "Measured on" } dd { (r.environment.cpu) ", " (r.environment.logical_cores) " cores; "
                (r.environment.engine.name) " " (r.environment.engine.version) "; bulk pass on "
                (r.environment.threads.bulk) " threads" }
        }
    }
}

pub(super) fn render(v: &EvaluationView) -> Markup {
    let rec = &v.record;
    let running = matches!(rec.status, Status::Running | Status::Queued);
    let title = format!("Evaluation {}", short_id(&rec.id));
    page(
        &title,
        running,
        html! {
            h1 { (title) " " (verdict_badge(rec.verdict)) }
            dl.facts #summary {
                dt { "Project" } dd { (rec.project) }
                dt { "Teacher" } dd { a href=(format!("/teachers/{}", v.teacher.id)) { (v.teacher.name) } " · " (bytes(v.teacher.bytes)) }
                dt { "Status" } dd #status data-status=(rec.status.as_str()) {
                    (rec.status.as_str())
                    @if rec.status == Status::Running && rec.progress.total > 0 {
                        " — " (rec.progress.stage.as_str()) " " (rec.progress.done) "/" (rec.progress.total) " "
                        progress #progress value=(rec.progress.done) max=(rec.progress.total) aria-label="progress" {}
                    }
                }
                dt { "Created" } dd title=(rfc3339(rec.created_at)) { (when(rec.created_at)) }
                @if let Some(f) = rec.finished_at { dt { "Finished" } dd title=(rfc3339(f)) { (when(f)) } }
                @if !rec.tags.is_empty() {
                    dt { "Tags" } dd { @for (k, t) in &rec.tags { code { (k) ":" (t) } " " } }
                }
                dt { "Full data" } dd { a href=(format!("/v1/evaluations/{}/report", rec.id)) { "JSON report" } " · "
                    a href=(format!("/v1/evaluations/{}", rec.id)) { "JSON status" } }
            }
            @if let Some(err) = &rec.error {
                h2 { "Why it failed" }
                p.fail #error { (err.detail) }
            }
            @if let ReportView::Unreadable = &v.report {
                p #report-unreadable { "This report was written by an earlier version of Proctor, whose shape \
                    this page does not read; every figure is in its JSON report." }
            }
            @if let ReportView::Shown(r) = &v.report {
                p { (r.dataset.samples) " samples of " strong { (r.dataset.name) }
                    @if !r.dataset.has_labels { " (no labels: accuracy figures are not available)" } }
                h2 { "Candidates" }
                (candidates_table(r))
                h2 { "Quality against latency" }
                div.charts { (scatter_of(r)) }
                (focus_sections(r))
                h2 { "Settings" }
                (settings(r))
            }
        },
    )
}
