//! Latency figures from recorded rounds against numpy and scipy
//! (tests/reference/generate.py, case "timing"): order-statistic intervals
//! against `scipy.stats.binom.ppf`, percentiles, paired speedups and paces.
//! No live timing: the rounds are recorded in the fixture.

use proctor::engine::latency::{summarize, summarize_against};
use proctor::engine::speed::{Pace, pace};
use proctor::engine::stats::quantile_ranks;
use serde_json::{Value, json};

use crate::support::{SAME_LOGITS, assert_matches, expected};

fn column(doc: &Value, model: usize) -> Vec<f64> {
    doc["rounds"]
        .as_array()
        .unwrap()
        .iter()
        .map(|row| row[model].as_f64().unwrap())
        .collect()
}

#[test]
fn order_statistic_ranks_match_scipy_binom_ppf() {
    let doc = expected("timing");
    let cases = doc["intervals"].as_array().unwrap();
    assert!(
        cases.len() > 200,
        "the fixture covers many R, q and confidences"
    );
    for c in cases {
        let (r, q, conf) = (
            c["r"].as_u64().unwrap() as usize,
            c["q"].as_f64().unwrap(),
            c["confidence"].as_f64().unwrap(),
        );
        let want = (
            c["l"].as_u64().unwrap() as usize,
            c["u"].as_u64().unwrap() as usize,
        );
        assert_eq!(quantile_ranks(r, q, conf), want, "R={r} q={q} c={conf}");
    }
}

#[test]
fn every_latency_figure_matches_numpy_from_the_same_rounds() {
    let doc = expected("timing");
    let models: Vec<&str> = doc["models"]
        .as_array()
        .unwrap()
        .iter()
        .map(|m| m.as_str().unwrap())
        .collect();
    assert_eq!(models[0], "teacher");
    let teacher = column(&doc, 0);
    for (i, name) in models.iter().enumerate() {
        let own = column(&doc, i);
        // throughput comes from the bulk pass, not from rounds.
        let got = if i == 0 {
            serde_json::to_value(summarize(&own, 0.0)).unwrap()
        } else {
            serde_json::to_value(summarize_against(&own, &teacher, 0.0)).unwrap()
        };
        let mut got = got;
        got.as_object_mut().unwrap().remove("throughput_sps");
        assert_matches(&got, &doc["figures"][name], SAME_LOGITS, name);
    }
}

#[test]
fn paces_between_every_pair_match_the_definition() {
    let doc = expected("timing");
    let tol = doc["tolerance"].as_f64().unwrap();
    let models = doc["models"].as_array().unwrap();
    for (a, ma) in models.iter().enumerate() {
        for (b, mb) in models.iter().enumerate() {
            if a == b {
                continue;
            }
            let key = format!("{}/{}", ma.as_str().unwrap(), mb.as_str().unwrap());
            let got = match pace(&column(&doc, a), &column(&doc, b), tol) {
                Pace::Faster => json!("faster"),
                Pace::Slower => json!("slower"),
                Pace::Equal => json!("equal"),
            };
            assert_eq!(got, doc["paces"][&key], "{key}");
        }
    }
}
