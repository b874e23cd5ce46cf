//! A teacher's page: trends kept apart per project and evaluation set.

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::{GO_COMMIT, NOGO_COMMIT, OTHER_PROJECT, PROJECT, seed};

#[tokio::test]
async fn the_teacher_page_keeps_one_trend_per_project_and_set_with_commits_on_x_and_no_go_runs_marked()
 {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let c = &seeded.catalog;
    let b = Browser::start().await;
    b.open(&format!("{}/teachers/{}", s.base, c.teacher)).await;
    assert!(b.title().await.starts_with("Teacher teacher"));
    assert_eq!(b.row_ids().await.len(), 4);

    let projects = b.attrs("section.trend-group", "data-project").await;
    let sets = b.attrs("section.trend-group", "data-dataset").await;
    let mut groups: Vec<(String, String)> = projects.into_iter().zip(sets).collect();
    groups.sort();
    let mut want = vec![
        (PROJECT.to_string(), c.named_set.clone()),
        (PROJECT.to_string(), c.sites_set.clone()),
        (OTHER_PROJECT.to_string(), c.sites_set.clone()),
    ];
    want.sort();
    assert_eq!(groups, want, "one trend per (project, set)");

    let named = format!(
        "section.trend-group[data-project='{PROJECT}'][data-dataset='{}']",
        c.named_set
    );
    let agreement = format!("{named} svg.trend.agreement");
    assert_eq!(
        b.attrs(
            &format!("{agreement} a[data-evaluation]"),
            "data-evaluation"
        )
        .await,
        vec![seeded.go.clone(), seeded.nogo.clone()],
        "the named set's runs only, oldest first"
    );
    assert_eq!(
        b.texts(&format!("{agreement} text.x-tick")).await,
        vec![GO_COMMIT[..7].to_string(), NOGO_COMMIT[..7].to_string()],
        "commits on x"
    );
    assert_eq!(
        b.all(&format!("{agreement} a[data-evaluation] .point.nogo"))
            .await
            .len(),
        1
    );
    assert_eq!(
        b.all(&format!("{agreement} a[data-evaluation] .point.go"))
            .await
            .len(),
        1
    );
    let legend = b.texts(&format!("{agreement} g.legend")).await.join(" ");
    assert!(legend.contains("no-go"), "{legend}");

    for hi in b.attrs("svg.trend.agreement", "data-y-hi").await {
        assert!(hi.parse::<f64>().unwrap() <= 1.0, "agreement runs to {hi}");
    }
    for tick in b
        .attrs("svg.trend.agreement text.y-tick", "data-value")
        .await
    {
        assert!(
            tick.parse::<f64>().unwrap() <= 1.0 + 1e-9,
            "a tick at {tick}"
        );
    }
    b.screenshots("teacher").await;
    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}
