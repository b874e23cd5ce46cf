//! A report as a reviewer reads it first: a ranked table (terminal or
//! Markdown) with the teacher as the reference row, every failed gate in
//! words, figures rounded for reading.

use crate::engine::gates::{GateCheck, GateName};
use crate::report::numbers::{interval, significant};
use crate::report::{Candidate, Key, Report, Verdict};

const HEADERS: [&str; 10] = [
    "rank",
    "model",
    "agreement",
    "kl",
    "top1",
    "Δtop1",
    "p90 ms [95% CI]",
    "speedup",
    "size ratio",
    "gates",
];

/// Columns read left-aligned (names and words); the rest are numbers.
const LEFT: [usize; 2] = [1, 9];

fn opt(v: Option<f64>) -> String {
    v.map_or("—".into(), |x| format!("{x:.4}"))
}

/// The model column: the name, and the role when the name does not say it.
fn named(name: &str, role: &str) -> String {
    if name == role {
        name.to_string()
    } else {
        format!("{name} ({role})")
    }
}

/// In words, not colour: how many gates pass; the failures are listed below.
pub fn gate_text(c: &Candidate) -> String {
    let total = c.gates.checks.len();
    let failed = c.gates.failed().count();
    match (total, failed) {
        (0, _) => "no gates".into(),
        (t, 0) => format!("pass {t}/{t}"),
        (t, f) => format!("FAIL {f} of {t}"),
    }
}

/// A class as people name it: its index, and its name when the set has one.
pub fn class_label(class: usize, names: Option<&[String]>) -> String {
    match names.and_then(|n| n.get(class)) {
        Some(name) => format!("{class} ({name})"),
        None => class.to_string(),
    }
}

/// One failed check in full: the value judged, what it is, the threshold.
pub fn failure_text(k: &GateCheck, confidence: Option<f64>, classes: Option<&[String]>) -> String {
    let at = match (&k.at, k.gate) {
        (Some(Key::Int(c)), GateName::MinClassAgreement) => {
            format!(" at class {}", class_label(*c as usize, classes))
        }
        (Some(a), _) => format!(" at {a}"),
        (None, _) => String::new(),
    };
    match (&k.reason, k.judged) {
        (Some(reason), _) => format!("{}{at}: {reason}", k.gate),
        (None, Some(judged)) => {
            let what = k.gate.judged_as(confidence);
            let estimate = match k.estimate {
                Some(e) if what != "estimate" => format!(", estimate {}", significant(e)),
                _ => String::new(),
            };
            format!(
                "{}{at}: judged {} ({what}{estimate}); passes when {} {}",
                k.gate,
                significant(judged),
                k.gate.passes_when(),
                significant(k.threshold)
            )
        }
        (None, None) => format!("{}{at}: no figure to judge", k.gate),
    }
}

fn rows(r: &Report) -> Vec<[String; 10]> {
    let t = &r.teacher;
    let mut out = vec![[
        "ref".into(),
        named(&t.model.name, "teacher"),
        "—".into(),
        "—".into(),
        opt(t.accuracy.as_ref().map(|a| a.top1)),
        "—".into(),
        format!(
            "{} {}",
            significant(t.latency.p90_ms),
            interval(t.latency.p90_ci_ms)
        ),
        "1×".into(),
        "1".into(),
        "—".into(),
    ]];
    if let Some(b) = &r.baseline {
        let acc = b.accuracy.as_ref();
        out.push([
            "base".into(),
            named(&b.model.name, "baseline"),
            format!("{:.4}", b.fidelity.agreement),
            format!("{:.4}", b.fidelity.kl),
            opt(acc.map(|a| a.own.top1)),
            acc.map_or("—".into(), |a| format!("{:+.4}", a.delta)),
            format!(
                "{} {}",
                significant(b.latency.own.p90_ms),
                interval(b.latency.own.p90_ci_ms)
            ),
            format!("{}×", significant(b.latency.speedup)),
            significant(b.size.size_ratio),
            "—".into(),
        ]);
    }
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
            opt(acc.map(|a| a.own.top1)),
            acc.map_or("—".into(), |a| format!("{:+.4}", a.delta)),
            format!(
                "{} {}",
                significant(c.latency.own.p90_ms),
                interval(c.latency.own.p90_ci_ms)
            ),
            format!("{}×", significant(c.latency.speedup)),
            significant(c.size.size_ratio),
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

/// The gates as set, e.g. "min_agreement >= 0.9, max_p90_ms <= 5; judged at
/// the cautious end of 95 % intervals".
fn gates_line(r: &Report) -> String {
    let g = &r.settings.gates;
    if g.is_empty() {
        return "gates: none".into();
    }
    let list: Vec<String> = g
        .thresholds()
        .into_iter()
        .map(|(gate, v)| format!("{gate} {} {}", gate.passes_when(), significant(v)))
        .collect();
    let how = match g.confidence {
        Some(c) => format!(
            "interval gates judged at their cautious end at {} confidence",
            significant(c)
        ),
        None => "judged on the estimates".into(),
    };
    format!("gates: {}; {how}", list.join(", "))
}

/// Every failed check of every candidate, in rank order.
fn failures(r: &Report) -> Vec<(String, String)> {
    r.candidates
        .iter()
        .flat_map(|c| {
            c.gates.failed().map(|k| {
                (
                    c.model.name.clone(),
                    failure_text(
                        k,
                        r.settings.gates.confidence,
                        r.dataset.class_names.as_deref(),
                    ),
                )
            })
        })
        .collect()
}

fn rank_name(r: &Report) -> String {
    serde_json::to_value(r.settings.rank_by)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

const VERSUS_HEADERS: [&str; 7] = [
    "model",
    "alike",
    "Δagreement [95% CI]",
    "teacher flips",
    "Δtop1 [95% CI]",
    "negative flips",
    "speedup",
];

/// Each candidate against the baseline, when there is one.
fn versus_rows(r: &Report) -> Vec<[String; 7]> {
    let signed = |v: f64| format!("{v:+.4}");
    let with_ci = |v: f64, ci: [f64; 2]| format!("{} {}", signed(v), interval(ci));
    r.candidates
        .iter()
        .filter_map(|c| {
            let v = c.versus_baseline.as_ref()?;
            Some([
                c.model.name.clone(),
                format!("{:.4}", v.agreement),
                with_ci(v.agreement_delta, v.agreement_delta_ci),
                format!("{:.4}", v.teacher_flip_rate),
                v.top1_delta
                    .zip(v.top1_delta_ci)
                    .map_or("—".into(), |(d, ci)| with_ci(d, ci)),
                opt(v.negative_flip_rate),
                format!("{}×", significant(v.speedup)),
            ])
        })
        .collect()
}

/// Lines of a plain-text table with aligned columns; columns in `left`
/// read left-aligned.
fn aligned<const N: usize>(
    headers: [&str; N],
    rows: &[[String; N]],
    left: &[usize],
) -> Vec<String> {
    let widths: Vec<usize> = (0..N)
        .map(|i| {
            rows.iter()
                .map(|row| row[i].chars().count())
                .chain([headers[i].chars().count()])
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
                if left.contains(&i) {
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
    let header: Vec<String> = headers.iter().map(|h| h.to_string()).collect();
    let mut out = vec![line(&header)];
    out.extend(rows.iter().map(|row| line(row)));
    out
}

/// The plain-text table for a terminal or a CI log.
pub fn table(r: &Report) -> String {
    let mut out = aligned(HEADERS, &rows(r), &LEFT);
    out.push(String::new());
    out.push(format!(
        "{} samples of '{}', T = {}, ranked by {}; * marks the Pareto front (quality, speed, bytes)",
        r.dataset.samples,
        r.dataset.name,
        r.settings.temperature,
        rank_name(r)
    ));
    if let Some(b) = &r.baseline {
        out.push(String::new());
        out.push(format!(
            "against the baseline {} (the student in production):",
            b.model.name
        ));
        out.extend(aligned(VERSUS_HEADERS, &versus_rows(r), &[0]));
    }
    let notes = r.model_notes();
    if !notes.is_empty() {
        out.push("notes:".into());
        for (model, note) in notes {
            out.push(format!("  {model}: {note}"));
        }
    }
    out.push(gates_line(r));
    let failed = failures(r);
    if !failed.is_empty() {
        out.push("failed gates:".into());
        for (model, text) in failed {
            out.push(format!("  {model}: {text}"));
        }
    }
    out.push(verdict_line(r));
    out.join("\n") + "\n"
}

fn md_cell(text: &str) -> String {
    text.replace('|', "\\|")
}

/// A Markdown summary for CI job pages; `page` links to the evaluation's
/// dashboard page and `json` to its report.
pub fn markdown(r: &Report, page: Option<&str>, json: Option<&str>) -> String {
    let mut out = format!(
        "## Proctor evaluation `{}`\n\n**{}**\n\n{}\n\n",
        r.evaluation,
        verdict_line(r),
        gates_line(r)
    );
    out += &format!(
        "| {} |\n|{}|\n",
        HEADERS.join(" | "),
        HEADERS.map(|_| "---").join("|")
    );
    for row in rows(r) {
        let cells: Vec<String> = row.iter().map(|c| md_cell(c)).collect();
        out += &format!("| {} |\n", cells.join(" | "));
    }
    out += &format!(
        "\n{} samples of `{}`; temperature {}; ranked by {}; * marks the Pareto front.\n",
        r.dataset.samples,
        md_cell(&r.dataset.name),
        r.settings.temperature,
        rank_name(r)
    );
    if let Some(b) = &r.baseline {
        out += &format!(
            "\n**Against the baseline `{}`** (the student in production)\n\n| {} |\n|{}|\n",
            md_cell(&b.model.name),
            VERSUS_HEADERS.join(" | "),
            VERSUS_HEADERS.map(|_| "---").join("|")
        );
        for row in versus_rows(r) {
            let cells: Vec<String> = row.iter().map(|c| md_cell(c)).collect();
            out += &format!("| {} |\n", cells.join(" | "));
        }
    }
    let failed = failures(r);
    if !failed.is_empty() {
        out += "\n**Failed gates**\n\n";
        for (model, text) in failed {
            out += &format!("- `{}`: {}\n", md_cell(&model), md_cell(&text));
        }
    }
    match (page, json) {
        (Some(p), Some(j)) => out += &format!("\n[Dashboard page]({p}) · [JSON report]({j})\n"),
        (Some(p), None) => out += &format!("\n[Dashboard page]({p})\n"),
        (None, Some(j)) => out += &format!("\n[JSON report]({j})\n"),
        (None, None) => {}
    }
    out += "\nFigures on an evaluation set do not guarantee behaviour on live data.\n";
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::engine::gates::GateName;

    fn check(gate: GateName, judged: f64, estimate: f64, threshold: f64) -> GateCheck {
        GateCheck {
            gate,
            threshold,
            judged: Some(judged),
            estimate: Some(estimate),
            passed: false,
            at: None,
            reason: None,
        }
    }

    #[test]
    fn a_failure_says_what_was_judged_and_at_what_confidence() {
        let k = check(GateName::MinAgreement, 0.881_234_5, 0.893, 0.9);
        assert_eq!(
            failure_text(&k, Some(0.95), None),
            "min_agreement: judged 0.8812 (Wilson lower bound at 95 %, estimate 0.893); \
             passes when >= 0.9"
        );
        assert_eq!(
            failure_text(&k, None, None),
            "min_agreement: judged 0.8812 (estimate); passes when >= 0.9"
        );
    }

    #[test]
    fn a_class_gate_names_the_class_judged_by_its_name() {
        let mut k = check(GateName::MinClassAgreement, 0.7, 0.8, 0.9);
        k.at = Some(Key::Int(1));
        let names = ["sound".to_string(), "cracked".to_string()];
        assert!(
            failure_text(&k, None, Some(&names))
                .starts_with("min_class_agreement at class 1 (cracked):"),
            "{}",
            failure_text(&k, None, Some(&names))
        );
    }

    #[test]
    fn a_role_is_named_only_when_the_name_does_not_say_it() {
        assert_eq!(named("teacher", "teacher"), "teacher");
        assert_eq!(named("resnet-big", "teacher"), "resnet-big (teacher)");
    }
}
