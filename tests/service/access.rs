//! Access (api.md, "Access"): tokens with a role and a project, made on the
//! service's own database, and the guards that keep other web pages and
//! other host names from acting through a browser.

use reqwest::Method;
use serde_json::{Value, json};

use crate::harness::{Answer, Server};
use crate::support::case_dir;

fn problem(a: &Answer, status: u16) {
    assert_eq!(a.status, status, "{}", a.body);
    assert_eq!(a.content_type, "application/problem+json");
    assert_eq!(a.body["status"], status);
}

/// A server that needs tokens although it listens on loopback.
fn guarded(extra: &[&str]) -> Server {
    let mut flags = vec!["--auth", "required"];
    flags.extend_from_slice(extra);
    Server::start(&flags)
}

fn mlp(file: &str) -> std::path::PathBuf {
    case_dir("mlp").join(file)
}

async fn queue(s: &Server, project: &str, teacher: &str, student: &str, set: &str) -> Answer {
    s.create_evaluation(
        &json!({"project": project, "teacher": teacher, "students": [student],
        "dataset": set, "latency": {"warmup": 0, "iterations": 3}}),
    )
    .await
}

#[tokio::test]
async fn without_a_token_requests_are_401_with_a_bearer_challenge_and_open_paths_stay_open() {
    let s = guarded(&[]);
    let a = s.get("/v1/models").await;
    problem(&a, 401);
    assert_eq!(a.headers["www-authenticate"], "Bearer", "RFC 6750 §3");
    problem(&s.upload_model(&mlp("teacher.onnx"), "t").await, 401);
    for open in ["/healthz", "/openapi.yaml"] {
        assert_eq!(s.get(open).await.status, 200, "{open}");
    }
    let mut s = s;
    s.act_as(Some("not-a-token-anyone-made"));
    problem(&s.get("/v1/models").await, 401);
}

#[tokio::test]
async fn each_role_includes_the_ones_before_it_and_a_project_token_acts_in_its_project_only() {
    let mut s = guarded(&[]);
    let reader = s.make_token("dash-viewer", "reader", "*");
    let submitter = s.make_token("ci-seed", "submitter", "seed-grading");
    let maintainer = s.make_token("lead-seed", "maintainer", "seed-grading");

    s.act_as(Some(&reader));
    assert_eq!(s.get("/v1/models").await.status, 200);
    let refused = s.upload_model(&mlp("teacher.onnx"), "t").await;
    problem(&refused, 403);
    assert!(
        refused.body["detail"]
            .as_str()
            .unwrap()
            .contains("submitter"),
        "{}",
        refused.body
    );

    s.act_as(Some(&submitter));
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.model_id(&mlp("student_twin.onnx")).await;
    let set = s.dataset_id(&mlp("data.npz")).await;
    let ours = queue(&s, "seed-grading", &teacher, &student, &set).await;
    assert_eq!(ours.status, 202, "{}", ours.body);
    assert_eq!(ours.body["created_by"], "ci-seed");
    problem(
        &queue(&s, "loom-inspection", &teacher, &student, &set).await,
        403,
    );
    let delete = format!("/v1/models/{student}");
    problem(&s.delete(&delete).await, 403);

    s.act_as(Some(&maintainer));
    let id = ours.body["id"].as_str().unwrap();
    s.wait_finished(id, std::time::Duration::from_secs(120))
        .await;
    let unused = s.model_id(&mlp("student_wide.onnx")).await;
    assert_eq!(s.delete(&format!("/v1/models/{unused}")).await.status, 204);
}

#[tokio::test]
async fn a_revoked_token_is_refused_from_the_next_request_on() {
    let mut s = guarded(&[]);
    let secret = s.make_token("ci-old", "reader", "*");
    s.act_as(Some(&secret));
    assert_eq!(s.get("/v1/models").await.status, 200);
    let out = s.token_command(&["revoke", "ci-old"]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    problem(&s.get("/v1/models").await, 401);
}

#[tokio::test]
async fn a_secret_is_shown_once_and_kept_only_as_its_sha256() {
    let s = guarded(&[]);
    let secret = s.make_token("ci-seed", "submitter", "seed-grading");
    assert!(secret.len() >= 32, "{secret}");
    let list = s.token_command(&["list"]);
    let listed = String::from_utf8(list.stdout).unwrap();
    assert!(
        listed.contains("ci-seed\tsubmitter\tseed-grading"),
        "{listed}"
    );
    assert!(!listed.contains(&secret));
    // The database and its write-ahead log hold the hash, never the secret.
    let mut stored = Vec::new();
    for f in ["proctor.db", "proctor.db-wal"] {
        stored.extend(std::fs::read(s.data_dir().join(f)).unwrap_or_default());
    }
    let hash = proctor::store::secret_hash(&secret);
    let holds = |needle: &str| stored.windows(needle.len()).any(|w| w == needle.as_bytes());
    assert!(holds(&hash), "the SHA-256 is what is looked up");
    assert!(!holds(&secret));
    let again = s.token_command(&["create", "ci-seed", "--role", "reader", "--project", "*"]);
    assert_eq!(
        again.status.code(),
        Some(2),
        "a taken name is an input error"
    );
    let log = std::fs::read_to_string(s.data_dir().join("server.log")).unwrap();
    assert!(!log.contains(&secret));
}

#[tokio::test]
async fn public_reads_need_no_token_but_every_change_does() {
    let s = guarded(&["--read-access", "public"]);
    assert_eq!(s.get("/v1/models").await.status, 200);
    assert_eq!(s.get("/").await.status, 200);
    let a = s.upload_model(&mlp("teacher.onnx"), "t").await;
    problem(&a, 401);
    assert_eq!(a.headers["www-authenticate"], "Bearer");
}

#[tokio::test]
async fn the_canceler_is_recorded_beside_the_creator() {
    let mut s = Server::holding_with("bulk", &["--auth", "required"]);
    let ci = s.make_token("ci-seed", "submitter", "*");
    s.act_as(Some(&ci));
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.model_id(&mlp("student_twin.onnx")).await;
    let set = s.dataset_id(&mlp("data.npz")).await;
    let id = s.held_evaluation(&teacher, &[&student], &set, "bulk").await;
    let person = s.make_token("rota-oncall", "submitter", "*");
    s.act_as(Some(&person));
    let canceled = s.delete(&format!("/v1/evaluations/{id}")).await;
    assert_eq!(canceled.status, 200, "{}", canceled.body);
    assert_eq!(canceled.body["created_by"], "ci-seed");
    assert_eq!(canceled.body["canceled_by"], "rota-oncall");
}

#[tokio::test]
async fn with_access_off_nothing_is_recorded_as_the_actor() {
    let s = Server::start(&[]);
    let teacher = s.model_id(&mlp("teacher.onnx")).await;
    let student = s.model_id(&mlp("student_twin.onnx")).await;
    let set = s.dataset_id(&mlp("data.npz")).await;
    let a = queue(&s, "seed-grading", &teacher, &student, &set).await;
    assert_eq!(a.status, 202, "{}", a.body);
    assert_eq!(a.body["created_by"], Value::Null);
}

#[tokio::test]
async fn a_json_body_must_say_it_is_json() {
    let s = Server::start(&[]);
    // A page elsewhere can send text/plain without asking first; that was
    // enough to queue an evaluation before.
    let req = s
        .request(Method::POST, "/v1/evaluations")
        .header("content-type", "text/plain")
        .body("{}");
    problem(&Server::send_request(req).await, 415);
    let put = s
        .request(Method::PUT, "/v1/projects/seed-grading/baseline")
        .body("{}");
    problem(&Server::send_request(put).await, 415);
}

#[tokio::test]
async fn a_change_from_another_origin_is_refused_even_with_access_off() {
    let s = Server::start(&[]);
    let host = s.base.trim_start_matches("http://").to_string();
    let from = |origin: &str, site: Option<&str>| {
        let mut r = s
            .request(
                Method::DELETE,
                "/v1/evaluations/0190a0a0-0000-7000-8000-000000000000",
            )
            .header("origin", origin);
        if let Some(site) = site {
            r = r.header("sec-fetch-site", site);
        }
        r
    };
    problem(
        &Server::send_request(from("https://elsewhere.example", None)).await,
        403,
    );
    problem(
        &Server::send_request(from("https://elsewhere.example", Some("cross-site"))).await,
        403,
    );
    let ours = Server::send_request(from(&format!("http://{host}"), Some("same-origin"))).await;
    assert_eq!(ours.status, 404, "our own page gets through: {}", ours.body);
}

#[tokio::test]
async fn with_access_off_only_localhost_host_names_are_served() {
    let s = Server::start(&[]);
    // A rebinding page reaches us by its own name, sent in Host.
    let rebound = s
        .request(Method::GET, "/v1/models")
        .header("host", "attacker.example");
    problem(&Server::send_request(rebound).await, 403);
    let local = s
        .request(Method::GET, "/v1/models")
        .header("host", "localhost");
    assert_eq!(Server::send_request(local).await.status, 200);
}

#[tokio::test]
async fn a_cookie_counts_for_changes_only_from_our_own_pages() {
    let mut s = guarded(&[]);
    let secret = s.make_token("lead-seed", "maintainer", "*");
    s.act_as(None);
    let cookie = format!("proctor_session={secret}");
    let read = s
        .request(Method::GET, "/v1/models")
        .header("cookie", &cookie);
    assert_eq!(Server::send_request(read).await.status, 200);
    let id = "0190a0a0-0000-7000-8000-000000000000";
    let forged = s
        .request(Method::DELETE, &format!("/v1/models/{id}"))
        .header("cookie", &cookie)
        .header("sec-fetch-site", "cross-site");
    problem(&Server::send_request(forged).await, 403);
    let ours = s
        .request(Method::DELETE, &format!("/v1/models/{id}"))
        .header("cookie", &cookie)
        .header("sec-fetch-site", "same-origin");
    assert_eq!(Server::send_request(ours).await.status, 404);
}

#[tokio::test]
async fn every_answer_carries_our_request_id_and_the_page_guards() {
    let s = Server::start(&[]);
    let req = s
        .request(Method::GET, "/")
        .header("x-request-id", "forged-by-client");
    let a = Server::send_request(req).await;
    let id = a.headers["x-request-id"].to_str().unwrap();
    assert_ne!(id, "forged-by-client");
    assert!(uuid::Uuid::parse_str(id).is_ok(), "{id}");
    let csp = a.headers["content-security-policy"].to_str().unwrap();
    assert!(csp.contains("default-src 'none'") && csp.contains("frame-ancestors 'none'"));
    assert_eq!(a.headers["x-content-type-options"], "nosniff");
}

#[tokio::test]
async fn metrics_count_requests_by_route_and_evaluations_by_status() {
    let mut s = guarded(&[]);
    problem(&s.get("/metrics").await, 401);
    let reader = s.make_token("scraper", "reader", "*");
    s.act_as(Some(&reader));
    for _ in 0..3 {
        s.get("/v1/models/0190a0a0-0000-7000-8000-000000000000")
            .await;
    }
    let res = s.request(Method::GET, "/metrics").send().await.unwrap();
    assert_eq!(res.status(), 200);
    assert!(
        res.headers()["content-type"]
            .to_str()
            .unwrap()
            .starts_with("text/plain; version=0.0.4")
    );
    let text = res.text().await.unwrap();
    assert!(
        text.contains(
            "proctor_http_requests_total{method=\"GET\",route=\"/v1/models/{id}\",status=\"404\"} 3"
        ),
        "{text}"
    );
    assert!(
        text.contains("proctor_evaluations{status=\"queued\"} 0"),
        "{text}"
    );
    assert!(
        text.contains("# TYPE proctor_stage_seconds histogram"),
        "{text}"
    );
}

#[tokio::test]
async fn a_person_is_sent_to_sign_in_and_back_with_the_token_in_a_strict_cookie() {
    let s = guarded(&[]);
    let secret = s.make_token("lab-viewer", "reader", "*");
    let browser = reqwest::Client::builder()
        .redirect(reqwest::redirect::Policy::none())
        .build()
        .unwrap();
    let page = |path: &str| {
        browser
            .get(format!("{}{path}", s.base))
            .header("accept", "text/html,application/xhtml+xml")
    };
    let sent = page("/projects/seed-grading?limit=5").send().await.unwrap();
    assert_eq!(sent.status(), 303);
    assert_eq!(
        sent.headers()["location"],
        "/signin?next=/projects/seed-grading%3Flimit%3D5"
    );

    let post = |token: &str| {
        browser
            .post(format!("{}/signin", s.base))
            .header("accept", "text/html")
            .form(&[("token", token), ("next", "/projects/seed-grading?limit=5")])
    };
    let wrong = post("not-a-token").send().await.unwrap();
    assert_eq!(wrong.status(), 401);
    let text = wrong.text().await.unwrap();
    assert!(
        text.contains("unknown or revoked") && text.contains("name=\"token\""),
        "{text}"
    );

    let right = post(&secret).send().await.unwrap();
    assert_eq!(right.status(), 303);
    assert_eq!(
        right.headers()["location"],
        "/projects/seed-grading?limit=5"
    );
    let cookie = right.headers()["set-cookie"].to_str().unwrap().to_string();
    assert!(
        cookie.contains("HttpOnly") && cookie.contains("SameSite=Strict"),
        "{cookie}"
    );
    assert!(
        !cookie.contains("Secure"),
        "plain HTTP: a Secure cookie would never come back"
    );
    let session = cookie.split(';').next().unwrap().to_string();
    let signed_in = page("/").header("cookie", &session).send().await.unwrap();
    assert_eq!(signed_in.status(), 200);

    let foreign = browser
        .post(format!("{}/signin", s.base))
        .header("origin", "https://elsewhere.example")
        .form(&[("token", secret.as_str())])
        .send()
        .await
        .unwrap();
    assert_eq!(
        foreign.status(),
        403,
        "no signing in from another site's form"
    );
}
