//! Running the HTTP service: open the database, import the built-in and the folder's
//! calibration sets, serve until SIGTERM or Ctrl-C, purge expired order maps in the background.

use std::future::Future;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;
use axum::extract::connect_info::ConnectInfo;
use axum::{Extension, Router};
use hyper::server::conn::http1;
use hyper_util::rt::{TokioIo, TokioTimer};
use hyper_util::server::graceful::GracefulShutdown;
use hyper_util::service::TowerToHyperService;
use time::OffsetDateTime;
use tokio::net::TcpListener;
use tokio::sync::Semaphore;
use tokio::task::JoinHandle;
use tower::Layer;

use crate::access::AccessMode;
use crate::calibration_sets::import_at_start;
use crate::config::ServiceConfig;
use crate::http::download::ConnectionCut;
use crate::http::{app, AppState};
use crate::storage::{order_maps, Storage};

/// Opens `database_url`, imports the built-in and the folder's calibration sets, and serves on
/// `bind` until a shutdown signal arrives; in-flight requests finish first. The access mode is
/// `requested`, or else chosen from `bind` and the database ([`AccessMode::resolve`]), and
/// logged; it replaces `config.access`.
pub async fn run(
    bind: SocketAddr,
    database_url: &str,
    requested: Option<AccessMode>,
    config: ServiceConfig,
) -> anyhow::Result<()> {
    let storage = Storage::connect(database_url)
        .await
        .context("could not open the database")?;
    tracing::info!(database = storage.backend().name(), "database ready");
    let (access, reason) = AccessMode::resolve(requested, bind, storage.backend());
    tracing::info!(mode = access.name(), reason, "access mode");
    let config = ServiceConfig { access, ..config };
    import_at_start(&storage, config.calibration_sets.as_deref())
        .await
        .context("could not import the calibration sets")?;
    let purger = spawn_purger(storage.clone(), config.purge_interval);
    let state = AppState::new(storage.clone(), config);
    let listener = TcpListener::bind(bind)
        .await
        .with_context(|| format!("could not listen on {bind}"))?;
    tracing::info!(address = %listener.local_addr()?, "listening");
    let config = state.config.clone();
    serve(listener, app(state), &config, shutdown_signal()).await;
    purger.abort();
    storage.close().await;
    tracing::info!("stopped");
    Ok(())
}

/// Serves `app` on `listener` (HTTP/1.1) until `shutdown` resolves, then lets the open
/// connections finish. At most `config.max_connections` connections are served at once; further
/// ones wait in the listen backlog until one closes. A connection must send a request's headers
/// within `config.header_timeout` of opening or of its previous response, so silent, trickling
/// and idle keep-alive connections are closed then (hyper's header read time-out).
pub async fn serve(
    listener: TcpListener,
    app: Router,
    config: &ServiceConfig,
    shutdown: impl Future<Output = ()>,
) {
    let mut http = http1::Builder::new();
    http.timer(TokioTimer::new())
        .header_read_timeout(config.header_timeout);
    let slots = Arc::new(Semaphore::new(config.max_connections));
    let graceful = GracefulShutdown::new();
    let mut shutdown = std::pin::pin!(shutdown);
    loop {
        let slot = tokio::select! {
            slot = slots.clone().acquire_owned() => slot,
            () = &mut shutdown => break,
        };
        let Ok(slot) = slot else { break };
        let (stream, peer) = tokio::select! {
            accepted = listener.accept() => match accepted {
                Ok(accepted) => accepted,
                Err(e) => {
                    // Out of file descriptors, or a connection reset before it was accepted:
                    // wait a little rather than spin.
                    tracing::warn!(error = %e, "accepting a connection failed");
                    tokio::time::sleep(Duration::from_millis(100)).await;
                    continue;
                }
            },
            () = &mut shutdown => break,
        };
        // The client's address, for the audit trail (`ConnectInfo` in the request).
        // And a way to close it, for downloads whose reader is too slow.
        let cut = ConnectionCut::default();
        let app = Extension(ConnectInfo(peer)).layer(Extension(cut.clone()).layer(app.clone()));
        let service = TowerToHyperService::new(app);
        let connection = graceful.watch(http.serve_connection(TokioIo::new(stream), service));
        tokio::spawn(async move {
            tokio::select! {
                ended = connection => if let Err(e) = ended {
                    tracing::debug!(%peer, error = %e, "connection ended with an error");
                },
                () = cut.0.notified() => tracing::info!(%peer, "connection closed: a download passed its time limit"),
            }
            drop(slot);
        });
    }
    drop(listener);
    graceful.shutdown().await;
}

/// Deletes expired order maps now and every `interval`.
pub fn spawn_purger(storage: Storage, interval: Duration) -> JoinHandle<()> {
    tokio::spawn(async move {
        let mut ticker = tokio::time::interval(interval);
        loop {
            ticker.tick().await;
            match order_maps::purge_expired(&storage, OffsetDateTime::now_utc()).await {
                Ok(0) => {}
                Ok(n) => tracing::info!(purged = n, "expired order maps deleted"),
                Err(e) => tracing::warn!(error = %e, "purging expired order maps failed"),
            }
        }
    })
}

async fn shutdown_signal() {
    let ctrl_c = async {
        if let Err(e) = tokio::signal::ctrl_c().await {
            tracing::warn!(error = %e, "cannot listen for Ctrl-C");
            std::future::pending::<()>().await;
        }
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(e) => {
                tracing::warn!(error = %e, "cannot listen for SIGTERM");
                std::future::pending::<()>().await;
            }
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        () = ctrl_c => {},
        () = terminate => {},
    }
    tracing::info!("shutting down: finishing requests in flight");
}
