//! What `GET /metrics` exposes, in the Prometheus text format (version
//! 0.0.4): counters and histograms this process keeps since it started,
//! and gauges read from the store at each scrape. Kept by hand rather than
//! through a metrics crate: a few families, and the format is plain text.

mod histogram;

use std::collections::BTreeMap;
use std::fmt::Write;
use std::sync::Mutex;

use histogram::Histogram;

use crate::report::StageTimes;

/// Bounds (seconds) of the duration histograms: a small model's evaluation
/// takes a second, a large one's an hour.
const DURATION_BOUNDS: &[f64] = &[
    0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0, 120.0, 300.0, 600.0, 1800.0, 3600.0,
];

/// Counters and histograms of this process.
#[derive(Debug, Default)]
pub struct Telemetry {
    inner: Mutex<Counts>,
}

#[derive(Debug, Default)]
struct Counts {
    /// (method, route pattern, status) → requests.
    http: BTreeMap<(&'static str, &'static str, u16), u64>,
    /// kind ("model" | "dataset") → (uploads stored, bytes received).
    uploads: BTreeMap<&'static str, (u64, u64)>,
    /// outcome → run time of evaluations this process ran.
    evaluations: BTreeMap<&'static str, Histogram>,
    /// stage → time spent in it.
    stages: BTreeMap<&'static str, Histogram>,
}

/// Figures read from the store when scraped.
#[derive(Debug, Clone, Default)]
pub struct StoredFigures {
    /// status → evaluations.
    pub evaluations: Vec<(&'static str, u64)>,
    pub queued: u64,
    pub stored_bytes: u64,
}

impl Telemetry {
    fn counts(&self) -> std::sync::MutexGuard<'_, Counts> {
        // A panic elsewhere while counting leaves usable counts.
        self.inner.lock().unwrap_or_else(|p| p.into_inner())
    }

    pub fn request(&self, method: &'static str, route: &'static str, status: u16) {
        *self
            .counts()
            .http
            .entry((method, route, status))
            .or_default() += 1;
    }

    pub fn upload(&self, kind: &'static str, bytes: u64) {
        let mut c = self.counts();
        let e = c.uploads.entry(kind).or_default();
        e.0 += 1;
        e.1 += bytes;
    }

    /// An evaluation this process ran to `outcome` in `seconds`, and where
    /// its time went when it succeeded.
    pub fn evaluation(&self, outcome: &'static str, seconds: f64, stages: Option<&StageTimes>) {
        let mut c = self.counts();
        c.evaluations
            .entry(outcome)
            .or_insert_with(|| Histogram::new(DURATION_BOUNDS))
            .observe(seconds);
        if let Some(t) = stages {
            for (stage, s) in [
                ("queued", t.queued_s),
                ("loading", t.loading_s),
                ("bulk", t.bulk_s),
                ("timing", t.timing_s),
                ("scoring", t.scoring_s),
            ] {
                c.stages
                    .entry(stage)
                    .or_insert_with(|| Histogram::new(DURATION_BOUNDS))
                    .observe(s);
            }
        }
    }

    /// The exposition text.
    pub fn render(&self, stored: &StoredFigures) -> String {
        let c = self.counts();
        let mut out = String::new();
        family(
            &mut out,
            "proctor_evaluations",
            "gauge",
            "Evaluations in the store, by status.",
        );
        for (status, n) in &stored.evaluations {
            let _ = writeln!(out, "proctor_evaluations{{status=\"{status}\"}} {n}");
        }
        family(
            &mut out,
            "proctor_queue_depth",
            "gauge",
            "Evaluations waiting for a worker.",
        );
        let _ = writeln!(out, "proctor_queue_depth {}", stored.queued);
        family(
            &mut out,
            "proctor_stored_bytes",
            "gauge",
            "Bytes of models and evaluation sets kept.",
        );
        let _ = writeln!(out, "proctor_stored_bytes {}", stored.stored_bytes);
        family(
            &mut out,
            "proctor_uploads_total",
            "counter",
            "Uploads received, by kind.",
        );
        for (kind, (n, _)) in &c.uploads {
            let _ = writeln!(out, "proctor_uploads_total{{kind=\"{kind}\"}} {n}");
        }
        family(
            &mut out,
            "proctor_upload_bytes_total",
            "counter",
            "Bytes received in uploads, by kind.",
        );
        for (kind, (_, bytes)) in &c.uploads {
            let _ = writeln!(out, "proctor_upload_bytes_total{{kind=\"{kind}\"}} {bytes}");
        }
        family(
            &mut out,
            "proctor_evaluation_seconds",
            "histogram",
            "Run time of evaluations this process ran, by outcome.",
        );
        for (outcome, h) in &c.evaluations {
            h.render(
                &mut out,
                "proctor_evaluation_seconds",
                &format!("outcome=\"{outcome}\""),
            );
        }
        family(
            &mut out,
            "proctor_stage_seconds",
            "histogram",
            "Time succeeded evaluations spent in each stage.",
        );
        for (stage, h) in &c.stages {
            h.render(
                &mut out,
                "proctor_stage_seconds",
                &format!("stage=\"{stage}\""),
            );
        }
        family(
            &mut out,
            "proctor_http_requests_total",
            "counter",
            "HTTP requests, by route and status.",
        );
        for ((method, route, status), n) in &c.http {
            let _ = writeln!(
                out,
                "proctor_http_requests_total{{method=\"{method}\",route=\"{}\",status=\"{status}\"}} {n}",
                escape(route)
            );
        }
        out
    }
}

fn family(out: &mut String, name: &str, kind: &str, help: &str) {
    let _ = writeln!(out, "# HELP {name} {help}");
    let _ = writeln!(out, "# TYPE {name} {kind}");
}

/// A label value as the text format wants it.
fn escape(v: &str) -> String {
    v.replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_family_is_announced_once_with_help_and_type() {
        let t = Telemetry::default();
        t.request("GET", "/v1/models/{id}", 200);
        t.request("GET", "/v1/models/{id}", 200);
        t.upload("model", 1234);
        t.evaluation("succeeded", 3.0, Some(&StageTimes::default()));
        let text = t.render(&StoredFigures {
            evaluations: vec![("queued", 2), ("succeeded", 5)],
            queued: 2,
            stored_bytes: 99,
        });
        assert!(text.contains(
            "proctor_http_requests_total{method=\"GET\",route=\"/v1/models/{id}\",status=\"200\"} 2"
        ));
        assert!(text.contains("proctor_uploads_total{kind=\"model\"} 1"));
        assert!(text.contains("proctor_evaluation_seconds_count{outcome=\"succeeded\"} 1"));
        assert!(text.contains("proctor_stage_seconds_bucket{stage=\"bulk\",le=\"+Inf\"} 1"));
        for name in [
            "proctor_evaluations",
            "proctor_http_requests_total",
            "proctor_stage_seconds",
        ] {
            assert_eq!(
                text.matches(&format!("# TYPE {name} ")).count(),
                1,
                "{name}"
            );
        }
    }

    #[test]
    fn label_values_are_escaped() {
        assert_eq!(escape("a\"b\\c\n"), "a\\\"b\\\\c\\n");
    }
}
