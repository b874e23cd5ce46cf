//! Numbers rounded for reading; the exact value goes in a `title` for hover.

use time::OffsetDateTime;
use time::format_description::well_known::Rfc3339;

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

/// A latency interval in ms, each end rounded as `ms` rounds.
pub(super) fn ms_interval(ci: [f64; 2]) -> String {
    format!("[{}, {}]", ms(ci[0]), ms(ci[1]))
}

pub(super) fn exact(v: f64) -> String {
    format!("{v}")
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

pub(super) fn rfc3339(t: OffsetDateTime) -> String {
    t.format(&Rfc3339).unwrap_or_default()
}

pub(super) fn short_id(id: &uuid::Uuid) -> String {
    // The tail: a UUID v7 starts with its timestamp, so heads repeat.
    id.to_string()[28..].to_string()
}
