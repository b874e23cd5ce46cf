//! The page shell: title, header, footer, and the optional refresh of pages
//! that show running evaluations.

use maud::{DOCTYPE, Markup, html};

use crate::report::Verdict;

/// An empty icon inline, so the browser asks for no /favicon.ico.
const ICON: &str = "data:image/svg+xml,%3Csvg xmlns='http://www.w3.org/2000/svg' viewBox='0 0 16 16'%3E%3Crect width='16' height='16' rx='3' fill='%231f6f78'/%3E%3C/svg%3E";

pub(super) fn page(title: &str, refresh: bool, body: Markup) -> Markup {
    html! {
        (DOCTYPE)
        html lang="en" {
            head {
                meta charset="utf-8";
                meta name="viewport" content="width=device-width, initial-scale=1";
                @if refresh {
                    // Pages with running evaluations reload until they finish.
                    meta http-equiv="refresh" content="2";
                }
                title { (title) " · proctor" }
                link rel="icon" href=(ICON);
                link rel="stylesheet" href="/assets/style.css";
            }
            body {
                header.bar {
                    a.mark href="/" { "proctor" }
                    nav aria-label="main" {
                        a href="/" { "Evaluations" }
                        a href="/openapi.yaml" { "API" }
                    }
                }
                main { (body) }
                footer {
                    "Figures describe the evaluation set they were measured on; they do not guarantee \
                     behaviour on live data. Safety-critical uses need their own validation and review."
                }
            }
        }
    }
}

pub(super) fn verdict_badge(v: Option<Verdict>) -> Markup {
    html! {
        @match v {
            Some(Verdict::Go) => span.verdict.go title="at least one candidate passes every gate" { "GO ✓" },
            Some(Verdict::NoGo) => span.verdict.nogo title="no candidate passes every gate" { "NO-GO ✕" },
            None => span { "—" },
        }
    }
}
