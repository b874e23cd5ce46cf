//! A real S3-compatible server for the tests: s3s-fs (crates.io), started
//! per test on a free port over its own folder, with one bucket. The binary
//! is the one `.ci/run` installed (`PROCTOR_TEST_S3_SERVER`), or else the
//! one `.ci/s3-server install` builds under `target/tools`.
#![allow(dead_code, unreachable_pub)]

use std::net::TcpStream;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

pub const BUCKET: &str = "proctor-blobs";
const KEY: &str = "proctor-test";
const SECRET: &str = "proctor-test-secret";

fn binary() -> &'static Path {
    static BIN: OnceLock<PathBuf> = OnceLock::new();
    BIN.get_or_init(|| {
        if let Some(bin) = std::env::var_os("PROCTOR_TEST_S3_SERVER") {
            return PathBuf::from(bin);
        }
        let root = Path::new(env!("CARGO_MANIFEST_DIR"));
        let out = Command::new(root.join(".ci/s3-server"))
            .arg("install")
            .output()
            .expect("running .ci/s3-server");
        assert!(
            out.status.success(),
            "installing the S3 server failed:\n{}",
            String::from_utf8_lossy(&out.stderr)
        );
        PathBuf::from(String::from_utf8(out.stdout).unwrap().trim())
    })
}

pub struct S3Server {
    child: Child,
    pub endpoint: String,
    root: tempfile::TempDir,
}

impl S3Server {
    pub fn start() -> S3Server {
        let root = tempfile::tempdir().unwrap();
        std::fs::create_dir_all(root.path().join(BUCKET)).unwrap();
        let port = std::net::TcpListener::bind("127.0.0.1:0")
            .unwrap()
            .local_addr()
            .unwrap()
            .port();
        let log = std::fs::File::create(root.path().join("server.log")).unwrap();
        let child = Command::new(binary())
            .args(["--host", "127.0.0.1", "--port", &port.to_string()])
            .args(["--access-key", KEY, "--secret-key", SECRET])
            .arg(root.path())
            .stdout(Stdio::null())
            .stderr(log)
            .spawn()
            .unwrap();
        let start = Instant::now();
        while TcpStream::connect(("127.0.0.1", port)).is_err() {
            assert!(
                start.elapsed() < Duration::from_secs(20),
                "the S3 server did not start"
            );
            std::thread::sleep(Duration::from_millis(20));
        }
        S3Server {
            child,
            endpoint: format!("http://127.0.0.1:{port}"),
            root,
        }
    }

    /// The variables a Proctor process needs to reach the bucket.
    pub fn env(&self) -> Vec<(String, String)> {
        [
            ("AWS_ACCESS_KEY_ID", KEY),
            ("AWS_SECRET_ACCESS_KEY", SECRET),
            ("AWS_ENDPOINT", self.endpoint.as_str()),
            ("AWS_ALLOW_HTTP", "true"),
            ("AWS_REGION", "us-east-1"),
        ]
        .into_iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect()
    }

    /// `--blob-store` for a prefix in the bucket.
    pub fn url(&self, prefix: &str) -> String {
        format!("s3://{BUCKET}/{prefix}")
    }

    /// When the server last wrote an object's file.
    pub fn modified(&self, prefix: &str, kind: &str, name: &str) -> std::time::SystemTime {
        let path = self
            .root
            .path()
            .join(BUCKET)
            .join(prefix)
            .join(kind)
            .join(name);
        std::fs::metadata(path).unwrap().modified().unwrap()
    }

    /// The objects under a prefix and kind folder, as the server keeps them.
    pub fn objects(&self, prefix: &str, kind: &str) -> Vec<String> {
        let dir = self.root.path().join(BUCKET).join(prefix).join(kind);
        let mut names: Vec<String> = std::fs::read_dir(dir)
            .map(|d| {
                d.filter_map(Result::ok)
                    .map(|e| e.file_name().to_string_lossy().into_owned())
                    .filter(|n| !n.starts_with('.'))
                    .collect()
            })
            .unwrap_or_default();
        names.sort();
        names
    }
}

impl Drop for S3Server {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}
