//! Figures per slice of the set for the baseline and every candidate, with
//! each model's worst slice marked in words, so that an average cannot
//! hide the site or device where a model does badly.

use maud::{Markup, html};

use crate::engine::metrics::slices::SliceFigures;
use crate::report::Report;
use crate::web::charts::BarScale;
use crate::web::format::{interval, num, prop};

/// Below this many samples a slice's figures swing on a single sample.
const FEW_SAMPLES: u64 = 10;

/// The slice with the lowest agreement; on a tie, the one with the lower
/// interval bound (the one a slice gate under confidence would judge).
fn worst(slices: &[SliceFigures]) -> Option<usize> {
    (0..slices.len()).min_by(|a, b| {
        let (a, b) = (&slices[*a], &slices[*b]);
        a.agreement
            .total_cmp(&b.agreement)
            .then(a.agreement_ci[0].total_cmp(&b.agreement_ci[0]))
    })
}

fn model_rows(name: &str, role: &str, slices: &[SliceFigures], bars: &BarScale) -> Markup {
    let worst = worst(slices);
    html! {
        tbody.model data-model=(name) {
            tr.model-head { th scope="rowgroup" colspan="6" { (name) " " span.role { (role) } } }
            @for (i, s) in slices.iter().enumerate() {
                @let is_worst = Some(i) == worst;
                tr.slice.worst[is_worst] data-slice=(s.slice.to_string()) {
                    td { (s.slice.to_string()) }
                    td.num { (s.samples) @if s.samples < FEW_SAMPLES { " " span.note { "(few)" } } }
                    td { (bars.bar(s.agreement, html! { (num(prop(s.agreement), s.agreement)) " " span.ci { (interval(s.agreement_ci)) } })) }
                    td.num { @match s.top1 { Some(t) => (num(prop(t), t)), None => "—" } }
                    td.num { @match s.negative_flip_rate { Some(n) => (num(prop(n), n)), None => "—" } }
                    td { @if is_worst { strong.worst-mark { "▼ worst slice" } } }
                }
            }
        }
    }
}

pub(super) fn section(r: &Report) -> Markup {
    let mut models: Vec<(&str, &str, &[SliceFigures])> = Vec::new();
    if let Some(b) = &r.baseline
        && let Some(s) = &b.slices
    {
        models.push((&b.model.name, "baseline", s));
    }
    for c in &r.candidates {
        if let Some(s) = &c.slices {
            models.push((&c.model.name, "candidate", s));
        }
    }
    if models.is_empty() {
        return html! {};
    }
    let bars = BarScale::for_values(
        models
            .iter()
            .flat_map(|(_, _, s)| s.iter().map(|x| x.agreement)),
    );
    html! {
        h2 #slices-heading { "Slices of the set" }
        div.scroll { table #slices {
            caption { "Per slice: agreement with the teacher (95 % Wilson interval), top-1 and negative flips. \
                ▼ marks each model's worst slice: the lowest agreement. " (bars.note()) }
            thead { tr {
                th scope="col" { "Slice" } th scope="col" class="num" { "Samples" }
                th scope="col" { "Agreement" } th scope="col" class="num" { "Top-1" }
                th scope="col" class="num" { "Negative flips" } th scope="col" { "Worst?" }
            } }
            @for (name, role, s) in &models { (model_rows(name, role, s, &bars)) }
        } }
        p.ci { "Slices with fewer than " (FEW_SAMPLES) " samples are marked (few): one sample moves their figures a lot." }
    }
}
