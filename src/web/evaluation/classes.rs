//! Per-class agreement and the most frequent disagreements of one model,
//! chosen by links (`?classes=MODEL_ID`), so that any candidate or the
//! baseline can be read, not only the recommended one.

use maud::{Markup, html};
use uuid::Uuid;

use crate::engine::metrics::fidelity::Fidelity;
use crate::report::Report;
use crate::web::charts::BarScale;
use crate::web::format::{class_label, num, prop};

/// A model whose classes can be shown.
struct Choice<'a> {
    id: Uuid,
    name: &'a str,
    role: &'static str,
    fidelity: &'a Fidelity,
}

fn choices(r: &Report) -> Vec<Choice<'_>> {
    let mut out: Vec<Choice<'_>> = r
        .candidates
        .iter()
        .map(|c| Choice {
            id: c.model.id,
            name: &c.model.name,
            role: if Some(c.model.id) == r.recommended {
                "recommended"
            } else {
                "candidate"
            },
            fidelity: &c.fidelity,
        })
        .collect();
    if let Some(b) = &r.baseline {
        out.push(Choice {
            id: b.model.id,
            name: &b.model.name,
            role: "baseline",
            fidelity: &b.fidelity,
        });
    }
    out
}

fn chooser(r: &Report, all: &[Choice<'_>], shown: Uuid) -> Markup {
    html! {
        nav.choice #class-choice aria-label="whose classes to show" {
            "Show the classes of: "
            @for c in all {
                @if c.id == shown {
                    strong aria-current="true" data-model=(c.name) { (c.name) }
                } @else {
                    a href=(format!("/evaluations/{}?classes={}#classes", r.evaluation, c.id)) data-model=(c.name) { (c.name) }
                }
                " "
            }
        }
    }
}

pub(super) fn section(r: &Report, asked: Option<Uuid>) -> Markup {
    let all = choices(r);
    let default = all
        .iter()
        .find(|c| Some(c.id) == r.recommended)
        .or(all.first());
    let found = asked.and_then(|id| all.iter().find(|c| c.id == id));
    let Some(c) = found.or(default) else {
        return html! {};
    };
    let names = r.dataset.class_names.as_deref();
    let bars = BarScale::for_values(c.fidelity.class_agreement.iter().map(|k| k.agreement));
    html! {
        h2 #classes { "Per class: " (c.name) " (" (c.role) ")" }
        (chooser(r, &all, c.id))
        @if asked.is_some() && found.is_none() {
            p.note { "This evaluation has no model with the id asked for; showing " (c.name) "." }
        }
        div.scroll { table #class-agreement.compact data-model=(c.name) {
            caption { "For each class the teacher predicts: how often " (c.name) " predicts it too. " (bars.note()) }
            thead { tr { th scope="col" { "Class" } th scope="col" class="num" { "Teacher predictions" } th scope="col" { "Agreement" } } }
            tbody { @for k in &c.fidelity.class_agreement {
                tr data-class=(k.class) {
                    td { (class_label(k.class, names)) } td.num { (k.samples) }
                    td { (bars.bar(k.agreement, num(prop(k.agreement), k.agreement))) }
                }
            } }
        } }
        h3 { "Most frequent disagreements of " (c.name) }
        @if c.fidelity.disagreements.is_empty() {
            p { "None: its top class is the teacher's on every sample." }
        } @else {
            div.scroll { table #disagreements.compact {
                caption { "Teacher class → " (c.name) "'s class, most frequent first" }
                thead { tr { th scope="col" { "Teacher says" } th scope="col" { "Student says" } th scope="col" class="num" { "Samples" } } }
                tbody { @for d in &c.fidelity.disagreements {
                    tr { td { (class_label(d.teacher_class, names)) } td { (class_label(d.student_class, names)) } td.num { (d.count) } }
                } }
            } }
        }
    }
}
