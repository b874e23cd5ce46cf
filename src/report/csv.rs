//! The ranked candidates of a report as CSV (RFC 4180): one row per
//! candidate in rank order, for spreadsheets and scripts. Served by the API
//! for `Accept: text/csv` and written by `proctor submit --csv`.

use crate::report::Report;

const COLUMNS: [&str; 22] = [
    "rank",
    "model",
    "model_id",
    "pareto_optimal",
    "passed_gates",
    "failed_gates",
    "agreement",
    "agreement_ci_low",
    "agreement_ci_high",
    "kl",
    "top1",
    "top1_delta",
    "p50_ms",
    "p90_ms",
    "speedup",
    "bytes",
    "size_ratio",
    "parameters",
    "baseline_agreement_delta",
    "baseline_negative_flip_rate",
    "baseline_speedup",
    "verdict",
];

fn opt(v: Option<f64>) -> String {
    v.map_or(String::new(), |x| x.to_string())
}

pub fn candidates_csv(r: &Report) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(COLUMNS).expect("writing to memory");
    for c in &r.candidates {
        let failed: Vec<&str> = c.gates.failed().map(|k| k.gate.as_str()).collect();
        let acc = c.accuracy.as_ref();
        let v = c.versus_baseline.as_ref();
        let row = [
            c.rank.to_string(),
            c.model.name.clone(),
            c.model.id.to_string(),
            c.pareto_optimal.to_string(),
            c.gates.passed.to_string(),
            failed.join(" "),
            c.fidelity.agreement.to_string(),
            c.fidelity.agreement_ci[0].to_string(),
            c.fidelity.agreement_ci[1].to_string(),
            c.fidelity.kl.to_string(),
            opt(acc.map(|a| a.own.top1)),
            opt(acc.map(|a| a.delta)),
            c.latency.own.p50_ms.to_string(),
            c.latency.own.p90_ms.to_string(),
            c.latency.speedup.to_string(),
            c.size.bytes.to_string(),
            c.size.size_ratio.to_string(),
            c.size.parameters.to_string(),
            opt(v.map(|v| v.agreement_delta)),
            opt(v.and_then(|v| v.negative_flip_rate)),
            opt(v.map(|v| v.speedup)),
            r.verdict.as_str().to_string(),
        ];
        w.write_record(&row).expect("writing to memory");
    }
    String::from_utf8(w.into_inner().expect("flushing to memory")).expect("CSV of UTF-8 text")
}
