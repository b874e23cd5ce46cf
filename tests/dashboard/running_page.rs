//! A queued or running evaluation's page: what it runs, its own progress
//! bar, no report link yet, and a cancel form that only our pages can use.

use std::time::{Duration, Instant};

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::{NAMED_SET, PROJECT, catalog, held, passing_gates, raw_client, request};

#[tokio::test]
async fn a_running_evaluation_says_what_it_runs_offers_no_report_yet_and_refreshes_until_it_ends() {
    let s = Server::holding("bulk");
    let c = catalog(&s).await;
    let body = request(
        &c,
        PROJECT,
        &c.named_set,
        &[&c.wide, &c.lean],
        passing_gates(),
        "0a1b2c3",
        "main",
    );
    let id = held(&s, &body, "bulk").await;
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{id}", s.base)).await;

    let summary = b.text("#summary").await;
    for want in [
        "teacher",
        "candidate_wide",
        "candidate_lean",
        "production",
        NAMED_SET,
        "300 samples",
        "min_agreement ≥ 0.8",
        "min_baseline_agreement_delta ≥ -0.02",
        "confidence 0.95",
    ] {
        assert!(
            summary.contains(want),
            "the summary lacks {want}: {summary}"
        );
    }
    assert!(
        b.all("a[href$='/report']").await.is_empty(),
        "no report link before the report exists"
    );
    assert!(
        b.all("progress").await.is_empty(),
        "no browser-drawn progress bar"
    );
    assert_eq!(
        b.attrs("#progress", "role").await,
        vec!["progressbar".to_string()]
    );
    assert_eq!(
        b.attrs("#progress", "class").await,
        vec!["meter".to_string()]
    );
    let (done, text, status) = b.progress().await;
    assert_eq!(status, "running");
    assert!(text.contains("bulk"), "the stage in words: {text}");
    assert_eq!(done, 0, "held at the start of the bulk pass");
    b.screenshots("running").await;

    s.release();
    // The page reloads itself every 2 s while the evaluation runs.
    let start = Instant::now();
    while b.progress().await.2 != "succeeded" {
        assert!(
            start.elapsed() < Duration::from_secs(60),
            "the page never showed the evaluation finished"
        );
        tokio::time::sleep(Duration::from_millis(250)).await;
    }
    assert_eq!(
        b.all("a[href$='/report']").await.len(),
        1,
        "the JSON report once it exists"
    );
    assert!(b.all("#cancel").await.is_empty(), "nothing left to cancel");
    b.close().await;
}

#[tokio::test]
async fn the_cancel_form_cancels_and_a_request_from_another_origin_is_refused() {
    let s = Server::holding("bulk");
    let c = catalog(&s).await;
    let body = request(
        &c,
        PROJECT,
        &c.named_set,
        &[&c.wide],
        serde_json::json!({}),
        "0a1b2c3",
        "main",
    );
    let id = held(&s, &body, "bulk").await;
    let url = format!("{}/evaluations/{id}/cancel", s.base);
    let client = raw_client();
    let form = |req: reqwest::RequestBuilder| {
        req.header("content-type", "application/x-www-form-urlencoded")
            .header("accept", "text/html,*/*;q=0.8")
            .body("")
    };
    let foreign = form(client.post(&url).header("origin", "http://evil.example"))
        .send()
        .await
        .unwrap();
    assert_eq!(foreign.status(), 403);
    let kind = foreign.headers()["content-type"]
        .to_str()
        .unwrap()
        .to_string();
    assert!(
        kind.starts_with("text/html"),
        "a page for the browser: {kind}"
    );
    let page = foreign.text().await.unwrap();
    assert!(
        page.contains("id=\"problem\" data-status=\"403\""),
        "{page}"
    );
    let cross_site = form(client.post(&url).header("sec-fetch-site", "cross-site"))
        .send()
        .await
        .unwrap();
    assert_eq!(cross_site.status(), 403);
    assert_eq!(
        s.evaluation(&id).await["status"],
        "running",
        "nothing was canceled"
    );

    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{id}", s.base)).await;
    b.click("#cancel").await;
    assert_eq!(b.progress().await.2, "canceled");
    assert!(
        b.url().await.ends_with(&format!("/evaluations/{id}")),
        "back on the page: {}",
        b.url().await
    );
    assert_eq!(s.evaluation(&id).await["status"], "canceled");
    b.screenshots("canceled").await;
    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}
