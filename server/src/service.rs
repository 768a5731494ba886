//! Running the HTTP service: open the database, import the built-in and the folder's
//! calibration sets, serve until SIGTERM or Ctrl-C, purge expired order maps in the background.

use std::net::SocketAddr;
use std::time::Duration;

use anyhow::Context;
use time::OffsetDateTime;
use tokio::net::TcpListener;
use tokio::task::JoinHandle;

use crate::calibration_sets::import_at_start;
use crate::config::ServiceConfig;
use crate::http::{app, AppState};
use crate::storage::{order_maps, Storage};

/// Opens `database_url`, imports the built-in and the folder's calibration sets, and serves on
/// `bind` until a shutdown signal arrives; in-flight requests finish first.
pub async fn run(
    bind: SocketAddr,
    database_url: &str,
    config: ServiceConfig,
) -> anyhow::Result<()> {
    let storage = Storage::connect(database_url)
        .await
        .context("could not open the database")?;
    tracing::info!(database = storage.backend().name(), "database ready");
    import_at_start(&storage, config.calibration_sets.as_deref())
        .await
        .context("could not import the calibration sets")?;
    let purger = spawn_purger(storage.clone(), config.purge_interval);
    let state = AppState::new(storage.clone(), config);
    let listener = TcpListener::bind(bind)
        .await
        .with_context(|| format!("could not listen on {bind}"))?;
    tracing::info!(address = %listener.local_addr()?, "listening");
    axum::serve(listener, app(state))
        .with_graceful_shutdown(shutdown_signal())
        .await
        .context("server failed")?;
    purger.abort();
    storage.close().await;
    tracing::info!("stopped");
    Ok(())
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
