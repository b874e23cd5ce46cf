//! A project's page: its baseline now and before, its evaluations, and
//! the way to compare two of them.

use serde_json::json;

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::{OTHER_PROJECT, PROJECT, raw_client, seed};

#[tokio::test]
async fn the_project_page_shows_its_baseline_and_history_and_leads_to_a_comparison() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let c = &seeded.catalog;
    // twin passed every gate of the go evaluation: it may become the baseline.
    let put = s
        .put_json(
            &format!("/v1/projects/{PROJECT}/baseline"),
            &json!({"model": c.twin, "evaluation": seeded.go}),
        )
        .await;
    assert_eq!(put.status, 200, "{}", put.body);
    let b = Browser::start().await;
    b.open(&format!("{}/evaluations/{}", s.base, seeded.go))
        .await;
    b.click(&format!("#summary a[href='/projects/{PROJECT}']"))
        .await;
    assert!(b.title().await.starts_with(&format!("Project {PROJECT}")));

    let now = b.text("#baseline-now").await;
    assert!(now.contains("twin"), "{now}");
    assert!(
        now.contains("access off"),
        "set_by is null with access off: {now}"
    );
    assert_eq!(
        b.attrs("#baseline-now a", "href").await,
        vec![format!("/evaluations/{}", seeded.go)]
    );
    assert_eq!(
        b.attrs("#baseline-history tr.baseline", "data-model").await,
        vec![c.twin.clone(), c.production.clone()],
        "newest first"
    );
    assert!(
        b.text("#baseline-history tr.baseline")
            .await
            .contains("current")
    );
    let mut rows = b.row_ids().await;
    rows.sort();
    let mut want = vec![seeded.go.clone(), seeded.nogo.clone(), seeded.sites.clone()];
    want.sort();
    assert_eq!(rows, want, "the project's evaluations only");
    b.screenshots("project").await;

    b.select("#compare-a", &seeded.go).await;
    b.select("#compare-b", &seeded.nogo).await;
    b.click("#compare").await;
    assert!(
        b.url().await.contains(&format!("a={}", seeded.go)),
        "{}",
        b.url().await
    );
    let verdict = b.text("#compare-verdict").await;
    assert!(verdict.contains("moved from go to no-go"), "{verdict}");
    assert_eq!(
        b.attrs("#matches tr.match", "data-match").await,
        vec!["model"; 3],
        "the same three model files in both"
    );
    let gates = b
        .text("#movement tbody[data-model='candidate_wide'] tr[data-figure='gates']")
        .await;
    assert!(gates.contains("now fails a gate"), "{gates}");
    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}

#[tokio::test]
async fn comparing_evaluations_of_two_projects_is_refused_with_a_page() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let path = format!("/compare?a={}&b={}", seeded.go, seeded.other);
    let b = Browser::start().await;
    b.open(&format!("{}{path}", s.base)).await;
    assert_eq!(
        b.attrs("#problem", "data-status").await,
        vec!["422".to_string()]
    );
    let detail = b.text(".problem-detail").await;
    assert!(
        detail.contains(PROJECT) && detail.contains(OTHER_PROJECT),
        "{detail}"
    );
    b.screenshots("compare-refused").await;
    let page = raw_client()
        .get(format!("{}{path}", s.base))
        .header("accept", "text/html")
        .send()
        .await
        .unwrap();
    assert_eq!(page.status(), 422);
    assert!(
        page.headers()["content-type"]
            .to_str()
            .unwrap()
            .starts_with("text/html")
    );
    let api = raw_client()
        .get(format!("{}{path}", s.base))
        .header("accept", "application/json")
        .send()
        .await
        .unwrap();
    assert_eq!(api.status(), 422);
    assert!(
        api.headers()["content-type"]
            .to_str()
            .unwrap()
            .starts_with("application/problem+json")
    );
    b.close().await;
}
