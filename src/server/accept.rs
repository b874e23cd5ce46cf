//! Accepting connections: plain TCP or TLS, each served by hyper with a
//! limit on how long a client may take to send its request headers (and
//! so how long an idle connection stays open), and a shutdown that waits
//! for requests in flight only up to a deadline.

use std::time::Duration;

use axum::Router;
use hyper_util::rt::{TokioExecutor, TokioIo, TokioTimer};
use hyper_util::server::conn::auto::Builder;
use hyper_util::server::graceful::GracefulShutdown;
use hyper_util::service::TowerToHyperService;
use tokio::io::{AsyncRead, AsyncWrite};
use tokio::net::TcpListener;
use tokio::task::JoinSet;
use tokio_rustls::TlsAcceptor;
use tokio_util::sync::CancellationToken;

/// How long a client may take to send a request's headers, and so how long
/// an idle kept-alive connection waits for its next request.
pub(super) const HEADER_READ: Duration = Duration::from_secs(10);

/// How long a stop waits for requests in flight (a long upload among them)
/// before it drops them.
pub(super) const SHUTDOWN_DEADLINE: Duration = Duration::from_secs(10);

/// A client's byte stream, plain or TLS, served the same way.
trait Connection: AsyncRead + AsyncWrite + Unpin + Send {}
impl<T: AsyncRead + AsyncWrite + Unpin + Send> Connection for T {}

/// Serves `router` on `listener` until `stop`, then drains.
pub(super) async fn serve(
    listener: TcpListener,
    router: Router,
    tls: Option<TlsAcceptor>,
    stop: CancellationToken,
) {
    let mut builder = Builder::new(TokioExecutor::new());
    builder
        .http1()
        .timer(TokioTimer::new())
        .header_read_timeout(HEADER_READ);
    builder
        .http2()
        .timer(TokioTimer::new())
        .keep_alive_interval(Some(Duration::from_secs(30)));
    let graceful = GracefulShutdown::new();
    let mut connections = JoinSet::new();
    loop {
        let (stream, peer) = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok(a) => a,
                Err(e) => {
                    // Out of descriptors and the like: pause rather than spin.
                    tracing::warn!(error = %e, "accepting a connection failed");
                    tokio::time::sleep(Duration::from_millis(100)).await;
                    continue;
                }
            },
            _ = stop.cancelled() => break,
        };
        while connections.try_join_next().is_some() {}
        let service = TowerToHyperService::new(router.clone());
        let builder = builder.clone();
        let watcher = graceful.watcher();
        let tls = tls.clone();
        connections.spawn(async move {
            let io: Box<dyn Connection> = match tls {
                None => Box::new(stream),
                Some(tls) => {
                    let handshake = tokio::time::timeout(HEADER_READ, tls.accept(stream)).await;
                    let Ok(Ok(stream)) = handshake else {
                        tracing::debug!(%peer, "a TLS handshake failed or stalled");
                        return;
                    };
                    Box::new(stream)
                }
            };
            let conn = builder.serve_connection_with_upgrades(TokioIo::new(io), service);
            if let Err(e) = watcher.watch(conn.into_owned()).await {
                tracing::debug!(%peer, error = %e, "a connection ended with an error");
            }
        });
    }
    drop(listener);
    tokio::select! {
        _ = graceful.shutdown() => {}
        _ = tokio::time::sleep(SHUTDOWN_DEADLINE) => {
            tracing::warn!(open = connections.len(), "stopping: requests still open past the deadline are dropped");
            connections.abort_all();
        }
    }
}
