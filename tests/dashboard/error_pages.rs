//! Errors: pages for a browser, problem+json for API clients.

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::raw_client;

#[tokio::test]
async fn a_browser_gets_an_html_404_and_an_api_client_still_gets_problem_json() {
    let s = Server::start(&[]);
    let b = Browser::start().await;
    b.open(&format!("{}/no/such/page", s.base)).await;
    assert!(
        b.title().await.starts_with("404 Not Found"),
        "{}",
        b.title().await
    );
    assert_eq!(
        b.attrs("#problem", "data-status").await,
        vec!["404".to_string()]
    );
    let missing = "0190a1b2-c3d4-7e5f-8a6b-7c8d9e0f1a2b";
    b.open(&format!("{}/evaluations/{missing}", s.base)).await;
    assert!(b.text(".problem-detail").await.contains(missing));
    assert_eq!(
        b.all("header.bar").await.len(),
        1,
        "the site's own page shell"
    );
    b.screenshots("not-found").await;
    b.close().await;

    for path in [
        format!("/evaluations/{missing}"),
        "/no/such/page".to_string(),
    ] {
        let api = raw_client()
            .get(format!("{}{path}", s.base))
            .header("accept", "application/json")
            .send()
            .await
            .unwrap();
        assert_eq!(api.status(), 404);
        let kind = api.headers()["content-type"].to_str().unwrap().to_string();
        assert!(
            kind.starts_with("application/problem+json"),
            "{path}: {kind}"
        );
        let body: serde_json::Value = api.json().await.unwrap();
        assert_eq!(body["status"], 404);
    }
    let plain = s.get(&format!("/v1/evaluations/{missing}")).await;
    assert_eq!(
        (plain.status, plain.content_type.as_str()),
        (404, "application/problem+json")
    );
}
