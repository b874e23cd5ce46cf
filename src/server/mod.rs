//! Starting and stopping the service: the data dir's lock, the store, the
//! sandbox and workers, housekeeping, HTTP(S), and signals. A stop ends the
//! HTTP side and the workers at once, each within its own deadline.

mod accept;
mod tls;

use std::net::SocketAddr;

use anyhow::Context;
use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;

use std::sync::Arc;

use crate::config::{DataArgs, RunArgs, ServeArgs, WorkerArgs};
use crate::engine::Options;
use crate::http::access::{AccessConfig, AuthMode};
use crate::queue::{WorkerSetup, Workers};
use crate::sandbox::{Hold, Limits, Sandbox, SandboxConfig};
use crate::service::{App, Housekeeping, ServiceConfig};
use crate::store::Store;
use crate::telemetry::Telemetry;

/// The wall-time limit of one check (an upload's inspection, a preflight).
const CHECK_TIME: std::time::Duration = std::time::Duration::from_secs(300);

/// A started service: its address, and a way to stop it cleanly.
pub struct Running {
    pub addr: SocketAddr,
    /// Whether it speaks HTTPS.
    pub tls: bool,
    stop: CancellationToken,
    task: JoinHandle<anyhow::Result<()>>,
}

impl Running {
    /// The address clients use, e.g. `https://127.0.0.1:8443`.
    pub fn url(&self) -> String {
        let scheme = if self.tls { "https" } else { "http" };
        format!("{scheme}://{}", self.addr)
    }
}

/// Takes the data dir's lock for this process's life: a second service on
/// the same data dir would sweep the first one's uploads in progress and
/// run its evaluations twice.
fn lock_data_dir(dir: &std::path::Path) -> anyhow::Result<std::fs::File> {
    let path = dir.join("proctor.lock");
    let file = std::fs::OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(&path)
        .with_context(|| format!("opening {}", path.display()))?;
    match file.try_lock() {
        Ok(()) => Ok(file),
        Err(std::fs::TryLockError::WouldBlock) => anyhow::bail!(
            "another Proctor process is using the data dir {}; stop it first, or give this one \
             its own --data-dir",
            dir.display()
        ),
        Err(std::fs::TryLockError::Error(e)) => {
            Err(e).with_context(|| format!("locking {}", path.display()))
        }
    }
}

/// What serving and working both open: the data dir (locked), the store
/// and the sandbox.
struct Base {
    lock: std::fs::File,
    store: Store,
    sandbox: Sandbox,
}

impl Base {
    async fn open(data: &DataArgs, run: &RunArgs, checks: (usize, usize)) -> anyhow::Result<Base> {
        std::fs::create_dir_all(&data.data_dir)
            .with_context(|| format!("creating the data dir {}", data.data_dir.display()))?;
        let lock = lock_data_dir(&data.data_dir)?;
        let store = Store::open(&data.database_url(), &data.blob_store(), &data.data_dir)
            .await
            .context("opening the store")?;
        let limits = Limits {
            memory_bytes: run.eval_memory_bytes(),
            wall_time: run.eval_timeout(),
        };
        let sandbox = Sandbox::new(SandboxConfig {
            exe: std::env::current_exe().context("finding this program")?,
            check_limits: Limits {
                wall_time: limits.wall_time.min(CHECK_TIME),
                ..limits.clone()
            },
            limits,
            check_slots: checks.0,
            check_waiting: checks.1,
            cpu_lock: run.cpu_lock(),
            options: Options {
                teacher_cache: Some(store.blobs.teacher_scores_dir()),
                bulk_threads: run.bulk_threads,
            },
            hold: Hold::from_env(&data.data_dir),
        });
        Ok(Base {
            lock,
            store,
            sandbox,
        })
    }

    async fn workers_of(
        store: &Store,
        sandbox: &Sandbox,
        run: &RunArgs,
        apart: bool,
        telemetry: Arc<Telemetry>,
    ) -> anyhow::Result<Workers> {
        let setup = WorkerSetup {
            slots: run.workers,
            labels: run.labels.clone(),
            lease: run.lease(),
            apart,
        };
        Workers::start(store.clone(), sandbox.clone(), telemetry, setup)
            .await
            .context("starting the workers")
    }
}

pub async fn start(args: &ServeArgs) -> anyhow::Result<Running> {
    let tls = match (&args.tls_cert, &args.tls_key) {
        (Some(cert), Some(key)) => Some(tls::acceptor(cert, key)?),
        (None, None) => None,
        _ => anyhow::bail!("--tls-cert and --tls-key go together"),
    };
    let access = AccessConfig {
        auth: args.auth_mode(),
        reads: args.read_access,
        tls: tls.is_some(),
    };
    if access.auth == AuthMode::Off && !args.listen.ip().is_loopback() {
        tracing::warn!(listen = %args.listen, "access control is off on a non-loopback address; only localhost host names are served");
    }
    let Base {
        lock,
        store,
        sandbox,
    } = Base::open(
        &args.data,
        &args.run,
        (args.check_slots, args.check_waiting),
    )
    .await?;
    let telemetry = Arc::new(Telemetry::default());
    let workers = Base::workers_of(&store, &sandbox, &args.run, false, telemetry.clone()).await?;
    let app = App {
        store: store.clone(),
        sandbox,
        workers: workers.clone(),
        config: ServiceConfig {
            max_upload_bytes: args.max_upload_bytes,
            max_stored_bytes: args.max_stored_bytes,
            upload_idle: std::time::Duration::from_secs(args.upload_idle_timeout.max(1)),
        },
        uploads: std::sync::Arc::new(tokio::sync::Semaphore::new(args.max_uploads.max(1))),
        telemetry,
    };
    let listener = tokio::net::TcpListener::bind(args.listen)
        .await
        .with_context(|| format!("listening on {}", args.listen))?;
    let addr = listener.local_addr()?;
    tracing::info!(%addr, data_dir = %args.data.data_dir.display(), auth = ?access.auth, "serving");
    let stop = CancellationToken::new();
    let housekeeping = Housekeeping {
        keep: args
            .keep_days
            .map(|d| std::time::Duration::from_secs(d * 86_400)),
        cache_max_bytes: args.cache_max_bytes,
    };
    let tidy = tokio::spawn(app.clone().keep_tidy(housekeeping, stop.clone()));
    let router = crate::http::router(app, access);
    let http = tokio::spawn(accept::serve(listener, router, tls.clone(), stop.clone()));
    let stopped = stop.clone();
    let task = tokio::spawn(async move {
        stopped.cancelled().await;
        tracing::info!("stopping: running evaluations go back to the queue");
        // Both sides stop at once: the workers need not wait for uploads.
        let (served, _, _) = tokio::join!(http, workers.shutdown(), tidy);
        served.context("the HTTP task")?;
        store.close().await;
        drop(lock);
        Ok(())
    });
    Ok(Running {
        addr,
        tls: tls.is_some(),
        stop,
        task,
    })
}

impl Running {
    pub async fn stop(self) -> anyhow::Result<()> {
        self.stop.cancel();
        self.task.await.context("the server task")?
    }

    /// Serves until SIGTERM or Ctrl-C, then stops cleanly.
    pub async fn until_signal(self) -> anyhow::Result<()> {
        shutdown_signal().await;
        self.stop().await
    }
}

/// `proctor worker`: runs evaluations from the shared queue until SIGTERM
/// or Ctrl-C; what runs then goes back to the queue.
pub async fn work(args: WorkerArgs) -> anyhow::Result<()> {
    if args.run.workers == 0 {
        anyhow::bail!("a worker runs at least one evaluation at a time (--workers 1 or more)");
    }
    let Base {
        lock,
        store,
        sandbox,
    } = Base::open(&args.data, &args.run, (1, 1)).await?;
    let workers = Base::workers_of(
        &store,
        &sandbox,
        &args.run,
        true,
        Arc::new(Telemetry::default()),
    )
    .await?;
    tracing::info!(
        data_dir = %args.data.data_dir.display(),
        labels = ?args.run.labels,
        workers = args.run.workers,
        "working"
    );
    // Scripts and tests read this line to know the worker has registered.
    println!("proctor worker running");
    shutdown_signal().await;
    tracing::info!("stopping: running evaluations go back to the queue");
    workers.shutdown().await;
    store.close().await;
    drop(lock);
    Ok(())
}

/// `proctor serve`.
pub async fn serve(args: ServeArgs) -> anyhow::Result<()> {
    let running = start(&args).await?;
    // Scripts and tests read this line to learn the port when asked for port 0.
    println!("proctor listening on {}", running.url());
    running.until_signal().await
}

async fn shutdown_signal() {
    let ctrl_c = async {
        let _ = tokio::signal::ctrl_c().await;
    };
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    tokio::select! {
        _ = ctrl_c => {}
        _ = term => {}
    }
}
