//! Starting and stopping the service: store, queue, HTTP, signals.

use std::net::SocketAddr;

use anyhow::Context;
use tokio::task::JoinHandle;
use tokio_util::sync::CancellationToken;

use crate::config::ServeArgs;
use crate::engine::Options;
use crate::queue::Workers;
use crate::sandbox::{Hold, Limits, Sandbox, SandboxConfig};
use crate::service::{App, ServiceConfig};
use crate::store::Store;

/// The wall-time limit of one check (an upload's inspection, a preflight).
const CHECK_TIME: std::time::Duration = std::time::Duration::from_secs(300);

/// A started service: its address, and a way to stop it cleanly.
pub struct Running {
    pub addr: SocketAddr,
    stop: CancellationToken,
    task: JoinHandle<anyhow::Result<()>>,
}

pub async fn start(args: &ServeArgs) -> anyhow::Result<Running> {
    std::fs::create_dir_all(&args.data_dir)
        .with_context(|| format!("creating the data dir {}", args.data_dir.display()))?;
    let store = Store::open(&args.database_url(), &args.data_dir)
        .await
        .context("opening the store")?;
    let limits = Limits {
        memory_bytes: args.eval_memory_bytes(),
        wall_time: args.eval_timeout(),
    };
    let sandbox = Sandbox::new(SandboxConfig {
        exe: std::env::current_exe().context("finding this program")?,
        check_limits: Limits {
            wall_time: limits.wall_time.min(CHECK_TIME),
            ..limits.clone()
        },
        limits,
        check_slots: args.check_slots,
        check_waiting: args.check_waiting,
        cpu_lock: store.blobs.cpu_lock_path(),
        options: Options {
            teacher_cache: Some(store.blobs.teacher_scores_dir()),
            bulk_threads: args.bulk_threads,
        },
        hold: Hold::from_env(&args.data_dir),
    });
    let workers = Workers::start(store.clone(), sandbox.clone(), args.workers)
        .await
        .context("starting the workers")?;
    let app = App {
        store: store.clone(),
        sandbox,
        workers: workers.clone(),
        config: ServiceConfig {
            max_upload_bytes: args.max_upload_bytes,
        },
    };
    let listener = tokio::net::TcpListener::bind(args.listen)
        .await
        .with_context(|| format!("listening on {}", args.listen))?;
    let addr = listener.local_addr()?;
    tracing::info!(%addr, data_dir = %args.data_dir.display(), "serving");
    let stop = CancellationToken::new();
    let stopped = stop.clone();
    let task = tokio::spawn(async move {
        axum::serve(listener, crate::http::router(app))
            .with_graceful_shutdown(stopped.cancelled_owned())
            .await
            .context("serving HTTP")?;
        tracing::info!("stopping: running evaluations go back to the queue");
        workers.shutdown().await;
        store.close().await;
        Ok(())
    });
    Ok(Running { addr, stop, task })
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

/// `proctor serve`.
pub async fn serve(args: ServeArgs) -> anyhow::Result<()> {
    let running = start(&args).await?;
    // Scripts and tests read this line to learn the port when asked for port 0.
    println!("proctor listening on http://{}", running.addr);
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
