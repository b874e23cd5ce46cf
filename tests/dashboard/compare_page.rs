//! Two evaluations side by side: candidates matched by model id, then by
//! name, and every figure's movement said in words.

use serde_json::json;

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::{PROJECT, catalog, finished, request};

#[tokio::test]
async fn the_compare_page_matches_candidates_by_id_then_by_name_and_says_which_way_each_figure_moved()
 {
    let s = Server::start(&[]);
    // Two different files under one name, as a student retrained between
    // runs; uploaded first, so that the name they keep is "student".
    let fixture = |f: &str| crate::support::case_dir("baseline").join(f);
    let first = s
        .upload_model(&fixture("candidate_lean.onnx"), "student")
        .await;
    let retrained = s.upload_model(&fixture("twin.onnx"), "student").await;
    let id = |a: &crate::harness::Answer| a.body["id"].as_str().unwrap().to_string();
    let (first, retrained) = (id(&first), id(&retrained));
    assert_ne!(first, retrained);
    let c = catalog(&s).await;
    let gates = json!({"min_agreement": 0.8});
    let a = finished(
        &s,
        &request(
            &c,
            PROJECT,
            &c.named_set,
            &[&c.wide, &first],
            gates.clone(),
            "1111111",
            "main",
        ),
    )
    .await;
    let b_id = finished(
        &s,
        &request(
            &c,
            PROJECT,
            &c.named_set,
            &[&c.wide, &retrained],
            gates,
            "2222222",
            "main",
        ),
    )
    .await;
    let ra = s.get(&format!("/v1/evaluations/{a}/report")).await.body;
    let rb = s.get(&format!("/v1/evaluations/{b_id}/report")).await.body;
    let student = |r: &serde_json::Value| {
        r["candidates"]
            .as_array()
            .unwrap()
            .iter()
            .find(|c| c["model"]["name"] == "student")
            .unwrap()
            .clone()
    };
    let (sa, sb) = (student(&ra), student(&rb));

    let b = Browser::start().await;
    b.open(&format!("{}/compare?a={a}&b={b_id}", s.base)).await;
    let mut matches = b.attrs("#matches tr.match", "data-match").await;
    matches.sort();
    assert_eq!(matches, vec!["model", "name"]);
    let group = "#movement tbody[data-model='student']";
    let agreement = b
        .text(&format!("{group} tr[data-figure='agreement']"))
        .await;
    let (x, y) = (
        sa["fidelity"]["agreement"].as_f64().unwrap(),
        sb["fidelity"]["agreement"].as_f64().unwrap(),
    );
    assert!(
        agreement.contains(&format!("{x:.4}")) && agreement.contains(&format!("{y:.4}")),
        "{agreement}"
    );
    assert!(agreement.contains(&format!("{:+.4}", y - x)), "{agreement}");
    assert!(
        agreement.contains("up, better"),
        "direction in words: {agreement}"
    );
    let kl = b.text(&format!("{group} tr[data-figure='kl']")).await;
    assert!(kl.contains("down, better"), "{kl}");
    let gates = b.text(&format!("{group} tr[data-figure='gates']")).await;
    assert!(gates.contains("now passes every gate"), "{gates}");
    for figure in ["top1", "p50", "p90", "speedup", "bytes"] {
        assert_eq!(
            b.all(&format!("{group} tr[data-figure='{figure}']"))
                .await
                .len(),
            1,
            "{figure}"
        );
    }
    let same = b
        .text("#movement tbody[data-model='candidate_wide'] tr[data-figure='agreement']")
        .await;
    assert!(
        same.contains("unchanged"),
        "the same file on the same set: {same}"
    );
    b.screenshots("compare").await;
    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}
