//! Starting and stopping the service: store, queue, HTTP, signals.

use anyhow::Context;

use crate::config::ServeArgs;
use crate::queue::child::Limits;
use crate::queue::{Queue, QueueConfig};
use crate::service::{App, ServiceConfig};
use crate::store::Store;

pub async fn serve(args: ServeArgs) -> anyhow::Result<()> {
    std::fs::create_dir_all(&args.data_dir)
        .with_context(|| format!("creating the data dir {}", args.data_dir.display()))?;
    let store = Store::open(&args.database_url(), &args.data_dir)
        .await
        .context("opening the store")?;
    let config = QueueConfig {
        exe: std::env::current_exe().context("finding this program")?,
        limits: Limits {
            memory_bytes: args.eval_memory_bytes(),
            wall_time: args.eval_timeout(),
        },
        workers: args.workers,
        offline_threads: args.offline_threads,
    };
    let queue = Queue::start(store.clone(), config)
        .await
        .context("starting the queue")?;
    let app = App {
        store: store.clone(),
        queue: queue.clone(),
        config: ServiceConfig {
            max_upload_bytes: args.max_upload_bytes,
        },
    };
    let listener = tokio::net::TcpListener::bind(args.listen)
        .await
        .with_context(|| format!("listening on {}", args.listen))?;
    let addr = listener.local_addr()?;
    // Scripts and tests read this line to learn the port when asked for port 0.
    println!("proctor listening on http://{addr}");
    tracing::info!(%addr, data_dir = %args.data_dir.display(), "serving");
    axum::serve(listener, crate::http::router(app))
        .with_graceful_shutdown(shutdown_signal())
        .await
        .context("serving HTTP")?;
    tracing::info!("stopping: running evaluations go back to the queue");
    queue.shutdown().await;
    store.close().await;
    Ok(())
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
