//! The real `proctor worker` binary on a shared database and blob folder,
//! with its own data dir (and log) beside the test's.
#![allow(dead_code, unreachable_pub)]

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};

pub struct Worker {
    child: Option<Child>,
    pub data_dir: PathBuf,
}

/// Where workers and services of one test meet.
#[derive(Clone)]
pub struct Shared {
    pub database_url: String,
    /// A folder, or `s3://bucket/prefix`.
    pub blob_store: String,
    /// One CPU lock for every process, as on one machine.
    pub cpu_lock: PathBuf,
    /// More variables for every process (object storage's credentials).
    pub env: Vec<(String, String)>,
}

impl Shared {
    /// The `serve` flags that put a service on this database and folder.
    pub fn serve_flags(&self, workers: usize) -> Vec<String> {
        vec![
            "--database-url".into(),
            self.database_url.clone(),
            "--blob-store".into(),
            self.blob_store.clone(),
            "--cpu-lock".into(),
            self.cpu_lock.display().to_string(),
            "--workers".into(),
            workers.to_string(),
        ]
    }
}

impl Worker {
    /// Starts a worker and waits until it has registered. `hold_at` holds
    /// its evaluations at a stage (the test hold of `src/sandbox/hold.rs`).
    pub fn start(
        shared: &Shared,
        data_dir: &Path,
        extra: &[&str],
        hold_at: Option<&str>,
    ) -> Worker {
        std::fs::create_dir_all(data_dir).unwrap();
        let log = std::fs::OpenOptions::new()
            .create(true)
            .append(true)
            .open(data_dir.join("worker.log"))
            .unwrap();
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_proctor"));
        cmd.arg("worker")
            .arg("--data-dir")
            .arg(data_dir)
            .arg("--database-url")
            .arg(&shared.database_url)
            .arg("--blob-store")
            .arg(&shared.blob_store)
            .arg("--cpu-lock")
            .arg(&shared.cpu_lock)
            .args(extra)
            .env_remove("PROCTOR_TEST_HOLD_AT")
            .envs(shared.env.iter().map(|(k, v)| (k, v)))
            .stdout(Stdio::piped())
            .stderr(log);
        if let Some(stage) = hold_at {
            cmd.env("PROCTOR_TEST_HOLD_AT", stage);
        }
        let mut child = cmd.spawn().unwrap();
        let mut line = String::new();
        BufReader::new(child.stdout.take().unwrap())
            .read_line(&mut line)
            .unwrap();
        assert_eq!(
            line.trim(),
            "proctor worker running",
            "see {}/worker.log",
            data_dir.display()
        );
        Worker {
            child: Some(child),
            data_dir: data_dir.to_owned(),
        }
    }

    /// What the worker logged so far.
    pub fn log(&self) -> String {
        std::fs::read_to_string(self.data_dir.join("worker.log")).unwrap_or_default()
    }

    /// Kills the worker with SIGKILL, as a crash or a lost machine would.
    pub fn kill9(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
        }
    }

    /// Lets evaluations held at their stage go on.
    pub fn release(&self) {
        std::fs::write(self.data_dir.join("test-hold.release"), b"").unwrap();
    }

    /// Sends SIGTERM and waits for a clean exit.
    pub fn terminate(&mut self) -> std::process::ExitStatus {
        let c = self.child.as_mut().unwrap();
        unsafe {
            libc::kill(c.id() as i32, libc::SIGTERM);
        }
        let status = c.wait().unwrap();
        self.child = None;
        status
    }
}

impl Drop for Worker {
    fn drop(&mut self) {
        self.kill9();
    }
}
