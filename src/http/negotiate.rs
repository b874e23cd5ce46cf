//! Content negotiation on `Accept` (RFC 9110 §12.5.1), for the two answers
//! that have another form: errors as HTML pages for browsers, reports as
//! CSV for spreadsheets. JSON is the default whenever the client does not
//! clearly prefer the other.

use axum::http::{HeaderMap, header};

/// The highest `q` the header gives any of `media` (exact types), and the
/// one it gives `*/*`.
fn weights(accept: &str, media: &[&str]) -> (Option<f32>, Option<f32>) {
    let (mut named, mut any) = (None::<f32>, None::<f32>);
    for range in accept.split(',') {
        let mut parts = range.split(';').map(str::trim);
        let m = parts.next().unwrap_or("").to_ascii_lowercase();
        let q = parts
            .filter_map(|p| p.strip_prefix("q="))
            .find_map(|q| q.parse::<f32>().ok())
            .unwrap_or(1.0);
        let slot = if media.contains(&m.as_str()) {
            &mut named
        } else if m == "*/*" {
            &mut any
        } else {
            continue;
        };
        *slot = Some(slot.map_or(q, |old| old.max(q)));
    }
    (named, any)
}

/// Whether the client would rather have one of `wanted` than JSON.
fn prefers(headers: &HeaderMap, wanted: &[&str]) -> bool {
    let Some(accept) = headers.get(header::ACCEPT).and_then(|v| v.to_str().ok()) else {
        return false;
    };
    let (w, any) = weights(accept, wanted);
    let (j, _) = weights(accept, &["application/json", "application/problem+json"]);
    let w = w.or(any).unwrap_or(0.0);
    let j = j.or(any).unwrap_or(0.0);
    w > 0.0 && w > j
}

/// Browsers list `text/html` first; API clients send JSON, `*/*` or nothing.
pub fn prefers_html(headers: &HeaderMap) -> bool {
    prefers(headers, &["text/html", "application/xhtml+xml"])
}

pub(super) fn prefers_csv(headers: &HeaderMap) -> bool {
    prefers(headers, &["text/csv"])
}

#[cfg(test)]
mod tests {
    use super::*;

    fn accept(v: &str) -> HeaderMap {
        let mut h = HeaderMap::new();
        h.insert(header::ACCEPT, v.parse().unwrap());
        h
    }

    #[test]
    fn csv_only_when_preferred_and_never_at_q_zero() {
        assert!(prefers_csv(&accept("text/csv")));
        assert!(prefers_csv(&accept("text/csv, application/json;q=0.5")));
        for not in [
            "text/csv;q=0",
            "application/json, text/csv;q=0.1",
            "*/*",
            "text/csvx",
        ] {
            assert!(!prefers_csv(&accept(not)), "{not}");
        }
    }
}
