//! A typed client of the HTTP contract (api.md), for `proctor submit` and
//! `proctor demo`. Files are hashed locally first, so a file the server
//! already holds (a teacher CI submits on every commit) is never sent again.

use std::path::Path;
use std::time::Duration;

use serde_json::Value;
use sha2::{Digest, Sha256};
use tokio::io::AsyncReadExt;

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

/// Which collection an upload goes to.
#[derive(Debug, Clone, Copy)]
pub enum Upload {
    Model,
    Dataset,
}

impl Upload {
    fn path(self) -> &'static str {
        match self {
            Upload::Model => "/v1/models",
            Upload::Dataset => "/v1/datasets",
        }
    }
}

pub struct Client {
    base: String,
    http: reqwest::Client,
}

fn network(e: reqwest::Error) -> ClientError {
    ClientError::Server(format!("cannot reach the server: {e}"))
}

/// Turns a non-success answer into an error carrying its problem detail.
async fn checked(res: reqwest::Response) -> Result<Value, ClientError> {
    let status = res.status();
    let text = res.text().await.map_err(network)?;
    let body: Value = serde_json::from_str(&text).unwrap_or(Value::Null);
    if status.is_success() {
        return Ok(body);
    }
    let detail = body["detail"].as_str().unwrap_or(text.as_str()).to_string();
    let field = body["field"]
        .as_str()
        .map(|f| format!(" (field {f})"))
        .unwrap_or_default();
    let message = format!("server answered {}: {detail}{field}", status.as_u16());
    if status.is_client_error() {
        Err(ClientError::Input(message))
    } else {
        Err(ClientError::Server(message))
    }
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

impl Client {
    pub fn new(base: &str) -> Client {
        let http = reqwest::Client::builder()
            .connect_timeout(Duration::from_secs(10))
            .build()
            .expect("a client with default TLS-free settings builds");
        Client {
            base: base.trim_end_matches('/').to_string(),
            http,
        }
    }

    fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    pub async fn get(&self, path: &str) -> Result<Value, ClientError> {
        checked(
            self.http
                .get(self.url(path))
                .send()
                .await
                .map_err(network)?,
        )
        .await
    }

    /// The id of a stored file with this content, if the server has one.
    pub async fn find(&self, kind: Upload, sha256: &str) -> Result<Option<String>, ClientError> {
        let page = self
            .get(&format!("{}?sha256={sha256}", kind.path()))
            .await?;
        Ok(page["items"][0]["id"].as_str().map(str::to_string))
    }

    /// Streams a file to the server and returns the stored record.
    pub async fn upload(
        &self,
        kind: Upload,
        path: &Path,
        name: &str,
    ) -> Result<Value, ClientError> {
        let file = tokio::fs::File::open(path)
            .await
            .map_err(|e| ClientError::Input(format!("cannot read {}: {e}", path.display())))?;
        let len = file.metadata().await.map(|m| m.len()).ok();
        let body =
            reqwest::Body::wrap_stream(tokio_util::io::ReaderStream::with_capacity(file, 1 << 18));
        let mut req = self
            .http
            .post(self.url(kind.path()))
            .query(&[("name", name)])
            .header("content-type", "application/octet-stream")
            .body(body);
        if let Some(len) = len {
            req = req.header("content-length", len);
        }
        checked(req.send().await.map_err(network)?).await
    }

    /// The id for a file: found by its hash, or uploaded.
    pub async fn ensure(&self, kind: Upload, path: &Path) -> Result<(String, bool), ClientError> {
        let sha = sha256_of(path)
            .await
            .map_err(|e| ClientError::Input(format!("cannot read {}: {e}", path.display())))?;
        if let Some(id) = self.find(kind, &sha).await? {
            return Ok((id, false));
        }
        let name = path
            .file_stem()
            .map_or("upload".into(), |s| s.to_string_lossy().into_owned());
        let record = self.upload(kind, path, &name).await?;
        let id = record["id"]
            .as_str()
            .ok_or_else(|| ClientError::Server("upload answer has no id".into()))?;
        Ok((id.to_string(), true))
    }

    pub async fn create_evaluation(&self, body: &Value) -> Result<Value, ClientError> {
        let res = self
            .http
            .post(self.url("/v1/evaluations"))
            .json(body)
            .send()
            .await
            .map_err(network)?;
        checked(res).await
    }

    pub async fn evaluation(&self, id: &str) -> Result<Value, ClientError> {
        self.get(&format!("/v1/evaluations/{id}")).await
    }
}
