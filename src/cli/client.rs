//! A typed client of the HTTP contract (api.md), for `proctor submit` and
//! `proctor demo`: it sends and reads the crate's own request, record and
//! report types. Files are hashed locally first, so a file the server
//! already holds (a teacher CI submits on every commit) is never sent again.

use std::path::Path;
use std::time::Duration;

use serde::de::DeserializeOwned;
use sha2::{Digest, Sha256};
use tokio::io::AsyncReadExt;
use uuid::Uuid;

use super::bundle::{Bundle, bundle_if_needed};
use super::connection::ServerArgs;
use crate::problem::Problem;
use crate::report::Report;
use crate::service::{EvaluationRequest, SetBaseline};
use crate::store::{DatasetRecord, EvaluationRecord, ModelRecord, Page, Project};

/// What went wrong, sorted by who can fix it (it decides the exit code).
#[derive(Debug, thiserror::Error)]
pub enum ClientError {
    /// The request was refused: bad input (a file, an id, a setting).
    #[error("{0}")]
    Input(String),
    /// The server or the network failed.
    #[error("{0}")]
    Server(String),
}

pub struct Client {
    base: String,
    http: reqwest::Client,
    /// How long one request is retried through transient failures.
    retry_for: Duration,
}

/// How long a request is retried through a server restart or a network
/// blip, unless the command's own time limit is shorter.
const RETRY_FOR: Duration = Duration::from_secs(300);
const FIRST_DELAY: Duration = Duration::from_millis(500);
const LONGEST_DELAY: Duration = Duration::from_secs(8);

/// Which failures a request may be sent again after.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Repeat {
    /// Reads and idempotent uploads: any connection error, timeout, 502,
    /// 503 or 504.
    Freely,
    /// Requests that change state: only when the service cannot have acted
    /// on them (the connection failed, or it answered 503, busy).
    Unprocessed,
}

/// A failed request and the errors beneath it, outermost first.
fn causes(e: &reqwest::Error) -> impl Iterator<Item = &(dyn std::error::Error + 'static)> {
    std::iter::successors(Some(e as &(dyn std::error::Error + 'static)), |c| {
        c.source()
    })
}

/// Whether a request failed because the server's certificate is not trusted.
fn refused_certificate(e: &reqwest::Error) -> bool {
    causes(e).any(|c| {
        c.downcast_ref::<tokio_rustls::rustls::Error>().is_some()
            || c.to_string().contains("certificate")
    })
}

/// A failed request in words, down to its root cause: reqwest's own text
/// ("error sending request") hides whether it was DNS, a refused
/// connection or a certificate the client does not trust.
fn network(e: reqwest::Error) -> ClientError {
    let why = causes(&e)
        .map(|c| c.to_string())
        .collect::<Vec<_>>()
        .join(": ");
    let hint = if why.contains("certificate") {
        "; for a certificate a private authority signed, pass --ca-cert FILE"
    } else {
        ""
    };
    ClientError::Server(format!("cannot reach the server: {why}{hint}"))
}

/// The wait a 503's `Retry-After` asks for, within reason.
fn retry_after(res: &reqwest::Response) -> Option<Duration> {
    let secs: u64 = res
        .headers()
        .get(reqwest::header::RETRY_AFTER)?
        .to_str()
        .ok()?
        .parse()
        .ok()?;
    Some(Duration::from_secs(secs.clamp(1, 30)))
}

/// The body of a successful answer, or an error carrying its problem detail.
async fn checked(res: reqwest::Response) -> Result<String, ClientError> {
    let status = res.status();
    let text = res.text().await.map_err(network)?;
    if status.is_success() {
        return Ok(text);
    }
    let message = match serde_json::from_str::<Problem>(&text) {
        Ok(p) => {
            let field = p.field.map(|f| format!(" (field {f})")).unwrap_or_default();
            format!("server answered {}: {}{field}", status.as_u16(), p.detail)
        }
        Err(_) => format!("server answered {}: {}", status.as_u16(), text.trim()),
    };
    let message = if status.as_u16() == 401 {
        format!("{message}\n(pass a token with --token or the PROCTOR_TOKEN environment variable)")
    } else {
        message
    };
    if status.is_client_error() {
        Err(ClientError::Input(message))
    } else {
        Err(ClientError::Server(message))
    }
}

fn parsed<T: DeserializeOwned>(text: &str, what: &str) -> Result<T, ClientError> {
    serde_json::from_str(text)
        .map_err(|e| ClientError::Server(format!("the server's {what} does not parse: {e}")))
}

pub async fn sha256_of(path: &Path) -> std::io::Result<String> {
    let mut file = tokio::fs::File::open(path).await?;
    let mut hasher = Sha256::new();
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = file.read(&mut buf).await?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
    }
    Ok(hex::encode(hasher.finalize()))
}

/// A collection of uploads: models or evaluation sets.
pub trait Stored: DeserializeOwned {
    const PATH: &'static str;
    fn id(&self) -> Uuid;
    /// The bundle to send instead of the file itself, if the file needs one.
    fn bundle(_path: &Path) -> Result<Option<Bundle>, ClientError> {
        Ok(None)
    }
}

impl Stored for ModelRecord {
    const PATH: &'static str = "/v1/models";
    fn id(&self) -> Uuid {
        self.id
    }
    fn bundle(path: &Path) -> Result<Option<Bundle>, ClientError> {
        bundle_if_needed(path).map_err(ClientError::Input)
    }
}

impl Stored for DatasetRecord {
    const PATH: &'static str = "/v1/datasets";
    fn id(&self) -> Uuid {
        self.id
    }
}

impl Client {
    /// A client of the service `server` names; `limit`, the command's own
    /// time limit, caps how long a request is retried.
    pub fn new(server: &ServerArgs, limit: Option<Duration>) -> Result<Client, ClientError> {
        let mut builder = reqwest::Client::builder().connect_timeout(Duration::from_secs(10));
        if let Some(token) = &server.token {
            let mut value =
                reqwest::header::HeaderValue::from_str(&format!("Bearer {}", token.trim()))
                    .map_err(|_| {
                        ClientError::Input("the token holds characters no header may carry".into())
                    })?;
            // Kept out of debug output and of HTTP/2 header compression tables.
            value.set_sensitive(true);
            let mut headers = reqwest::header::HeaderMap::new();
            headers.insert(reqwest::header::AUTHORIZATION, value);
            builder = builder.default_headers(headers);
        }
        if let Some(path) = &server.ca_cert {
            let pem = std::fs::read(path).map_err(|e| {
                ClientError::Input(format!("cannot read --ca-cert {}: {e}", path.display()))
            })?;
            let cert = reqwest::Certificate::from_pem(&pem).map_err(|e| {
                ClientError::Input(format!(
                    "--ca-cert {} is no PEM certificate: {e}",
                    path.display()
                ))
            })?;
            builder = builder.add_root_certificate(cert);
        }
        let http = builder
            .build()
            .map_err(|e| ClientError::Input(format!("cannot set up the HTTP client: {e}")))?;
        Ok(Client {
            base: server.base().to_string(),
            http,
            retry_for: limit.map_or(RETRY_FOR, |l| l.min(RETRY_FOR)),
        })
    }

    fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    /// Sends a request built by `build`, again and again with growing
    /// pauses while the failure is transient, for at most `retry_for`.
    async fn send(
        &self,
        build: impl Fn() -> Result<reqwest::RequestBuilder, ClientError>,
        repeat: Repeat,
    ) -> Result<reqwest::Response, ClientError> {
        let started = std::time::Instant::now();
        let mut delay = FIRST_DELAY;
        loop {
            let outcome = build()?.send().await;
            let (transient, wait) = match &outcome {
                // An untrusted certificate stays untrusted however often asked.
                Err(e) if refused_certificate(e) => (false, None),
                Err(e) if e.is_connect() => (true, None),
                Err(e) => (
                    repeat == Repeat::Freely && (e.is_timeout() || e.is_request()),
                    None,
                ),
                Ok(res) => match res.status().as_u16() {
                    503 => (true, retry_after(res)),
                    502 | 504 => (repeat == Repeat::Freely, None),
                    _ => (false, None),
                },
            };
            let pause = wait.unwrap_or(delay);
            if !transient || started.elapsed() + pause > self.retry_for {
                return outcome.map_err(network);
            }
            let why = match &outcome {
                Err(e) => e.to_string(),
                Ok(res) => format!("the server answered {}", res.status().as_u16()),
            };
            eprintln!("{why}; trying again in {} s", pause.as_secs_f64());
            tokio::time::sleep(pause).await;
            delay = (delay * 2).min(LONGEST_DELAY);
        }
    }

    async fn get_text(&self, path: &str) -> Result<String, ClientError> {
        let url = self.url(path);
        checked(
            self.send(|| Ok(self.http.get(&url)), Repeat::Freely)
                .await?,
        )
        .await
    }

    /// The stored record with this content, if the server has one.
    pub async fn find<T: Stored>(&self, sha256: &str) -> Result<Option<T>, ClientError> {
        let text = self
            .get_text(&format!("{}?sha256={sha256}", T::PATH))
            .await?;
        let page: Page<T> = parsed(&text, "list")?;
        Ok(page.items.into_iter().next())
    }

    /// Streams a file to the server and returns the stored record. An
    /// upload is idempotent (the same bytes are one record), so a broken
    /// one is sent again from the start.
    pub async fn upload<T: Stored>(
        &self,
        path: &Path,
        name: &str,
        media_type: &str,
    ) -> Result<T, ClientError> {
        let url = self.url(T::PATH);
        let build = || {
            let file = std::fs::File::open(path)
                .map_err(|e| ClientError::Input(format!("cannot read {}: {e}", path.display())))?;
            let len = file.metadata().map(|m| m.len()).ok();
            let stream = tokio_util::io::ReaderStream::with_capacity(
                tokio::fs::File::from_std(file),
                1 << 18,
            );
            let mut req = self
                .http
                .post(&url)
                .query(&[("name", name)])
                .header("content-type", media_type)
                .body(reqwest::Body::wrap_stream(stream));
            if let Some(len) = len {
                req = req.header("content-length", len);
            }
            Ok(req)
        };
        let text = checked(self.send(build, Repeat::Freely).await?).await?;
        parsed(&text, "upload answer")
    }

    /// The id for a file: found by its hash, or uploaded under `name`. The
    /// flag says whether it was uploaded.
    pub async fn ensure<T: Stored>(
        &self,
        path: &Path,
        name: &str,
    ) -> Result<(Uuid, bool), ClientError> {
        let given = path.to_owned();
        let bundle = tokio::task::spawn_blocking(move || T::bundle(&given))
            .await
            .map_err(|e| ClientError::Input(format!("building the bundle failed: {e}")))??;
        let (sha, send, media_type) = match &bundle {
            Some(b) => (b.sha256.clone(), b.zip.as_ref(), "application/zip"),
            None => (
                sha256_of(path).await.map_err(|e| {
                    ClientError::Input(format!("cannot read {}: {e}", path.display()))
                })?,
                path,
                "application/octet-stream",
            ),
        };
        if let Some(found) = self.find::<T>(&sha).await? {
            return Ok((found.id(), false));
        }
        let record: T = self.upload(send, name, media_type).await?;
        Ok((record.id(), true))
    }

    pub async fn create_evaluation(
        &self,
        body: &EvaluationRequest,
    ) -> Result<EvaluationRecord, ClientError> {
        let url = self.url("/v1/evaluations");
        let res = self
            .send(|| Ok(self.http.post(&url).json(body)), Repeat::Unprocessed)
            .await?;
        parsed(&checked(res).await?, "evaluation")
    }

    pub async fn evaluation(&self, id: Uuid) -> Result<EvaluationRecord, ClientError> {
        let text = self.get_text(&format!("/v1/evaluations/{id}")).await?;
        parsed(&text, "evaluation")
    }

    /// Makes a model its project's baseline.
    pub async fn set_baseline(
        &self,
        project: &str,
        body: &SetBaseline,
    ) -> Result<Project, ClientError> {
        let url = self.url(&format!("/v1/projects/{project}/baseline"));
        let res = self
            .send(|| Ok(self.http.put(&url).json(body)), Repeat::Unprocessed)
            .await?;
        parsed(&checked(res).await?, "project")
    }

    /// The report as the server sent it (for `--json`), and read.
    pub async fn report(&self, id: Uuid) -> Result<(String, Report), ClientError> {
        let text = self
            .get_text(&format!("/v1/evaluations/{id}/report"))
            .await?;
        let report = parsed(&text, "report")?;
        Ok((text, report))
    }
}
