//! The ranked candidates beside two reference rows: the teacher, and the
//! baseline (the student in production) when there is one. Failed gates
//! are said in words, with what was judged.

use maud::{Markup, html};

use super::rank_name;
use crate::engine::gates::GateName;
use crate::engine::metrics::accuracy::StudentAccuracy;
use crate::engine::metrics::fidelity::Fidelity;
use crate::report::numbers::significant;
use crate::report::{Candidate, Key, Report, Size, StudentLatency};
use crate::web::format::{class_label, interval, ms, ms_interval, num, prop, ratio, signed};

/// Where a class or slice gate was judged, with the class's name.
pub(super) fn at_text(gate: GateName, at: &Key, class_names: Option<&[String]>) -> String {
    match (gate, at) {
        (GateName::MinClassAgreement, Key::Int(c)) if *c >= 0 => {
            format!("class {}", class_label(*c as usize, class_names))
        }
        (GateName::MinClassAgreement, k) => format!("class {k}"),
        (_, k) => format!("slice {k}"),
    }
}

/// A gate's name that may break after its underscores, so that a long
/// name wraps inside its cell instead of widening the table.
fn gate_name(gate: GateName) -> Markup {
    let parts: Vec<&str> = gate.as_str().split('_').collect();
    html! {
        code {
            @for (i, p) in parts.iter().enumerate() {
                @if i > 0 { "_" wbr; }
                (p)
            }
        }
    }
}

fn gates_cell(c: &Candidate, r: &Report) -> Markup {
    let confidence = r.settings.gates.confidence;
    let names = r.dataset.class_names.as_deref();
    html! {
        @if c.gates.checks.is_empty() {
            span { "no gates" }
        } @else if c.gates.passed {
            span.pass { "passes all " (c.gates.checks.len()) }
        } @else {
            ul.fail {
                @for k in c.gates.failed() {
                    li {
                        "fails " (gate_name(k.gate))
                        @if let Some(at) = &k.at { " at " (at_text(k.gate, at, names)) }
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

/// A figure with its interval under it.
fn with_ci(text: String, value: f64, ci: String) -> Markup {
    html! { (num(text, value)) br; span.ci { (ci) } }
}

/// The cells a candidate and the baseline share, from agreement to size.
fn figures(f: &Fidelity, a: Option<&StudentAccuracy>, l: &StudentLatency, s: &Size) -> Markup {
    html! {
        td.num { (with_ci(prop(f.agreement), f.agreement, interval(f.agreement_ci))) }
        td.num { (num(format!("{:.4}", f.kl), f.kl)) }
        @match a {
            Some(a) => {
                td.num { (with_ci(prop(a.own.top1), a.own.top1, interval(a.own.top1_ci))) }
                td.num { (with_ci(signed(a.delta), a.delta, interval(a.delta_ci))) }
            }
            None => { td.num { "—" } td.num { "—" } }
        }
        td.num { (with_ci(ms(l.own.p90_ms), l.own.p90_ms, ms_interval(l.own.p90_ci_ms))) }
        td.num { (with_ci(format!("{}×", significant(l.speedup)), l.speedup, interval(l.speedup_ci))) }
        td.num { (num(ratio(s.size_ratio), s.size_ratio)) }
    }
}

pub(super) fn table(r: &Report) -> Markup {
    let t = &r.teacher;
    html! {
        div.scroll {
            table #candidates {
                caption { "Candidates, ranked (passing every gate first, then by " (rank_name(r.settings.rank_by))
                    "), below the teacher" @if r.baseline.is_some() { " and the baseline" } " for reference" }
                thead { tr {
                    th scope="col" { "Rank" } th scope="col" { "Model" }
                    th scope="col" class="num" { "Agreement" } th scope="col" class="num" { "KL (T)" }
                    th scope="col" class="num" { "Top-1" } th scope="col" class="num" { "Δ top-1" }
                    th scope="col" class="num" { "p90 ms" } th scope="col" class="num" { "Speedup" }
                    th scope="col" class="num" { "Size ratio" } th scope="col" { "Gates" }
                } }
                tbody {
                    tr.reference.teacher {
                        td { "ref" }
                        td { (t.model.name) " (teacher)" }
                        td.num { "—" } td.num { "—" }
                        td.num { @match &t.accuracy {
                            Some(a) => (with_ci(prop(a.top1), a.top1, interval(a.top1_ci))),
                            None => "—",
                        } }
                        td.num { "—" }
                        td.num { (with_ci(ms(t.latency.p90_ms), t.latency.p90_ms, ms_interval(t.latency.p90_ci_ms))) }
                        td.num { "1×" } td.num { "1.000" } td { "—" }
                    }
                    @if let Some(b) = &r.baseline {
                        tr.reference.baseline data-model=(b.model.name) {
                            td { "base" }
                            td { (b.model.name) " (baseline)" }
                            (figures(&b.fidelity, b.accuracy.as_ref(), &b.latency, &b.size))
                            td.gates { "not gated: the reference" }
                        }
                    }
                    @for c in &r.candidates {
                        tr.candidate data-model=(c.model.name) {
                            td { (c.rank) @if c.pareto_optimal { " ◆" } }
                            td { (c.model.name) }
                            (figures(&c.fidelity, c.accuracy.as_ref(), &c.latency, &c.size))
                            td.gates { (gates_cell(c, r)) }
                        }
                    }
                }
            }
        }
        p.ci { "◆ on the Pareto front (quality, speed, bytes). Δ top-1, speedup and size ratio are against the \
            teacher. Intervals are 95 %: Wilson for proportions, paired Wald for Δ top-1, order statistics \
            for latency and for the per-round speedup." }
    }
}
