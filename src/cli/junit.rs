//! Gates as JUnit XML, so CI systems show them as tests: one testsuite per
//! candidate (named by the model alone, so test histories do not churn with
//! the rank), one testcase per gate, a failure with the value judged. The
//! XML is written by quick-junit, which keeps names with characters XML
//! cannot hold from breaking the file.

use quick_junit::{NonSuccessKind, Property, Report as JUnit, TestCase, TestCaseStatus, TestSuite};

use super::render::failure_text;
use crate::report::Report;

pub fn junit(r: &Report) -> String {
    let mut out = JUnit::new(format!("proctor {}", r.evaluation));
    for c in &r.candidates {
        let mut suite = TestSuite::new(c.model.name.as_str());
        suite.add_property(Property::new("model_id", c.model.id.to_string()));
        suite.add_property(Property::new("evaluation", r.evaluation.to_string()));
        for k in &c.gates.checks {
            let status = if k.passed {
                TestCaseStatus::success()
            } else {
                let why = failure_text(
                    k,
                    r.settings.gates.confidence,
                    r.dataset.class_names.as_deref(),
                );
                let mut s = TestCaseStatus::non_success(NonSuccessKind::Failure);
                s.set_type("gate").set_message(why).set_description(format!(
                    "gate={} threshold={} judged={} estimate={}",
                    k.gate,
                    k.threshold,
                    k.judged.map_or("undefined".into(), |v| v.to_string()),
                    k.estimate.map_or("undefined".into(), |v| v.to_string()),
                ));
                s
            };
            let mut case = TestCase::new(k.gate.as_str(), status);
            case.set_classname(format!("proctor.{}", c.model.name));
            suite.add_test_case(case);
        }
        out.add_test_suite(suite);
    }
    out.to_string()
        .expect("quick-junit writes every report it is given")
}
