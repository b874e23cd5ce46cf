//! Each candidate against the baseline, the student in production: does
//! it decide like the baseline, is it closer to the teacher, is it faster.

use maud::{Markup, html};

use crate::report::numbers::significant;
use crate::report::{Report, VersusBaseline};
use crate::web::format::{interval, num, prop, ratio, signed, signed_interval};

/// The difference in agreement in words, read from its interval.
fn reading(v: &VersusBaseline, tolerance: f64) -> String {
    let quality = if v.agreement_delta_ci[0] > 0.0 {
        "closer to the teacher than the baseline"
    } else if v.agreement_delta_ci[1] < 0.0 {
        "further from the teacher than the baseline"
    } else {
        "no clear difference in agreement"
    };
    let speed = if v.speedup_ci[0] > 1.0 + tolerance {
        "faster"
    } else if v.speedup_ci[1] < 1.0 / (1.0 + tolerance) {
        "slower"
    } else {
        "as fast"
    };
    format!("{quality}; {speed}")
}

pub(super) fn section(r: &Report) -> Markup {
    let Some(b) = &r.baseline else {
        return html! {};
    };
    let tolerance = r.settings.latency.tolerance;
    html! {
        h2 #against-baseline { "Against the baseline, " (b.model.name) }
        div.scroll { table #versus-baseline {
            caption { "Each candidate against the student in production; Δ is candidate minus baseline, \
                both measured against the teacher (and the labels)" }
            thead { tr {
                th scope="col" { "Candidate" }
                th scope="col" class="num" { "Agrees with baseline" }
                th scope="col" class="num" { "Δ agreement" }
                th scope="col" class="num" { "Teacher flips" }
                th scope="col" class="num" { "Δ top-1" }
                th scope="col" class="num" { "Negative flips" }
                th scope="col" class="num" { "Speedup over baseline" }
                th scope="col" class="num" { "Size ratio" }
                th scope="col" { "Reading" }
            } }
            tbody { @for c in &r.candidates {
                @if let Some(v) = &c.versus_baseline {
                    tr.versus data-model=(c.model.name) {
                        td { (c.model.name) }
                        td.num { (num(prop(v.agreement), v.agreement)) }
                        td.num { (num(signed(v.agreement_delta), v.agreement_delta)) br;
                            span.ci { (signed_interval(v.agreement_delta_ci)) } }
                        td.num { (num(prop(v.teacher_flip_rate), v.teacher_flip_rate)) }
                        td.num { @match (v.top1_delta, v.top1_delta_ci) {
                            (Some(d), Some(ci)) => { (num(signed(d), d)) br; span.ci { (signed_interval(ci)) } }
                            _ => "—",
                        } }
                        td.num { @match v.negative_flip_rate { Some(n) => (num(prop(n), n)), None => "—" } }
                        td.num { (num(format!("{}×", significant(v.speedup)), v.speedup)) br;
                            span.ci { (interval(v.speedup_ci)) } }
                        td.num { (num(ratio(v.size_ratio), v.size_ratio)) }
                        td.reading { (reading(v, tolerance)) }
                    }
                }
            } }
        } }
        p.ci { "Teacher flips: share of samples where the baseline agreed with the teacher and the candidate \
            no longer does. Negative flips: share the baseline got right and the candidate gets wrong. \
            Speedup over the baseline is the median per-round ratio of their times; \"as fast\" means within "
            (significant(100.0 * tolerance)) " %, the evaluation's tolerance." }
    }
}
