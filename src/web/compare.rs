//! Two evaluations of one project side by side: which candidates each had
//! (matched by model id, then by name), and which figures moved, by how
//! much and in which direction, said in words.

use maud::{Markup, html};

use super::format::{
    bytes, evaluation_href, id_text, ms, project_href, project_link, prop, rfc3339, short_commit,
    when,
};
use super::layout::{page, verdict_badge};
use crate::report::numbers::significant;
use crate::report::{Candidate, Report};
use crate::service::EvaluationView;

/// How a candidate of A was found in B.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Match {
    SameModel,
    /// The same name, another file: a retrained or re-exported student.
    SameName,
    OnlyA,
    OnlyB,
}

impl Match {
    fn words(self) -> &'static str {
        match self {
            Match::SameModel => "the same model file",
            Match::SameName => "the same name, another file",
            Match::OnlyA => "only in A",
            Match::OnlyB => "only in B",
        }
    }
}

struct Pair<'a> {
    a: Option<&'a Candidate>,
    b: Option<&'a Candidate>,
    by: Match,
}

/// A's candidates in rank order with their match in B, then B's
/// candidates that match none of A's.
fn pairs<'a>(a: &'a Report, b: &'a Report) -> Vec<Pair<'a>> {
    let mut used = vec![false; b.candidates.len()];
    let mut found: Vec<Option<(usize, Match)>> = a
        .candidates
        .iter()
        .map(|c| {
            let j = b.candidates.iter().position(|d| d.model.id == c.model.id)?;
            used[j] = true;
            Some((j, Match::SameModel))
        })
        .collect();
    for (i, c) in a.candidates.iter().enumerate() {
        if found[i].is_some() {
            continue;
        }
        if let Some(j) = (0..b.candidates.len())
            .find(|j| !used[*j] && b.candidates[*j].model.name == c.model.name)
        {
            used[j] = true;
            found[i] = Some((j, Match::SameName));
        }
    }
    let mut out: Vec<Pair<'a>> = a
        .candidates
        .iter()
        .zip(&found)
        .map(|(c, f)| match f {
            Some((j, by)) => Pair {
                a: Some(c),
                b: Some(&b.candidates[*j]),
                by: *by,
            },
            None => Pair {
                a: Some(c),
                b: None,
                by: Match::OnlyA,
            },
        })
        .collect();
    out.extend(
        b.candidates
            .iter()
            .zip(&used)
            .filter(|(_, u)| !**u)
            .map(|(d, _)| Pair {
                a: None,
                b: Some(d),
                by: Match::OnlyB,
            }),
    );
    out
}

/// Which way is better for a figure.
#[derive(Clone, Copy)]
enum Better {
    Higher,
    Lower,
}

/// One figure of a matched candidate in A and in B.
struct Moved {
    key: &'static str,
    name: &'static str,
    a: f64,
    b: f64,
    better: Better,
    /// The 95 % intervals in A and B, for figures where overlap means noise.
    noise: Option<([f64; 2], [f64; 2])>,
    show: fn(f64) -> String,
    change: fn(f64) -> String,
}

impl Moved {
    /// "better", "worse", "unchanged" or "within noise".
    fn direction(&self) -> &'static str {
        let d = self.b - self.a;
        if d == 0.0 {
            return "unchanged";
        }
        if let Some((x, y)) = self.noise
            && x[0] <= y[1]
            && y[0] <= x[1]
        {
            return "within noise";
        }
        match (self.better, d > 0.0) {
            (Better::Higher, true) | (Better::Lower, false) => "better",
            _ => "worse",
        }
    }

    fn words(&self) -> String {
        let d = self.b - self.a;
        let way = if d > 0.0 { "up" } else { "down" };
        match self.direction() {
            "unchanged" => "unchanged".to_string(),
            "within noise" => format!("{way}, within noise (the 95 % intervals overlap)"),
            dir => format!("{way}, {dir}"),
        }
    }
}

fn signed_prop(d: f64) -> String {
    format!("{d:+.4}")
}

fn signed_ms(d: f64) -> String {
    format!("{}{} ms", if d >= 0.0 { "+" } else { "" }, significant(d))
}

/// The change relative to A, for figures whose scale varies by model.
fn relative(f: &Moved) -> Option<String> {
    let relative_figure = matches!(f.key, "p50" | "p90" | "bytes");
    (relative_figure && f.a != 0.0 && f.b != f.a)
        .then(|| format!("{:+.0} %", 100.0 * (f.b - f.a) / f.a))
}

fn signed_times(d: f64) -> String {
    format!("{}{}×", if d >= 0.0 { "+" } else { "" }, significant(d))
}

fn signed_bytes(d: f64) -> String {
    let sign = if d >= 0.0 { "+" } else { "−" };
    format!("{sign}{}", bytes(d.abs() as u64))
}

fn times(v: f64) -> String {
    format!("{}×", significant(v))
}

fn ms_text(v: f64) -> String {
    format!("{} ms", ms(v))
}

fn bytes_text(v: f64) -> String {
    bytes(v as u64)
}

fn figures(a: &Candidate, b: &Candidate) -> Vec<Moved> {
    let mut out = vec![
        Moved {
            key: "agreement",
            name: "Agreement",
            a: a.fidelity.agreement,
            b: b.fidelity.agreement,
            better: Better::Higher,
            noise: None,
            show: prop,
            change: signed_prop,
        },
        Moved {
            key: "kl",
            name: "KL (T)",
            a: a.fidelity.kl,
            b: b.fidelity.kl,
            better: Better::Lower,
            noise: None,
            show: prop,
            change: signed_prop,
        },
    ];
    if let (Some(x), Some(y)) = (&a.accuracy, &b.accuracy) {
        out.push(Moved {
            key: "top1",
            name: "Top-1",
            a: x.own.top1,
            b: y.own.top1,
            better: Better::Higher,
            noise: None,
            show: prop,
            change: signed_prop,
        });
    }
    let (la, lb) = (&a.latency, &b.latency);
    out.extend([
        Moved {
            key: "p50",
            name: "p50 latency",
            a: la.own.p50_ms,
            b: lb.own.p50_ms,
            better: Better::Lower,
            noise: Some((la.own.p50_ci_ms, lb.own.p50_ci_ms)),
            show: ms_text,
            change: signed_ms,
        },
        Moved {
            key: "p90",
            name: "p90 latency",
            a: la.own.p90_ms,
            b: lb.own.p90_ms,
            better: Better::Lower,
            noise: Some((la.own.p90_ci_ms, lb.own.p90_ci_ms)),
            show: ms_text,
            change: signed_ms,
        },
        Moved {
            key: "speedup",
            name: "Speedup over the teacher",
            a: la.speedup,
            b: lb.speedup,
            better: Better::Higher,
            noise: Some((la.speedup_ci, lb.speedup_ci)),
            show: times,
            change: signed_times,
        },
        Moved {
            key: "bytes",
            name: "Size",
            a: a.size.bytes as f64,
            b: b.size.bytes as f64,
            better: Better::Lower,
            noise: None,
            show: bytes_text,
            change: signed_bytes,
        },
    ]);
    out
}

fn gate_words(c: &Candidate) -> String {
    if c.gates.checks.is_empty() {
        "no gates".to_string()
    } else if c.gates.passed {
        format!("passes all {}", c.gates.checks.len())
    } else {
        let failed: Vec<&str> = c.gates.failed().map(|k| k.gate.as_str()).collect();
        format!("fails {}", failed.join(", "))
    }
}

fn movement(p: &Pair<'_>) -> Markup {
    let (Some(a), Some(b)) = (p.a, p.b) else {
        return html! {};
    };
    let gate_move = match (a.gates.passed, b.gates.passed) {
        (true, false) => "now fails a gate",
        (false, true) => "now passes every gate",
        _ => "unchanged",
    };
    html! {
        tbody.pair data-model=(b.model.name) {
            tr.pair-head { th scope="rowgroup" colspan="5" { (b.model.name) " " span.role { "(" (p.by.words()) ")" } } }
            tr.figure data-figure="rank" {
                td { "Rank" } td.num { (a.rank) } td.num { (b.rank) }
                td.num { (format!("{:+}", b.rank as i64 - a.rank as i64)) }
                td { @if a.rank == b.rank { "unchanged" } @else if b.rank < a.rank { "up the ranking" } @else { "down the ranking" } }
            }
            @for f in figures(a, b) {
                tr.figure data-figure=(f.key) data-direction=(f.direction()) {
                    td { (f.name) } td.num { ((f.show)(f.a)) } td.num { ((f.show)(f.b)) }
                    td.num { ((f.change)(f.b - f.a)) @if let Some(r) = relative(&f) { " " span.ci { "(" (r) ")" } } }
                    td.direction { (f.words()) }
                }
            }
            tr.figure data-figure="gates" {
                td { "Gates" } td { (gate_words(a)) } td { (gate_words(b)) } td.num { "" } td { (gate_move) }
            }
        }
    }
}

fn run_facts(v: &EvaluationView) -> Markup {
    let rec = &v.record;
    html! {
        td {
            a href=(evaluation_href(&rec.id)) { (id_text(&rec.id)) } br;
            span title=(rfc3339(rec.created_at)) { (when(rec.created_at)) } br;
            @if let Some(c) = rec.tags.get("commit") { code.commit { (short_commit(c)) } " " }
            @if let Some(b) = rec.tags.get("branch") { span.branch { (b) } }
        }
    }
}

fn runs_table(a: &EvaluationView, b: &EvaluationView) -> Markup {
    let set = |v: &EvaluationView| {
        v.dataset
            .as_ref()
            .map_or_else(|| v.record.dataset.to_string(), |d| d.name.clone())
    };
    let baseline = |v: &EvaluationView| {
        v.baseline
            .as_ref()
            .map_or_else(|| "none".to_string(), |m| m.name.clone())
    };
    let recommended = |v: &EvaluationView| {
        v.report
            .shown()
            .and_then(|r| {
                r.candidates
                    .iter()
                    .find(|c| Some(c.model.id) == r.recommended)
            })
            .map_or_else(|| "none".to_string(), |c| c.model.name.clone())
    };
    let verdict_words = match (a.record.verdict, b.record.verdict) {
        (Some(x), Some(y)) if x == y => format!("unchanged: {}", x.as_str()),
        (Some(x), Some(y)) => format!("moved from {} to {}", x.as_str(), y.as_str()),
        _ => "not both finished".to_string(),
    };
    html! {
        div.scroll { table #compare-runs {
            caption { "The two evaluations" }
            thead { tr { th scope="col" { "" } th scope="col" { "A" } th scope="col" { "B" } } }
            tbody {
                tr { th scope="row" { "Evaluation" } (run_facts(a)) (run_facts(b)) }
                tr { th scope="row" { "Status" } td { (a.record.status.as_str()) } td { (b.record.status.as_str()) } }
                tr { th scope="row" { "Teacher" } td { (a.teacher.name) } td { (b.teacher.name) } }
                tr { th scope="row" { "Evaluation set" } td { (set(a)) } td { (set(b)) } }
                tr { th scope="row" { "Baseline" } td { (baseline(a)) } td { (baseline(b)) } }
                tr #compare-verdict { th scope="row" { "Verdict" } td { (verdict_badge(a.record.verdict)) } td { (verdict_badge(b.record.verdict)) " " span.direction { (verdict_words) } } }
                tr { th scope="row" { "Recommended" } td { (recommended(a)) } td { (recommended(b)) } }
            }
        } }
        @if a.record.dataset != b.record.dataset {
            p.warn { "The two ran on different evaluation sets: their figures describe different samples and are not directly comparable." }
        }
        @if a.record.teacher != b.record.teacher {
            p.warn { "The two were measured against different teachers: agreement and KL are against different references." }
        }
    }
}

pub(super) fn render(pair: &[EvaluationView; 2]) -> Markup {
    let [a, b] = pair;
    let project = &a.record.project;
    let title = format!("Compare two evaluations of {project}");
    page(
        &title,
        false,
        html! {
            h1 { "Compare two evaluations of " (project_link(project)) }
            p { a href=(project_href(project)) { "← pick two others on the project's page" } }
            (runs_table(a, b))
            @match (a.report.shown(), b.report.shown()) {
                (Some(ra), Some(rb)) => {
                    @let ps = pairs(ra, rb);
                    h2 { "Candidates" }
                    div.scroll { table #matches {
                        caption { "Candidates are matched by model id, then by name" }
                        thead { tr { th scope="col" { "Model" } th scope="col" class="num" { "Rank in A" } th scope="col" class="num" { "Rank in B" } th scope="col" { "Matched as" } } }
                        tbody { @for p in &ps {
                            tr.match data-match=(match p.by { Match::SameModel => "model", Match::SameName => "name", Match::OnlyA => "only-a", Match::OnlyB => "only-b" }) {
                                td { (p.b.or(p.a).map(|c| c.model.name.as_str()).unwrap_or("")) }
                                td.num { @match p.a { Some(c) => (c.rank), None => "—" } }
                                td.num { @match p.b { Some(c) => (c.rank), None => "—" } }
                                td { (p.by.words()) }
                            }
                        } }
                    } }
                    h2 { "What moved" }
                    div.scroll { table #movement {
                        caption { "B against A, for each candidate both had. Latency changes whose 95 % intervals overlap are within noise." }
                        thead { tr { th scope="col" { "Figure" } th scope="col" class="num" { "A" } th scope="col" class="num" { "B" } th scope="col" class="num" { "Change (B − A)" } th scope="col" { "Direction" } } }
                        @for p in &ps { (movement(p)) }
                    } }
                }
                _ => p #compare-missing { "Figures can be compared once both evaluations have succeeded." },
            }
        },
    )
}
