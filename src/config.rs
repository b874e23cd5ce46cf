//! `proctor serve`'s and `proctor worker`'s settings: flags that also read
//! environment variables.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::time::Duration;

use crate::http::access::{AuthMode, ReadAccess};
use crate::labels::Labels;

/// Where the service keeps its data; shared by `serve` and `token`, which
/// acts on the same database.
#[derive(Debug, Clone, clap::Args)]
pub struct DataArgs {
    /// Folder for the database, uploads and cached teacher scores.
    #[arg(
        long,
        global = true,
        env = "PROCTOR_DATA_DIR",
        default_value = "./proctor-data"
    )]
    pub data_dir: PathBuf,
    /// Database URL: `sqlite://FILE` (by default a file in the data dir) or
    /// `postgres://USER@HOST/DB`, which many services and workers can share.
    #[arg(long, global = true, env = "PROCTOR_DATABASE_URL")]
    pub database_url: Option<String>,
    /// Where stored models and sets live: a folder (by default the data
    /// dir), or `s3://bucket/prefix` in S3-compatible object storage (each
    /// process then keeps copies in its data dir). Processes sharing a
    /// database share this store.
    #[arg(
        long,
        global = true,
        env = "PROCTOR_BLOB_STORE",
        value_name = "FOLDER|s3://BUCKET/PREFIX"
    )]
    pub blob_store: Option<String>,
}

impl DataArgs {
    pub fn database_url(&self) -> String {
        self.database_url
            .clone()
            .unwrap_or_else(|| format!("sqlite://{}", self.data_dir.join("proctor.db").display()))
    }

    pub fn blob_store(&self) -> String {
        self.blob_store
            .clone()
            .unwrap_or_else(|| self.data_dir.display().to_string())
    }
}

/// How a process runs evaluations: shared by `serve` (whose workers run
/// inside it) and `worker`.
#[derive(Debug, Clone, clap::Args)]
pub struct RunArgs {
    /// Evaluations run at once in this process (0 with `serve`: HTTP only,
    /// `proctor worker` processes run the evaluations).
    #[arg(long, env = "PROCTOR_WORKERS", default_value_t = 1)]
    pub workers: usize,
    /// Labels of this process's workers, `key=value,…`; an evaluation's
    /// `runs_on` names the labels a worker must carry.
    #[arg(long, env = "PROCTOR_LABELS", default_value = "", value_parser = parse_labels)]
    pub labels: Labels,
    /// Seconds a claimed evaluation stays claimed without its worker
    /// renewing the claim; after that another worker runs it.
    #[arg(long, env = "PROCTOR_LEASE_SECONDS", default_value_t = 30.0, value_parser = parse_lease)]
    pub lease_seconds: f64,
    /// Wall-time limit per evaluation (and per upload check), in seconds.
    #[arg(long, env = "PROCTOR_EVAL_TIMEOUT", default_value_t = 3600)]
    pub eval_timeout: u64,
    /// Address-space limit per evaluation (and per upload check), in MiB; 0 for none.
    #[arg(long, env = "PROCTOR_EVAL_MEMORY", default_value_t = 4096)]
    pub eval_memory: u64,
    /// Models run at once in an evaluation's bulk pass; 0 means one per logical core.
    #[arg(long, env = "PROCTOR_BULK_THREADS", default_value_t = 0)]
    pub bulk_threads: usize,
    /// The file every Proctor process on this machine locks while it times
    /// models, so that timed rounds run alone (by default one per machine
    /// in the temporary folder).
    #[arg(long, env = "PROCTOR_CPU_LOCK", value_name = "FILE")]
    pub cpu_lock: Option<PathBuf>,
}

fn parse_labels(text: &str) -> Result<Labels, String> {
    crate::labels::parse(text)
}

fn parse_lease(text: &str) -> Result<f64, String> {
    match text.parse::<f64>() {
        Ok(s) if (0.5..=86_400.0).contains(&s) => Ok(s),
        _ => Err("a lease is 0.5 to 86400 seconds".into()),
    }
}

impl RunArgs {
    pub fn eval_timeout(&self) -> Duration {
        Duration::from_secs(self.eval_timeout)
    }

    pub fn eval_memory_bytes(&self) -> Option<u64> {
        (self.eval_memory > 0).then_some(self.eval_memory << 20)
    }

    pub fn lease(&self) -> Duration {
        Duration::from_secs_f64(self.lease_seconds)
    }

    pub fn cpu_lock(&self) -> PathBuf {
        self.cpu_lock
            .clone()
            .unwrap_or_else(|| std::env::temp_dir().join("proctor-timing.lock"))
    }
}

/// `proctor worker`'s settings: where the shared data is, and how to run.
#[derive(Debug, Clone, clap::Args)]
pub struct WorkerArgs {
    #[command(flatten)]
    pub data: DataArgs,
    #[command(flatten)]
    pub run: RunArgs,
}

#[derive(Debug, Clone, clap::Args)]
pub struct ServeArgs {
    /// Address to listen on (port 0 picks a free port; the address is logged).
    #[arg(long, env = "PROCTOR_LISTEN", default_value = "127.0.0.1:8080")]
    pub listen: SocketAddr,
    #[command(flatten)]
    pub data: DataArgs,
    /// Largest accepted upload, in bytes.
    #[arg(long, env = "PROCTOR_MAX_UPLOAD_BYTES", default_value_t = 2 << 30)]
    pub max_upload_bytes: u64,
    /// The most bytes of models and sets kept in all; uploads past it are
    /// refused with 507 (default: no limit beyond 1 GiB left free on the disk).
    #[arg(long, env = "PROCTOR_MAX_STORED_BYTES")]
    pub max_stored_bytes: Option<u64>,
    /// Uploads that may stream at once; more are answered 503.
    #[arg(long, env = "PROCTOR_MAX_UPLOADS", default_value_t = 16)]
    pub max_uploads: usize,
    /// Seconds an upload may send nothing before it is dropped with 408.
    #[arg(
        long,
        env = "PROCTOR_UPLOAD_IDLE_TIMEOUT",
        value_name = "SECONDS",
        default_value_t = 30
    )]
    pub upload_idle_timeout: u64,
    #[command(flatten)]
    pub run: RunArgs,
    /// Upload and creation checks that may run at once, each in its own process.
    #[arg(long, env = "PROCTOR_CHECK_SLOTS", default_value_t = 2)]
    pub check_slots: usize,
    /// Checks that may wait for a slot; past that, requests are answered 503.
    #[arg(long, env = "PROCTOR_CHECK_WAITING", default_value_t = 16)]
    pub check_waiting: usize,
    /// Whether requests need a token (`proctor token create`); by default
    /// required unless the service listens on a loopback address.
    #[arg(long, env = "PROCTOR_AUTH", value_enum)]
    pub auth: Option<AuthMode>,
    /// Whether reads (GETs of the API and the dashboard) need a token.
    #[arg(long, env = "PROCTOR_READ_ACCESS", value_enum, default_value = "token")]
    pub read_access: ReadAccess,
    /// A PEM certificate chain: the service then speaks HTTPS (with --tls-key).
    #[arg(long, env = "PROCTOR_TLS_CERT", value_name = "FILE")]
    pub tls_cert: Option<PathBuf>,
    /// The PEM private key of --tls-cert.
    #[arg(long, env = "PROCTOR_TLS_KEY", value_name = "FILE")]
    pub tls_key: Option<PathBuf>,
    /// Delete finished evaluations this many days after they were created
    /// (default: keep all). Evaluations a baseline came from are kept.
    #[arg(long, env = "PROCTOR_KEEP_DAYS", value_name = "DAYS")]
    pub keep_days: Option<u64>,
    /// Keep the cache of teacher scores under this many bytes, dropping the
    /// longest unused first (default: no limit).
    #[arg(long, env = "PROCTOR_CACHE_MAX_BYTES", value_name = "BYTES")]
    pub cache_max_bytes: Option<u64>,
}

impl ServeArgs {
    /// The service's settings as `proctor serve` would take them from these
    /// flags (and the `PROCTOR_*` environment), every other one at its default.
    pub fn with_defaults(flags: &[&std::ffi::OsStr]) -> anyhow::Result<Self> {
        #[derive(clap::Parser)]
        struct Serve {
            #[command(flatten)]
            args: ServeArgs,
        }
        let argv = std::iter::once("serve".as_ref()).chain(flags.iter().copied());
        Ok(<Serve as clap::Parser>::try_parse_from(argv)?.args)
    }

    /// `--auth`, or its default: required unless listening on loopback.
    pub fn auth_mode(&self) -> AuthMode {
        self.auth.unwrap_or(if self.listen.ip().is_loopback() {
            AuthMode::Off
        } else {
            AuthMode::Required
        })
    }
}
