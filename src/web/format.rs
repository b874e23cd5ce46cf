//! Numbers, names and links rounded or spelled for reading; the exact value
//! goes in a `title` for hover.

use maud::{Markup, html};
use time::OffsetDateTime;
use time::format_description::well_known::Rfc3339;
use uuid::Uuid;

pub(super) fn prop(v: f64) -> String {
    format!("{v:.4}")
}

pub(super) fn ms(v: f64) -> String {
    if v >= 100.0 {
        format!("{v:.0}")
    } else if v >= 1.0 {
        format!("{v:.2}")
    } else {
        format!("{v:.3}")
    }
}

pub(super) fn ratio(v: f64) -> String {
    format!("{v:.3}")
}

pub(super) fn signed(v: f64) -> String {
    format!("{v:+.4}")
}

pub(super) fn interval(ci: [f64; 2]) -> String {
    format!("[{:.3}, {:.3}]", ci[0], ci[1])
}

/// A signed interval, for differences: "[+0.009, +0.097]".
pub(super) fn signed_interval(ci: [f64; 2]) -> String {
    format!("[{:+.3}, {:+.3}]", ci[0], ci[1])
}

/// A latency interval in ms, each end rounded as `ms` rounds.
pub(super) fn ms_interval(ci: [f64; 2]) -> String {
    format!("[{}, {}]", ms(ci[0]), ms(ci[1]))
}

pub(super) fn exact(v: f64) -> String {
    format!("{v}")
}

/// A number rounded for reading with its exact value on hover.
pub(super) fn num(text: String, value: f64) -> Markup {
    html! { span title=(exact(value)) { (text) } }
}

pub(super) fn bytes(b: u64) -> String {
    match b {
        b if b >= 1 << 30 => format!("{:.1} GiB", b as f64 / (1u64 << 30) as f64),
        b if b >= 1 << 20 => format!("{:.1} MiB", b as f64 / (1u64 << 20) as f64),
        b if b >= 1 << 10 => format!("{:.1} KiB", b as f64 / 1024.0),
        b => format!("{b} B"),
    }
}

/// "2026-12-01 22:43 UTC", for reading; RFC 3339 in the `title`.
pub(super) fn when(t: OffsetDateTime) -> String {
    format!(
        "{:04}-{:02}-{:02} {:02}:{:02} UTC",
        t.year(),
        u8::from(t.month()),
        t.day(),
        t.hour(),
        t.minute()
    )
}

/// "12-01 22:43", for axis ticks where the year would crowd.
pub(super) fn short_when(t: OffsetDateTime) -> String {
    format!(
        "{:02}-{:02} {:02}:{:02}",
        u8::from(t.month()),
        t.day(),
        t.hour(),
        t.minute()
    )
}

pub(super) fn rfc3339(t: OffsetDateTime) -> String {
    t.format(&Rfc3339).unwrap_or_default()
}

pub(super) fn short_id(id: &Uuid) -> String {
    // The tail: a UUID v7 starts with its timestamp, so heads repeat.
    id.to_string()[28..].to_string()
}

/// An id as its short tail in monospace, the full id on hover.
pub(super) fn id_text(id: &Uuid) -> Markup {
    html! { code.id title=(id.to_string()) { "…" (short_id(id)) } }
}

/// A class as "3 · shrivelled" when the set names its classes, else "3".
pub(super) fn class_label(class: usize, names: Option<&[String]>) -> String {
    match names.and_then(|n| n.get(class)) {
        Some(name) => format!("{class} · {name}"),
        None => class.to_string(),
    }
}

/// A commit hash shortened to the 7 characters people quote.
pub(super) fn short_commit(commit: &str) -> String {
    commit.chars().take(7).collect()
}

/// Where a project's page is. Project names are limited to
/// `[A-Za-z0-9._-]`, but names stored before the limit may hold anything,
/// so everything else is percent-encoded.
pub(super) fn project_href(name: &str) -> String {
    let mut out = String::from("/projects/");
    for b in name.bytes() {
        if b.is_ascii_alphanumeric() || b"-._~".contains(&b) {
            out.push(b as char);
        } else {
            out.push_str(&format!("%{b:02X}"));
        }
    }
    out
}

pub(super) fn project_link(name: &str) -> Markup {
    html! { a href=(project_href(name)) { (name) } }
}

pub(super) fn evaluation_href(id: &Uuid) -> String {
    format!("/evaluations/{id}")
}

/// A latency unit that keeps tick labels short: µs below one millisecond.
#[derive(Clone, Copy)]
pub(super) struct TimeUnit {
    pub per_ms: f64,
    pub name: &'static str,
}

impl TimeUnit {
    pub(super) fn for_ms(largest: f64) -> TimeUnit {
        if largest < 1.0 {
            TimeUnit {
                per_ms: 1000.0,
                name: "µs",
            }
        } else {
            TimeUnit {
                per_ms: 1.0,
                name: "ms",
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn project_links_encode_what_a_path_cannot_hold() {
        assert_eq!(
            project_href("turbine-acoustics"),
            "/projects/turbine-acoustics"
        );
        assert_eq!(project_href("a b/c"), "/projects/a%20b%2Fc");
    }

    #[test]
    fn classes_show_their_names_beside_their_index() {
        let names = vec!["sound".to_string(), "cracked".to_string()];
        assert_eq!(class_label(1, Some(&names)), "1 · cracked");
        assert_eq!(class_label(4, Some(&names)), "4");
        assert_eq!(class_label(0, None), "0");
    }
}
