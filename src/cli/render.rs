//! A report as a reviewer reads it first: a ranked table (terminal or
//! Markdown), the teacher as the reference row, figures rounded for reading.

use crate::report::{Candidate, Report, Verdict};

const HEADERS: [&str; 10] = [
    "rank",
    "model",
    "agreement",
    "kl",
    "top1",
    "Δtop1",
    "p90 ms",
    "speedup",
    "size",
    "gates",
];

fn opt(v: Option<f64>, digits: usize) -> String {
    v.map_or("—".into(), |x| format!("{x:.digits$}"))
}

/// In words, not colour: "pass", or the first failed gate with its figures.
pub fn gate_text(c: &Candidate) -> String {
    if c.gates.checks.is_empty() {
        return "no gates".into();
    }
    match c.gates.checks.iter().find(|k| !k.passed) {
        None => format!("pass ({})", c.gates.checks.len()),
        Some(k) => match (&k.reason, k.judged) {
            (Some(r), _) => format!("FAIL {}: {r}", k.gate),
            (None, Some(j)) => format!("FAIL {} ({} vs {})", k.gate, short(j), short(k.threshold)),
            (None, None) => format!("FAIL {}", k.gate),
        },
    }
}

fn short(x: f64) -> String {
    if x.abs() >= 1000.0 {
        format!("{x:.0}")
    } else {
        format!("{x:.4}")
    }
}

fn rows(r: &Report) -> Vec<[String; 10]> {
    let t = &r.teacher;
    let mut out = vec![[
        "ref".into(),
        format!("{} (teacher)", t.model.name),
        "—".into(),
        "—".into(),
        opt(t.accuracy.as_ref().map(|a| a.top1), 4),
        "—".into(),
        format!("{:.3}", t.latency.p90_ms),
        "1.00×".into(),
        "1.000".into(),
        "—".into(),
    ]];
    for c in &r.candidates {
        let acc = c.accuracy.as_ref();
        out.push([
            c.rank.to_string(),
            format!(
                "{}{}",
                c.model.name,
                if c.pareto_optimal { " *" } else { "" }
            ),
            format!("{:.4}", c.fidelity.agreement),
            format!("{:.4}", c.fidelity.kl),
            opt(acc.map(|a| a.own.top1), 4),
            acc.map_or("—".into(), |a| format!("{:+.4}", a.delta)),
            format!("{:.3}", c.latency.own.p90_ms),
            format!("{:.2}×", c.latency.speedup),
            format!("{:.3}", c.size.size_ratio),
            gate_text(c),
        ]);
    }
    out
}

fn verdict_line(r: &Report) -> String {
    match (
        r.verdict,
        r.candidates
            .iter()
            .find(|c| Some(c.model.id) == r.recommended),
    ) {
        (Verdict::Go, Some(c)) => format!(
            "verdict: GO — recommended {} ({})",
            c.model.name, c.model.id
        ),
        (Verdict::Go, None) => "verdict: GO".into(),
        (Verdict::NoGo, _) => "verdict: NO-GO — no candidate passes every gate".into(),
    }
}

/// The plain-text table for a terminal or a CI log.
pub fn table(r: &Report) -> String {
    let rows = rows(r);
    let widths: Vec<usize> = (0..HEADERS.len())
        .map(|i| {
            rows.iter()
                .map(|row| row[i].chars().count())
                .chain([HEADERS[i].chars().count()])
                .max()
                .unwrap_or(0)
        })
        .collect();
    let line = |cells: &[String]| -> String {
        cells
            .iter()
            .zip(&widths)
            .enumerate()
            .map(|(i, (c, w))| {
                if i == 1 || i == 9 {
                    format!("{c:<w$}")
                } else {
                    format!("{c:>w$}")
                }
            })
            .collect::<Vec<_>>()
            .join("  ")
            .trim_end()
            .to_string()
    };
    let header: Vec<String> = HEADERS.iter().map(|h| h.to_string()).collect();
    let mut out = vec![line(&header)];
    out.extend(rows.iter().map(|row| line(row)));
    out.push(String::new());
    out.push(format!(
        "{} samples of '{}', T = {}, ranked by {}; * marks the Pareto front (quality, p50, bytes)",
        r.dataset.samples,
        r.dataset.name,
        r.settings.temperature,
        serde_json::to_value(r.settings.rank_by)
            .ok()
            .and_then(|v| v.as_str().map(str::to_string))
            .unwrap_or_default()
    ));
    out.push(verdict_line(r));
    out.join("\n") + "\n"
}

/// A Markdown summary for CI job pages.
pub fn markdown(r: &Report, link: Option<&str>) -> String {
    let mut out = format!(
        "## Proctor evaluation `{}`\n\n**{}**\n\n",
        r.evaluation,
        verdict_line(r)
    );
    out += &format!(
        "| {} |\n|{}|\n",
        HEADERS.join(" | "),
        HEADERS.map(|_| "---").join("|")
    );
    for row in rows(r) {
        let cells: Vec<String> = row.iter().map(|c| c.replace('|', "\\|")).collect();
        out += &format!("| {} |\n", cells.join(" | "));
    }
    out += &format!(
        "\n{} samples of `{}`; temperature {}; * marks the Pareto front.\n",
        r.dataset.samples, r.dataset.name, r.settings.temperature
    );
    if let Some(l) = link {
        out += &format!("\nFull report: {l}\n");
    }
    out += "\nFigures on an evaluation set do not guarantee behaviour on live data.\n";
    out
}
