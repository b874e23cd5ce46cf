//! A finished evaluation's page: baseline, slices, classes, scatter.

use serde_json::Value;

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::seed;
use crate::{numbers_in, prop, signed, significant_digits};

fn name(c: &Value) -> &str {
    c["model"]["name"].as_str().unwrap()
}

#[tokio::test]
async fn the_evaluation_page_shows_the_baseline_beside_the_teacher_and_each_candidate_against_it() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let report = s
        .get(&format!("/v1/evaluations/{}/report", seeded.go))
        .await
        .body;
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{}", s.base, seeded.go))
        .await;

    // The summary names the recommended model and the gates near the top.
    let recommended = report["candidates"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["model"]["id"] == report["recommended"])
        .unwrap();
    assert!(b.text("#recommended").await.contains(name(recommended)));
    let gates = b.text("#gates").await;
    for gate in [
        "min_agreement ≥ 0.8",
        "min_class_agreement ≥ 0.55",
        "min_slice_agreement ≥ 0.15",
    ] {
        assert!(gates.contains(gate), "{gate} not in {gates}");
    }
    assert!(gates.contains("confidence 0.95"), "{gates}");

    // The baseline is a reference row beside the teacher.
    let baseline = &report["baseline"];
    let row = b.text("table#candidates tr.reference.baseline").await;
    assert!(row.contains(name(baseline)), "{row}");
    assert!(
        row.contains(&prop(&baseline["fidelity"]["agreement"])),
        "{row}"
    );
    assert!(row.contains(&prop(&baseline["accuracy"]["top1"])), "{row}");
    assert_eq!(
        b.all("table#candidates tr.reference.teacher").await.len(),
        1
    );

    // Each candidate against the baseline, with the report's figures.
    for c in report["candidates"].as_array().unwrap() {
        let v = &c["versus_baseline"];
        let cells = b
            .text(&format!(
                "table#versus-baseline tr.versus[data-model='{}']",
                name(c)
            ))
            .await;
        for want in [
            prop(&v["agreement"]),
            signed(&v["agreement_delta"]),
            prop(&v["teacher_flip_rate"]),
            signed(&v["top1_delta"]),
            prop(&v["negative_flip_rate"]),
            format!("{:.3}", v["size_ratio"].as_f64().unwrap()),
        ] {
            assert!(cells.contains(&want), "{} lacks {want}: {cells}", name(c));
        }
        let ci = &v["agreement_delta_ci"];
        let interval = format!(
            "[{:+.3}, {:+.3}]",
            ci[0].as_f64().unwrap(),
            ci[1].as_f64().unwrap()
        );
        assert!(cells.contains(&interval), "{cells} lacks {interval}");
    }

    // Failed gates in words, with the class's name and the slice's value.
    let class_names = report["dataset"]["class_names"].as_array().unwrap();
    let table = b.text("table#candidates").await;
    for c in report["candidates"].as_array().unwrap() {
        for k in c["gates"]["checks"].as_array().unwrap() {
            if k["passed"] == true {
                continue;
            }
            let mut want = format!("fails {}", k["gate"].as_str().unwrap());
            match (k["gate"].as_str().unwrap(), &k["at"]) {
                ("min_class_agreement", Value::Number(n)) => {
                    let i = n.as_u64().unwrap() as usize;
                    want.push_str(&format!(
                        " at class {i} · {}",
                        class_names[i].as_str().unwrap()
                    ));
                }
                ("min_slice_agreement", Value::String(slice)) => {
                    want.push_str(&format!(" at slice {slice}"));
                }
                _ => {}
            }
            assert!(table.contains(&want), "{table} lacks {want}");
        }
    }
    b.screenshots("evaluation").await;
    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}

/// The slice with the lowest agreement, the lower interval end breaking ties.
fn worst_slice(slices: &[Value]) -> String {
    let key = |s: &Value| {
        (
            s["agreement"].as_f64().unwrap(),
            s["agreement_ci"][0].as_f64().unwrap(),
        )
    };
    let worst = slices
        .iter()
        .min_by(|a, b| key(a).partial_cmp(&key(b)).unwrap())
        .unwrap();
    match &worst["slice"] {
        Value::String(s) => s.clone(),
        other => other.to_string(),
    }
}

#[tokio::test]
async fn each_models_worst_slice_is_marked_in_words() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let report = s
        .get(&format!("/v1/evaluations/{}/report", seeded.go))
        .await
        .body;
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{}", s.base, seeded.go))
        .await;
    let models: Vec<&Value> = std::iter::once(&report["baseline"])
        .chain(report["candidates"].as_array().unwrap())
        .collect();
    for m in models {
        let group = format!("table#slices tbody[data-model='{}']", name(m));
        let slices = m["slices"].as_array().unwrap();
        assert_eq!(
            b.all(&format!("{group} tr.slice")).await.len(),
            slices.len()
        );
        let marked = b.attrs(&format!("{group} tr.worst"), "data-slice").await;
        assert_eq!(
            marked,
            vec![worst_slice(slices)],
            "the worst slice of {}",
            name(m)
        );
        let words = b.texts(&format!("{group} tr.worst")).await;
        assert!(words[0].contains("worst slice"), "{words:?}");
    }
    b.close().await;
}

#[tokio::test]
async fn per_class_figures_switch_model_by_link_and_name_the_classes() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let report = s
        .get(&format!("/v1/evaluations/{}/report", seeded.go))
        .await
        .body;
    let names: Vec<&str> = report["dataset"]["class_names"]
        .as_array()
        .unwrap()
        .iter()
        .map(|n| n.as_str().unwrap())
        .collect();
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{}", s.base, seeded.go))
        .await;
    assert!(
        b.text("#classes")
            .await
            .contains("candidate_wide (recommended)")
    );

    b.click("#class-choice a[data-model='candidate_lean']")
        .await;
    assert!(
        b.url()
            .await
            .contains(&format!("classes={}", seeded.catalog.lean)),
        "{}",
        b.url().await
    );
    assert!(b.text("#classes").await.contains("candidate_lean"));
    let lean = report["candidates"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["model"]["name"] == "candidate_lean")
        .unwrap();
    let classes = b.text("#class-agreement").await;
    for k in lean["fidelity"]["class_agreement"].as_array().unwrap() {
        let i = k["class"].as_u64().unwrap() as usize;
        assert!(
            classes.contains(&format!("{i} · {}", names[i])),
            "{classes}"
        );
        assert!(classes.contains(&prop(&k["agreement"])), "{classes}");
    }
    let d = &lean["fidelity"]["disagreements"][0];
    let (t, st) = (
        d["teacher_class"].as_u64().unwrap() as usize,
        d["student_class"].as_u64().unwrap() as usize,
    );
    let disagreements = b.text("#disagreements").await;
    assert!(
        disagreements.contains(&format!("{t} · {}", names[t])),
        "{disagreements}"
    );
    assert!(
        disagreements.contains(&format!("{st} · {}", names[st])),
        "{disagreements}"
    );

    // Bars are scaled so that four points of agreement are plainly apart.
    let bars = b
        .run(
            "return Array.from(document.querySelectorAll('#class-agreement .bar'))\
             .map(e => [parseFloat(e.dataset.value), e.getBoundingClientRect().width]);",
        )
        .await;
    let bars: Vec<(f64, f64)> = bars
        .as_array()
        .unwrap()
        .iter()
        .map(|p| (p[0].as_f64().unwrap(), p[1].as_f64().unwrap()))
        .collect();
    let lo = bars
        .iter()
        .copied()
        .min_by(|a, b| a.0.total_cmp(&b.0))
        .unwrap();
    let hi = bars
        .iter()
        .copied()
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .unwrap();
    let px_per_unit = (hi.1 - lo.1) / (hi.0 - lo.0);
    assert!(
        px_per_unit * (0.97 - 0.93) > 10.0,
        "0.93 and 0.97 would be {:.1} px apart",
        px_per_unit * 0.04
    );
    assert!(
        b.text("#class-agreement caption")
            .await
            .contains("not from 0")
    );

    // The baseline's classes are one link away too.
    b.click("#class-choice a[data-model='production']").await;
    assert!(b.text("#classes").await.contains("production (baseline)"));
    b.screenshots("evaluation-classes").await;
    b.close().await;
}

#[tokio::test]
async fn the_scatter_spans_enough_latency_draws_the_references_and_rounds_its_hover_text() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let report = s
        .get(&format!("/v1/evaluations/{}/report", seeded.go))
        .await
        .body;
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{}", s.base, seeded.go))
        .await;
    let candidates = report["candidates"].as_array().unwrap();
    assert_eq!(
        b.all("svg.scatter circle.marker[data-model]").await.len(),
        candidates.len()
    );
    let on_front = candidates
        .iter()
        .filter(|c| c["pareto_optimal"] == true)
        .count();
    assert_eq!(
        b.all("svg.scatter circle.marker.front[data-model]")
            .await
            .len(),
        on_front
    );
    assert_eq!(
        b.all("svg.scatter rect.ref.teacher title").await.len(),
        1,
        "the teacher drawn"
    );
    assert_eq!(
        b.all("svg.scatter polygon.ref.baseline title").await.len(),
        1,
        "the baseline drawn"
    );

    // The x axis spans at least ±20 % of the latencies' centre.
    let p50s: Vec<f64> = candidates
        .iter()
        .map(|c| c["latency"]["p50_ms"].as_f64().unwrap())
        .chain([
            report["teacher"]["latency"]["p50_ms"].as_f64().unwrap(),
            report["baseline"]["latency"]["p50_ms"].as_f64().unwrap(),
        ])
        .collect();
    let (min, max) = p50s
        .iter()
        .fold((f64::MAX, f64::MIN), |(l, h), v| (l.min(*v), h.max(*v)));
    let lo: f64 = b.attrs("svg.scatter", "data-x-lo-ms").await[0]
        .parse()
        .unwrap();
    let hi: f64 = b.attrs("svg.scatter", "data-x-hi-ms").await[0]
        .parse()
        .unwrap();
    assert!(
        hi - lo >= 0.4 * (min + max) / 2.0 * 0.999,
        "x spans {lo}..{hi} ms for latencies {min}..{max} ms"
    );
    assert!(lo <= min && hi >= max, "every latency inside the axis");

    // A legend for colour and marker area.
    let legend = b.texts("svg.scatter g.legend").await.join(" ");
    for words in [
        "Pareto front",
        "not on the front",
        "file size",
        "teacher",
        "baseline",
    ] {
        assert!(legend.contains(words), "{legend} lacks {words}");
    }

    // Hover text rounded: no figure with more than six significant digits.
    for title in b.texts("svg title").await {
        for n in numbers_in(&title) {
            assert!(significant_digits(&n) <= 6, "{n} in {title:?}");
        }
    }

    // Names beside markers do not overlap.
    let boxes = b
        .run(
            "return Array.from(document.querySelectorAll('svg.scatter text.name'))\
             .map(e => { const r = e.getBoundingClientRect(); return [r.left, r.right, r.top, r.bottom]; });",
        )
        .await;
    let boxes: Vec<Vec<f64>> = boxes
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            r.as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect()
        })
        .collect();
    assert_eq!(boxes.len(), candidates.len() + 2);
    for (i, a) in boxes.iter().enumerate() {
        for c in &boxes[i + 1..] {
            let overlap =
                a[0] < c[1] - 1.0 && c[0] < a[1] - 1.0 && a[2] < c[3] - 1.0 && c[2] < a[3] - 1.0;
            assert!(!overlap, "labels overlap: {a:?} and {c:?}");
        }
    }
    b.close().await;
}
