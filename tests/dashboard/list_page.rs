//! The list of evaluations: tags, sets, filters, and a table that fits.

use crate::browser::Browser;
use crate::harness::Server;
use crate::seed::{
    GO_COMMIT, NAMED_SET, OTHER_PROJECT, PROJECT, held, hold_again, passing_gates, request, seed,
};

#[tokio::test]
async fn the_list_shows_commit_branch_and_set_narrows_by_status_and_keeps_the_status_inside_the_table()
 {
    let s = Server::holding("bulk");
    s.release();
    let seeded = seed(&s).await;
    hold_again(&s);
    let c = &seeded.catalog;
    let body = request(
        c,
        "a-project-with-a-long-descriptive-name",
        &c.named_set,
        &[&c.wide, &c.lean, &c.twin],
        passing_gates(),
        "f00dfacecafe",
        "feature/long-branch-name-for-the-layout",
    );
    let running = held(&s, &body, "bulk").await;
    let b = Browser::start().await;

    b.open(&format!("{}/?status=succeeded", s.base)).await;
    assert_eq!(b.row_ids().await.len(), 4, "the status filter narrows");
    let row = b.text(&format!("tr.row[data-id='{}']", seeded.go)).await;
    for want in [&GO_COMMIT[..7], "main", NAMED_SET, PROJECT] {
        assert!(row.contains(want), "{row} lacks {want}");
    }
    assert_eq!(
        b.attrs(&format!("tr.row[data-id='{}'] code.id", seeded.go), "title")
            .await,
        vec![seeded.go.clone()],
        "the full id on hover"
    );
    assert_eq!(
        b.attrs(
            &format!("tr.row[data-id='{}'] a[href^='/projects/']", seeded.other),
            "href"
        )
        .await,
        vec![format!("/projects/{OTHER_PROJECT}")]
    );
    b.select("#filter-status", "running").await;
    b.click("#apply-filters").await;
    assert_eq!(b.row_ids().await, vec![running.clone()]);

    b.open(&format!("{}/", s.base)).await;
    b.screenshots("evaluations").await;

    // The status column, progress bar included, stays inside the table.
    for width in [1280, 1400] {
        b.set_width(width, 1000).await;
        b.open(&format!("{}/", s.base)).await;
        let cell = b
            .rect(&format!("tr.row[data-id='{running}'] td.status"))
            .await;
        let meter = b
            .rect(&format!("tr.row[data-id='{running}'] td.status .meter"))
            .await;
        let table = b.rect("table#evaluations").await;
        let page = b
            .run("return document.documentElement.clientWidth")
            .await
            .as_f64()
            .unwrap();
        assert!(
            meter.left >= cell.left - 0.5 && meter.right <= cell.right + 0.5,
            "at {width} px the bar spills out of its cell: {meter:?} {cell:?}"
        );
        assert!(
            cell.right <= table.right + 0.5,
            "at {width} px the status spills out of the table: {cell:?} {table:?}"
        );
        assert!(
            table.right <= page + 0.5,
            "at {width} px the table runs past the page: {table:?}, {page} px"
        );
    }

    // The header's wordmark and links sit on the bar's middle line.
    let bar = b.rect("header.bar").await;
    let middle = (bar.top + bar.bottom) / 2.0;
    for part in ["header.bar .mark", "header.bar nav a"] {
        let r = b.rect(part).await;
        let centre = (r.top + r.bottom) / 2.0;
        assert!(
            (centre - middle).abs() <= 2.0,
            "{part} is {centre} px, the bar's middle {middle} px"
        );
    }
    s.release();
    let errors = b.console_errors().await;
    assert!(errors.is_empty(), "console errors: {errors:?}");
    b.close().await;
}

#[tokio::test]
async fn filters_narrow_the_list() {
    let s = Server::start(&[]);
    let seeded = seed(&s).await;
    let b = Browser::start().await;
    b.open(&format!("{}/", s.base)).await;
    assert_eq!(b.row_ids().await.len(), 4);
    b.select("#filter-project", OTHER_PROJECT).await;
    b.click("#apply-filters").await;
    assert_eq!(b.row_ids().await, vec![seeded.other.clone()]);
    b.open(&format!("{}/", s.base)).await;
    b.select("#filter-verdict", "no-go").await;
    b.click("#apply-filters").await;
    assert_eq!(b.row_ids().await, vec![seeded.nogo.clone()]);
    b.open(&format!("{}/", s.base)).await;
    b.type_into("#filter-tag", "branch:night-shift").await;
    b.click("#apply-filters").await;
    assert_eq!(b.row_ids().await, vec![seeded.nogo]);
    b.close().await;
}

/// A service with more projects than a menu can usefully hold sends the 200
/// most recently evaluated, and a link filtering by an older one still shows
/// it selected.
#[tokio::test]
async fn the_project_menu_holds_the_200_most_recent_projects_and_keeps_a_linked_filter() {
    let s = Server::holding("waiting");
    let c = crate::seed::catalog(&s).await;
    for i in 0..203 {
        let body = serde_json::json!({"project": format!("menu-{i:03}"), "teacher": c.teacher,
            "students": [c.wide], "dataset": c.named_set});
        let a = s.create_evaluation(&body).await;
        assert_eq!(a.status, 202, "{}", a.body);
    }
    let page = reqwest::get(format!("{}/", s.base))
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    let menu = |page: &str| -> Vec<String> {
        let start = page.find("id=\"filter-project\"").expect("a project menu");
        let end = start + page[start..].find("</select>").unwrap();
        page[start..end]
            .split("<option value=\"")
            .skip(2) // the select's own tag, then "any"
            .map(|o| o[..o.find('"').unwrap()].to_string())
            .collect()
    };
    let listed = menu(&page);
    assert_eq!(listed.len(), 200);
    assert_eq!(listed.first().map(String::as_str), Some("menu-003"));
    assert_eq!(listed.last().map(String::as_str), Some("menu-202"));

    let linked = reqwest::get(format!("{}/?project=menu-000", s.base))
        .await
        .unwrap()
        .text()
        .await
        .unwrap();
    assert!(
        linked.contains("<option value=\"menu-000\" selected"),
        "the linked project stays selected"
    );
    s.release();
}
