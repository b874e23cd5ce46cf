//! The store on PostgreSQL: the same requests as on SQLite give the same
//! answers, through every part of the store (models and sets, evaluations
//! and their lists, projects and baselines, tokens, the dashboard's reads).
//! One service with its own workers on a fresh database of the test cluster.

use std::time::Duration;

use serde_json::{Value, json};

use crate::harness::Server;
use crate::postgres::{fresh_database, query};
use crate::projects::upload;
use crate::scaleout::figures;
use crate::support::{case_dir, page_ids};

const LONG: Duration = Duration::from_secs(180);

/// A service on a fresh PostgreSQL database, its URL, and the temp dir.
fn on_postgres(extra: &[&str]) -> (Server, String, tempfile::TempDir) {
    let dir = tempfile::tempdir().unwrap();
    let url = fresh_database();
    let mut flags = vec!["--database-url", url.as_str()];
    flags.extend_from_slice(extra);
    let s = Server::start_in(dir.path(), &flags);
    (s, url, dir)
}

/// A response's body as text, byte for byte.
async fn body_text(s: &Server, path: &str) -> String {
    s.request(reqwest::Method::GET, path)
        .send()
        .await
        .unwrap()
        .text()
        .await
        .unwrap()
}

async fn finished(s: &Server, body: Value) -> (String, Value) {
    let mut body = body;
    body["latency"] = json!({"warmup": 0, "iterations": 5});
    let a = s.create_evaluation(&body).await;
    assert_eq!(a.status, 202, "{}", a.body);
    let id = a.body["id"].as_str().unwrap().to_string();
    let done = s.wait_finished(&id, LONG).await;
    assert_eq!(done["status"], "succeeded", "{done}");
    (id, done)
}

/// A project with a baseline from a passing candidate, then an evaluation
/// against it: the report, its timings and the project, as served.
async fn baseline_story(s: &Server) -> (Value, Value, Value) {
    let u = upload(s).await;
    let (first, _) = finished(
        s,
        json!({"project": "keel", "teacher": u.teacher, "students": [u.production], "dataset": u.set}),
    )
    .await;
    let put = s
        .put_json(
            "/v1/projects/keel/baseline",
            &json!({"model": u.production, "evaluation": first}),
        )
        .await;
    assert_eq!(put.status, 200, "{}", put.body);
    let (id, _) = finished(
        s,
        json!({"project": "keel", "teacher": u.teacher, "students": [u.wide, u.lean],
               "dataset": u.set, "baseline": "current", "tags": {"branch": "main"}}),
    )
    .await;
    let report = s.get(&format!("/v1/evaluations/{id}/report")).await;
    assert_eq!(report.status, 200);
    let timings = s.get(&format!("/v1/evaluations/{id}/timings")).await;
    assert_eq!(timings.status, 200);
    let project = s.get("/v1/projects/keel").await;
    assert_eq!(project.status, 200);
    (report.body, timings.body, project.body)
}

#[tokio::test]
async fn an_evaluation_against_a_baseline_gives_the_same_figures_on_postgresql_as_on_sqlite() {
    let (pg, _url, _dir) = on_postgres(&[]);
    let lite = Server::start(&[]);
    let (a, a_timings, a_project) = baseline_story(&pg).await;
    let (b, b_timings, b_project) = baseline_story(&lite).await;
    assert_eq!(figures(&a), figures(&b));
    for (x, y) in a["candidates"]
        .as_array()
        .unwrap()
        .iter()
        .zip(b["candidates"].as_array().unwrap())
    {
        assert_eq!(
            x["versus_baseline"]["agreement"],
            y["versus_baseline"]["agreement"]
        );
        assert_eq!(
            x["versus_baseline"]["teacher_flip_rate"],
            y["versus_baseline"]["teacher_flip_rate"]
        );
    }
    assert_eq!(a["baseline"]["fidelity"], b["baseline"]["fidelity"]);
    let shape = |t: &Value| {
        let rounds = t["rounds"].as_array().unwrap();
        (
            t["models"].as_array().unwrap().len(),
            rounds.len(),
            rounds[0].as_array().unwrap().len(),
        )
    };
    assert_eq!(shape(&a_timings), shape(&b_timings));
    assert_eq!(
        a_project["baseline_history"].as_array().unwrap().len(),
        b_project["baseline_history"].as_array().unwrap().len()
    );
    assert_eq!(a_project["evaluations"], 2);
}

#[tokio::test]
async fn the_report_is_served_byte_for_byte_as_stored_with_its_keys_in_order() {
    let (s, url, _dir) = on_postgres(&[]);
    let u = upload(&s).await;
    let (id, _) = finished(
        &s,
        json!({"teacher": u.teacher, "students": [u.wide], "dataset": u.set}),
    )
    .await;
    let served = body_text(&s, &format!("/v1/evaluations/{id}/report")).await;
    let stored = query(
        &url,
        &format!("SELECT body FROM reports WHERE evaluation_id = '{id}'"),
    );
    assert_eq!(served, stored);
    assert!(served.starts_with("{\"evaluation\":"), "{}", &served[..60]);
}

#[tokio::test]
async fn lists_filter_and_page_the_same_way_on_postgresql() {
    let (s, _url, _dir) = on_postgres(&[]);
    let u = upload(&s).await;
    let mut made = Vec::new();
    for (project, branch) in [("alpha", "main"), ("alpha", "dev"), ("beta", "main")] {
        let (id, _) = finished(
            &s,
            json!({"project": project, "teacher": u.teacher, "students": [u.lean],
                   "dataset": u.set, "tags": {"branch": branch}}),
        )
        .await;
        made.push(id);
    }
    let newest_first: Vec<String> = made.iter().rev().cloned().collect();
    assert_eq!(page_ids(&s.get("/v1/evaluations").await.body), newest_first);
    assert_eq!(
        page_ids(&s.get("/v1/evaluations?project=alpha").await.body),
        [made[1].clone(), made[0].clone()]
    );
    assert_eq!(
        page_ids(&s.get("/v1/evaluations?tag=branch:main").await.body),
        [made[2].clone(), made[0].clone()]
    );
    assert!(page_ids(&s.get("/v1/evaluations?status=queued").await.body).is_empty());
    let first = s.get("/v1/evaluations?limit=2").await.body;
    assert_eq!(page_ids(&first), newest_first[..2]);
    let cursor = first["next_cursor"].as_str().unwrap();
    let second = s
        .get(&format!("/v1/evaluations?limit=2&cursor={cursor}"))
        .await
        .body;
    assert_eq!(page_ids(&second), newest_first[2..]);
    assert!(second["next_cursor"].is_null());

    let models = s.get("/v1/models?limit=3").await.body;
    assert_eq!(models["items"].as_array().unwrap().len(), 3);
    let rest = s
        .get(&format!(
            "/v1/models?cursor={}",
            models["next_cursor"].as_str().unwrap()
        ))
        .await
        .body;
    assert_eq!(
        rest["items"].as_array().unwrap().len(),
        1,
        "four models in all"
    );
    let projects = s.get("/v1/projects").await.body;
    let names: Vec<&str> = projects["items"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p["name"].as_str().unwrap())
        .collect();
    assert_eq!(names, ["alpha", "beta"]);

    // The dashboard reads the same rows.
    let page = s.get("/").await;
    assert_eq!(page.status, 200);
    let html = body_text(&s, "/").await;
    for id in &made {
        assert!(html.contains(id.as_str()), "the list page lacks {id}");
    }
    let teacher = s.get(&format!("/teachers/{}", u.teacher)).await;
    assert_eq!(teacher.status, 200);
    let metrics = body_text(&s, "/metrics").await;
    assert!(
        metrics
            .lines()
            .any(|l| l.starts_with("proctor_evaluations{status=\"succeeded\"} 3")),
        "{metrics}"
    );
}

#[tokio::test]
async fn a_model_in_use_stays_and_a_deleted_one_comes_back_under_its_id_on_postgresql() {
    let (s, _url, _dir) = on_postgres(&["--workers", "0"]);
    let u = upload(&s).await;
    // With no worker, the evaluation stays queued and holds its models.
    let a = s
        .create_evaluation(&json!({"teacher": u.teacher, "students": [u.wide], "dataset": u.set}))
        .await;
    assert_eq!(a.status, 202, "{}", a.body);
    let id = a.body["id"].as_str().unwrap();
    let refused = s.delete(&format!("/v1/models/{}", u.wide)).await;
    assert_eq!(refused.status, 409, "{}", refused.body);
    assert_eq!(
        s.delete(&format!("/v1/datasets/{}", u.set)).await.status,
        409
    );
    assert_eq!(s.delete(&format!("/v1/evaluations/{id}")).await.status, 200);
    assert_eq!(
        s.delete(&format!("/v1/models/{}", u.wide)).await.status,
        204
    );
    assert_eq!(s.get(&format!("/v1/models/{}", u.wide)).await.status, 404);
    let again = s
        .upload_model(
            &case_dir("baseline").join("candidate_wide.onnx"),
            "wide again",
        )
        .await;
    assert_eq!(again.status, 201, "revived: {}", again.body);
    assert_eq!(
        again.body["id"],
        u.wide.as_str(),
        "revived under its old id"
    );
    // Stored bytes (a SUM PostgreSQL returns as NUMERIC) count every live file.
    let files = [
        "teacher.onnx",
        "production.onnx",
        "candidate_wide.onnx",
        "candidate_lean.onnx",
        "data.npz",
    ];
    let want: u64 = files
        .iter()
        .map(|f| {
            std::fs::metadata(case_dir("baseline").join(f))
                .unwrap()
                .len()
        })
        .sum();
    let metrics = body_text(&s, "/metrics").await;
    assert!(
        metrics
            .lines()
            .any(|l| l == format!("proctor_stored_bytes {want}")),
        "want {want} stored bytes:\n{metrics}"
    );
}

#[tokio::test]
async fn tokens_made_on_the_command_line_guard_a_service_on_postgresql() {
    let (mut s, _url, _dir) = on_postgres(&["--auth", "required"]);
    assert_eq!(s.get("/v1/models").await.status, 401);
    let secret = s.make_token("ci-bot", "submitter", "keel");
    s.act_as(Some(&secret));
    assert_eq!(s.get("/v1/models").await.status, 200);
    let listed = s.token_command(&["list"]);
    assert!(listed.status.success());
    assert!(String::from_utf8_lossy(&listed.stdout).contains("ci-bot"));
    let revoked = s.token_command(&["revoke", "ci-bot"]);
    assert!(
        revoked.status.success(),
        "{}",
        String::from_utf8_lossy(&revoked.stderr)
    );
    assert_eq!(s.get("/v1/models").await.status, 401);
}
