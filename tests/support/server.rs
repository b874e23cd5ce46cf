//! The real `proctor` binary on a free port with its own data dir, and one
//! typed helper per endpoint.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::Value;

pub struct Server {
    child: Option<Child>,
    pub base: String,
    data_dir: PathBuf,
    _dir: Option<tempfile::TempDir>,
    client: reqwest::Client,
    /// Who requests go out as, and which certificate they trust.
    token: Option<String>,
    ca_pem: Option<Vec<u8>>,
    /// `--database-url` and `--blob-store` as given, for `proctor token`.
    data_flags: Vec<String>,
}

/// The variable and file of the service's test-only hold (src/sandbox/hold.rs).
const HOLD_AT: &str = "PROCTOR_TEST_HOLD_AT";
const RELEASE_FILE: &str = "test-hold.release";

/// A response: status, JSON body (Null when not JSON) and content type.
pub struct Answer {
    pub status: u16,
    pub headers: reqwest::header::HeaderMap,
    pub body: Value,
    pub content_type: String,
    pub location: Option<String>,
    pub retry_after: Option<String>,
}

impl Server {
    /// Starts a server on a fresh data dir.
    pub fn start(extra: &[&str]) -> Server {
        let dir = tempfile::tempdir().unwrap();
        let mut s = Server::start_in(dir.path(), extra);
        s._dir = Some(dir);
        s
    }

    /// Starts a server on a fresh data dir whose evaluations stop at `stage`
    /// (bulk, timing, scoring...) until `release` is called.
    pub fn holding(stage: &str) -> Server {
        let dir = tempfile::tempdir().unwrap();
        let mut s = Server::holding_in(dir.path(), stage);
        s._dir = Some(dir);
        s
    }

    /// `holding` with more `serve` flags.
    pub fn holding_with(stage: &str, extra: &[&str]) -> Server {
        let dir = tempfile::tempdir().unwrap();
        let mut s = Server::launch(dir.path(), extra, Some(stage));
        s._dir = Some(dir);
        s
    }

    pub fn holding_in(data_dir: &Path, stage: &str) -> Server {
        Server::launch(data_dir, &[], Some(stage))
    }

    /// Starts a server on an existing data dir (to test restarts).
    pub fn start_in(data_dir: &Path, extra: &[&str]) -> Server {
        Server::launch(data_dir, extra, None)
    }

    fn launch(data_dir: &Path, extra: &[&str], hold_at: Option<&str>) -> Server {
        Server::launch_on(data_dir, "127.0.0.1:0", extra, hold_at)
    }

    /// Starts a server on an existing data dir with more variables in its
    /// environment (object storage's credentials, say).
    pub fn start_with_env(data_dir: &Path, extra: &[&str], env: &[(String, String)]) -> Server {
        Server::launch_with(data_dir, "127.0.0.1:0", extra, None, env)
    }

    fn launch_on(data_dir: &Path, listen: &str, extra: &[&str], hold_at: Option<&str>) -> Server {
        Server::launch_with(data_dir, listen, extra, hold_at, &[])
    }

    fn launch_with(
        data_dir: &Path,
        listen: &str,
        extra: &[&str],
        hold_at: Option<&str>,
        env: &[(String, String)],
    ) -> Server {
        let log = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(data_dir.join("server.log"))
            .unwrap();
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_proctor"));
        cmd.arg("serve")
            .args(["--listen", listen, "--data-dir"])
            .arg(data_dir)
            .args(extra)
            .env_remove(HOLD_AT)
            // Each test's server times alone on its own lock: tests run side
            // by side, and one held mid-timing must not stall the others.
            .env("PROCTOR_CPU_LOCK", data_dir.join("cpu.lock"))
            .envs(env.iter().map(|(k, v)| (k, v)))
            .stdout(Stdio::piped())
            .stderr(log);
        if let Some(stage) = hold_at {
            cmd.env(HOLD_AT, stage);
        }
        let mut child = cmd.spawn().unwrap();
        let stdout = child.stdout.take().unwrap();
        let mut line = String::new();
        BufReader::new(stdout).read_line(&mut line).unwrap();
        let base = line
            .trim()
            .strip_prefix("proctor listening on ")
            .unwrap_or_else(|| {
                panic!(
                    "unexpected first line {line:?}; see {}/server.log",
                    data_dir.display()
                )
            })
            .to_string();
        let data_flags = extra
            .windows(2)
            .filter(|w| matches!(w[0], "--database-url" | "--blob-store"))
            .flat_map(|w| [w[0].to_string(), w[1].to_string()])
            .collect();
        Server {
            child: Some(child),
            base,
            data_dir: data_dir.to_owned(),
            _dir: None,
            client: reqwest::Client::new(),
            token: None,
            ca_pem: None,
            data_flags,
        }
    }

    /// Makes a token with `proctor token create` on this server's data dir
    /// and returns its secret.
    pub fn make_token(&self, name: &str, role: &str, project: &str) -> String {
        let out = Command::new(env!("CARGO_BIN_EXE_proctor"))
            .args([
                "token",
                "create",
                name,
                "--role",
                role,
                "--project",
                project,
            ])
            .arg("--data-dir")
            .arg(&self.data_dir)
            .args(&self.data_flags)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8(out.stdout).unwrap().trim().to_string()
    }

    /// `proctor token ARGS...` on this server's data dir.
    pub fn token_command(&self, args: &[&str]) -> std::process::Output {
        Command::new(env!("CARGO_BIN_EXE_proctor"))
            .arg("token")
            .args(args)
            .arg("--data-dir")
            .arg(&self.data_dir)
            .args(&self.data_flags)
            .output()
            .unwrap()
    }

    /// Every later request carries this bearer token (none for `None`).
    pub fn act_as(&mut self, token: Option<&str>) {
        self.token = token.map(str::to_string);
        self.rebuild_client();
    }

    /// Every later request trusts this PEM certificate (an HTTPS server's).
    pub fn trust(&mut self, pem: &[u8]) {
        self.ca_pem = Some(pem.to_vec());
        self.rebuild_client();
    }

    fn rebuild_client(&mut self) {
        let mut b = reqwest::Client::builder();
        if let Some(t) = &self.token {
            let mut h = reqwest::header::HeaderMap::new();
            h.insert("authorization", format!("Bearer {t}").parse().unwrap());
            b = b.default_headers(h);
        }
        if let Some(pem) = &self.ca_pem {
            b = b.add_root_certificate(reqwest::Certificate::from_pem(pem).unwrap());
        }
        self.client = b.build().unwrap();
    }

    /// A request on this server's client, for headers the helpers do not set.
    pub fn request(&self, method: reqwest::Method, path: &str) -> reqwest::RequestBuilder {
        self.client.request(method, self.url(path))
    }

    /// Sends a request made with `request`.
    pub async fn send_request(req: reqwest::RequestBuilder) -> Answer {
        Self::send(req).await
    }

    /// The server's threads now, from /proc.
    pub fn threads(&self) -> usize {
        let pid = self.child.as_ref().map(Child::id).unwrap();
        let status = std::fs::read_to_string(format!("/proc/{pid}/status")).unwrap();
        status
            .lines()
            .find_map(|l| l.strip_prefix("Threads:"))
            .unwrap()
            .trim()
            .parse()
            .unwrap()
    }

    pub fn data_dir(&self) -> &Path {
        &self.data_dir
    }

    /// The server's engine processes alive now (its children, from /proc).
    pub fn engine_processes(&self) -> usize {
        let Some(pid) = self.child.as_ref().map(Child::id) else {
            return 0;
        };
        let Ok(dir) = std::fs::read_dir("/proc") else {
            return 0;
        };
        dir.filter_map(Result::ok)
            .filter_map(|e| std::fs::read_to_string(e.path().join("stat")).ok())
            .filter(|stat| {
                // pid (comm) state ppid ...: the comm may hold spaces, so
                // fields are read after its closing parenthesis.
                stat.rsplit_once(')')
                    .and_then(|(_, rest)| rest.split_whitespace().nth(1))
                    .and_then(|ppid| ppid.parse::<u32>().ok())
                    == Some(pid)
            })
            .count()
    }

    /// Polls until the server has `n` engine processes.
    pub async fn wait_engine_processes(&self, n: usize, limit: Duration) {
        let start = Instant::now();
        while self.engine_processes() != n {
            assert!(
                start.elapsed() < limit,
                "the server still has {} engine processes, not {n}",
                self.engine_processes()
            );
            tokio::time::sleep(Duration::from_millis(25)).await;
        }
    }

    /// Lets evaluations held at their stage go on.
    pub fn release(&self) {
        std::fs::write(self.data_dir.join(RELEASE_FILE), b"").unwrap();
    }

    /// Stops the server (SIGTERM) and starts it again on the same data dir
    /// and address, as a deploy would, without holding at any stage.
    pub fn restart(&mut self) {
        assert!(self.terminate().success(), "a clean exit on SIGTERM");
        let address = self.base.trim_start_matches("http://").to_string();
        let mut again = Server::launch_on(&self.data_dir, &address, &[], None);
        self.child = again.child.take();
    }

    /// Kills the server with SIGKILL, as a crash would.
    pub fn kill9(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
    }

    /// Sends SIGTERM and waits for a clean exit.
    pub fn terminate(&mut self) -> std::process::ExitStatus {
        let mut c = self.child.take().unwrap();
        unsafe {
            libc::kill(c.id() as i32, libc::SIGTERM);
        }
        c.wait().unwrap()
    }

    async fn answer(res: reqwest::Response) -> Answer {
        let status = res.status().as_u16();
        let header = |name: &str| {
            res.headers()
                .get(name)
                .and_then(|v| v.to_str().ok())
                .map(str::to_string)
        };
        let content_type = header("content-type").unwrap_or_default();
        let location = header("location");
        let retry_after = header("retry-after");
        let headers = res.headers().clone();
        let text = res.text().await.unwrap();
        let body = serde_json::from_str(&text).unwrap_or(Value::Null);
        Answer {
            status,
            headers,
            body,
            content_type,
            location,
            retry_after,
        }
    }

    fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    async fn send(req: reqwest::RequestBuilder) -> Answer {
        Self::answer(req.send().await.unwrap()).await
    }

    pub async fn get(&self, path: &str) -> Answer {
        Self::send(self.client.get(self.url(path))).await
    }

    pub async fn delete(&self, path: &str) -> Answer {
        Self::send(self.client.delete(self.url(path))).await
    }

    pub async fn post_bytes(&self, path: &str, bytes: Vec<u8>) -> Answer {
        let req = self
            .client
            .post(self.url(path))
            .header("content-type", "application/octet-stream");
        Self::send(req.body(bytes)).await
    }

    pub async fn post_json_text(&self, path: &str, text: &str) -> Answer {
        let req = self
            .client
            .post(self.url(path))
            .header("content-type", "application/json");
        Self::send(req.body(text.to_string())).await
    }

    pub async fn put_json(&self, path: &str, body: &Value) -> Answer {
        let req = self
            .client
            .put(self.url(path))
            .header("content-type", "application/json");
        Self::send(req.body(body.to_string())).await
    }

    pub async fn upload_model(&self, file: &Path, name: &str) -> Answer {
        self.post_bytes(
            &format!("/v1/models?name={name}"),
            std::fs::read(file).unwrap(),
        )
        .await
    }

    /// Uploads a zip bundle (a model and its ONNX external data).
    pub async fn upload_bundle(&self, file: &Path, name: &str) -> Answer {
        let req = self
            .client
            .post(self.url(&format!("/v1/models?name={name}")))
            .header("content-type", "application/zip");
        Self::send(req.body(std::fs::read(file).unwrap())).await
    }

    pub async fn upload_dataset(&self, file: &Path, name: &str) -> Answer {
        self.post_bytes(
            &format!("/v1/datasets?name={name}"),
            std::fs::read(file).unwrap(),
        )
        .await
    }

    /// Uploads and returns the id, asserting success.
    pub async fn model_id(&self, file: &Path) -> String {
        let name = file.file_stem().unwrap().to_string_lossy().to_string();
        let a = self.upload_model(file, &name).await;
        assert!(
            a.status == 201 || a.status == 200,
            "upload of {}: {} {}",
            file.display(),
            a.status,
            a.body
        );
        a.body["id"].as_str().unwrap().to_string()
    }

    pub async fn dataset_id(&self, file: &Path) -> String {
        let a = self.upload_dataset(file, "set").await;
        assert!(
            a.status == 201 || a.status == 200,
            "upload of {}: {} {}",
            file.display(),
            a.status,
            a.body
        );
        a.body["id"].as_str().unwrap().to_string()
    }

    pub async fn create_evaluation(&self, body: &Value) -> Answer {
        self.post_json_text("/v1/evaluations", &body.to_string())
            .await
    }

    /// Queues an evaluation and returns its id once it runs at `stage`; the
    /// server must hold there (`Server::holding`).
    pub async fn held_evaluation(
        &self,
        teacher: &str,
        students: &[&str],
        set: &str,
        stage: &str,
    ) -> String {
        let body = serde_json::json!({"teacher": teacher, "students": students, "dataset": set,
            "latency": {"warmup": 0, "iterations": 5}});
        let a = self.create_evaluation(&body).await;
        assert_eq!(a.status, 202, "{}", a.body);
        let id = a.body["id"].as_str().unwrap().to_string();
        self.wait_stage(&id, stage, Duration::from_secs(120)).await;
        id
    }

    /// Polls until the evaluation runs at `stage`.
    pub async fn wait_stage(&self, id: &str, stage: &str, limit: Duration) -> Value {
        let start = Instant::now();
        loop {
            let e = self.evaluation(id).await;
            if e["status"] == "running" && e["progress"]["stage"] == stage {
                return e;
            }
            assert!(
                !matches!(
                    e["status"].as_str(),
                    Some("succeeded" | "failed" | "canceled")
                ),
                "evaluation {id} ended before reaching {stage}: {e}"
            );
            assert!(
                start.elapsed() < limit,
                "evaluation {id} never reached {stage}: {e}"
            );
            tokio::time::sleep(Duration::from_millis(25)).await;
        }
    }

    pub async fn evaluation(&self, id: &str) -> Value {
        self.get(&format!("/v1/evaluations/{id}")).await.body
    }

    /// Polls until the evaluation has finished, and returns it.
    pub async fn wait_finished(&self, id: &str, limit: Duration) -> Value {
        let start = Instant::now();
        loop {
            let e = self.evaluation(id).await;
            if matches!(
                e["status"].as_str(),
                Some("succeeded" | "failed" | "canceled")
            ) {
                return e;
            }
            assert!(
                start.elapsed() < limit,
                "evaluation {id} still {} after {limit:?}",
                e["status"]
            );
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        self.kill9();
    }
}
