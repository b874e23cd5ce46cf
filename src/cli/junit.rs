//! Gates as JUnit XML, so CI systems show them as tests: one testsuite per
//! candidate, one testcase per gate, a failure element with the threshold
//! and the value judged.

use crate::report::Report;

fn escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
        .replace('\'', "&apos;")
}

fn num(v: Option<f64>) -> String {
    v.map_or("undefined".into(), |x| format!("{x}"))
}

pub fn junit(r: &Report) -> String {
    let tests: usize = r.candidates.iter().map(|c| c.gates.checks.len()).sum();
    let failures: usize = r
        .candidates
        .iter()
        .map(|c| c.gates.checks.iter().filter(|k| !k.passed).count())
        .sum();
    let mut out = String::from("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    out += &format!(
        "<testsuites name=\"proctor {}\" tests=\"{tests}\" failures=\"{failures}\">\n",
        r.evaluation
    );
    for c in &r.candidates {
        let failed = c.gates.checks.iter().filter(|k| !k.passed).count();
        out += &format!(
            "  <testsuite name=\"{}\" id=\"{}\" tests=\"{}\" failures=\"{failed}\">\n",
            escape(&c.model.name),
            c.model.id,
            c.gates.checks.len()
        );
        for k in &c.gates.checks {
            let class = escape(&format!("proctor.{}", c.model.name));
            if k.passed {
                out += &format!(
                    "    <testcase classname=\"{class}\" name=\"{}\"/>\n",
                    escape(k.gate.as_str())
                );
            } else {
                let why = k.reason.clone().unwrap_or_else(|| {
                    format!("judged {} against threshold {}", num(k.judged), k.threshold)
                });
                out += &format!(
                    "    <testcase classname=\"{class}\" name=\"{gate}\">\n      <failure type=\"gate\" message=\"{msg}\">gate={gate} threshold={} judged={} estimate={}</failure>\n    </testcase>\n",
                    k.threshold,
                    num(k.judged),
                    num(k.estimate),
                    gate = escape(k.gate.as_str()),
                    msg = escape(&why),
                );
            }
        }
        out += "  </testsuite>\n";
    }
    out += "</testsuites>\n";
    out
}

#[cfg(test)]
mod tests {
    use super::escape;

    #[test]
    fn markup_in_names_is_escaped() {
        assert_eq!(escape("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
    }
}
