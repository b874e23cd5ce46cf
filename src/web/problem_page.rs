//! An error as a page, for browsers: the same problem an API client gets
//! as problem+json, in words, with a way back.

use maud::html;

use super::layout::page;
use crate::problem::Problem;

pub(crate) fn error_page(p: &Problem) -> String {
    let title = format!("{} {}", p.status, p.title);
    page(
        &title,
        false,
        html! {
            h1 #problem data-status=(p.status) { (title) }
            p.problem-detail { (p.detail) }
            @if let Some(field) = &p.field { p { "Input concerned: " code { (field) } } }
            p { a href="/" { "Back to the evaluations" } }
        },
    )
    .into_string()
}
