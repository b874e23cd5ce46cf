//! `proctor serve`'s settings: flags that also read environment variables.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::Duration;

#[derive(Debug, Clone, clap::Args)]
pub struct ServeArgs {
    /// Address to listen on (port 0 picks a free port; the address is logged).
    #[arg(long, env = "PROCTOR_LISTEN", default_value = "127.0.0.1:8080")]
    pub listen: SocketAddr,
    /// Folder for the database, uploads and cached teacher scores.
    #[arg(long, env = "PROCTOR_DATA_DIR", default_value = "./proctor-data")]
    pub data_dir: PathBuf,
    /// Database URL; by default a SQLite file in the data dir.
    #[arg(long, env = "PROCTOR_DATABASE_URL")]
    pub database_url: Option<String>,
    /// Largest accepted upload, in bytes.
    #[arg(long, env = "PROCTOR_MAX_UPLOAD_BYTES", default_value_t = 2 << 30)]
    pub max_upload_bytes: u64,
    /// Evaluations run at once.
    #[arg(long, env = "PROCTOR_WORKERS", default_value_t = 1)]
    pub workers: usize,
    /// Wall-time limit per evaluation (and per upload check), in seconds.
    #[arg(long, env = "PROCTOR_EVAL_TIMEOUT", default_value_t = 3600)]
    pub eval_timeout: u64,
    /// Address-space limit per evaluation (and per upload check), in MiB; 0 for none.
    #[arg(long, env = "PROCTOR_EVAL_MEMORY", default_value_t = 4096)]
    pub eval_memory: u64,
    /// Models run at once in an evaluation's bulk pass; 0 means one per logical core.
    #[arg(long, env = "PROCTOR_BULK_THREADS", default_value_t = 0)]
    pub bulk_threads: usize,
    /// Upload and creation checks that may run at once, each in its own process.
    #[arg(long, env = "PROCTOR_CHECK_SLOTS", default_value_t = 2)]
    pub check_slots: usize,
    /// Checks that may wait for a slot; past that, requests are answered 503.
    #[arg(long, env = "PROCTOR_CHECK_WAITING", default_value_t = 16)]
    pub check_waiting: usize,
}

impl ServeArgs {
    pub fn database_url(&self) -> String {
        self.database_url
            .clone()
            .unwrap_or_else(|| format!("sqlite://{}", self.data_dir.join("proctor.db").display()))
    }

    pub fn eval_timeout(&self) -> Duration {
        Duration::from_secs(self.eval_timeout)
    }

    pub fn eval_memory_bytes(&self) -> Option<u64> {
        (self.eval_memory > 0).then_some(self.eval_memory << 20)
    }
}
