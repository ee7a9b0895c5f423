//! `perihelix serve`: the stages wired together, and their life cycle.
//!
//! ```text
//! incoming dir --notify/scan--> watch (take files) --> store <-- api
//!                                   | mark dirty          ^
//!                                   v                     |
//!                               worker (debounce, fit on blocking threads)
//! ```
//!
//! One shutdown signal ([`shutdown`]) reaches every task: on SIGTERM or
//! ctrl-c the intake stops between files, running fits are cancelled at
//! their next iteration, the HTTP server stops accepting and gives open
//! requests a bounded time, the store is flushed, and the process exits 0.
//! Readiness is told to systemd once the store is open and the first scan
//! has listed the incoming directory; the watchdog is fed only while the
//! intake and scheduler loops keep turning.

pub mod history;
pub mod metrics;
pub mod shutdown;
pub mod systemd;

use std::sync::atomic::Ordering;
use std::sync::Arc;
use std::time::Duration;

use thiserror::Error;
use tokio::sync::oneshot;

use crate::alerts::outbox::Outbox;
use crate::api::{router, ApiState};
use crate::config::Config;
use crate::store::{SledStore, Store, StoreError};
use crate::watch::Intake;
use crate::worker::job::{identity, JobContext};

use metrics::Metrics;

/// Open HTTP connections get this long after the stop signal.
const HTTP_GRACE: Duration = Duration::from_secs(5);

#[derive(Debug, Error)]
pub enum DaemonError {
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error("cannot create {path}: {source}")]
    Directory {
        path: std::path::PathBuf,
        source: std::io::Error,
    },
    #[error("cannot listen on {addr}: {source}")]
    Bind {
        addr: std::net::SocketAddr,
        source: std::io::Error,
    },
    #[error("the HTTP server failed: {0}")]
    Serve(std::io::Error),
    #[error("{0}")]
    Setup(String),
}

/// SIGTERM or SIGINT. The handlers are installed when this is called, not
/// when the future is first polled: called before readiness is announced,
/// a stop sent right after READY=1 is a clean stop, not the default
/// action's sudden death.
fn stop_signal() -> impl std::future::Future<Output = ()> {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{signal, SignalKind};
        let term = signal(SignalKind::terminate());
        let interrupt = signal(SignalKind::interrupt());
        async move {
            match (term, interrupt) {
                (Ok(mut t), Ok(mut i)) => {
                    tokio::select! {
                        _ = t.recv() => {},
                        _ = i.recv() => {},
                    }
                }
                (Err(e), _) | (_, Err(e)) => {
                    tracing::error!("cannot listen for stop signals: {e}");
                    std::future::pending::<()>().await;
                }
            }
        }
    }
    #[cfg(not(unix))]
    async {
        let _ = tokio::signal::ctrl_c().await;
    }
}

/// Threads for blocking work the runtime may start: the fits, the store
/// reads the API lets through at once, and a few for ingest, store
/// flushes, predictions and decisions. Unbounded, a crowd of clients grows
/// the pool to hundreds of idle threads (a new one is started whenever a
/// task arrives just before the last one is handed back), and each keeps
/// its own allocator arena.
pub fn blocking_threads(config: &Config) -> usize {
    config.refit.workers + crate::api::READS_IN_FLIGHT + 8
}

/// Runs the daemon until a stop signal; returns once everything stopped.
pub async fn serve(config: Config) -> Result<(), DaemonError> {
    let stop = stop_signal();
    let config = Arc::new(config);
    let dirs = &config.directories;
    for d in [
        &dirs.incoming,
        &dirs.archive,
        &dirs.rejected,
        &dirs.database,
    ] {
        std::fs::create_dir_all(d).map_err(|source| DaemonError::Directory {
            path: d.clone(),
            source,
        })?;
    }
    let database = dirs.database.clone();
    let store: Arc<dyn Store> = Arc::new(
        tokio::task::spawn_blocking(move || SledStore::open(&database))
            .await
            .map_err(|e| StoreError::Sled(format!("opening the store: {e}")))??,
    );
    let metrics = Arc::new(Metrics::new());
    let (trigger, shutdown) = shutdown::channel();
    let (queue, requests) = crate::worker::queue();
    let solve = Arc::new(
        crate::solve::SolveContext::new(&config).map_err(|e| DaemonError::Setup(e.to_string()))?,
    );
    let listener = tokio::net::TcpListener::bind(config.api.bind)
        .await
        .map_err(|source| DaemonError::Bind {
            addr: config.api.bind,
            source,
        })?;
    let bound = listener.local_addr().map_err(DaemonError::Serve)?;
    tracing::info!(address = %bound, "API listening");

    let outbox_wake = Arc::new(tokio::sync::Notify::new());
    let outbox = Outbox::new(store.clone(), &config.alerts, metrics.clone())
        .map_err(|e| DaemonError::Setup(format!("alert delivery: {e}")))?;
    tracing::info!(email = %outbox.mailer.describe(), webhook = outbox.webhook.as_ref().map_or("none", |w| w.url()), "alerts go to");
    let job = Arc::new(JobContext {
        config: config.clone(),
        store: store.clone(),
        solve: solve.clone(),
        identity: identity(&config),
        api_base: format!("http://{bound}"),
        outbox: outbox_wake.clone(),
        metrics: metrics.clone(),
    });
    let intake = Arc::new(Intake {
        config: config.clone(),
        store: store.clone(),
        queue,
        metrics: metrics.clone(),
    });
    let predictions = solve.clone();
    let api = ApiState::new(
        store.clone(),
        intake.clone(),
        metrics.clone(),
        predictions,
        config.api.token.clone(),
        config.directories.database.join("staging"),
    );

    let outbox_task = tokio::spawn(outbox.run(outbox_wake, shutdown.clone()));
    let scheduler = tokio::spawn(crate::worker::run(
        job,
        requests,
        metrics.clone(),
        shutdown.clone(),
    ));
    let (ready_tx, ready_rx) = oneshot::channel();
    let intake_task = {
        let shutdown = shutdown.clone();
        let intake = Intake {
            config: intake.config.clone(),
            store: intake.store.clone(),
            queue: intake.queue.clone(),
            metrics: intake.metrics.clone(),
        };
        tokio::spawn(crate::watch::run(intake, ready_tx, shutdown))
    };
    let http = {
        let mut shutdown = shutdown.clone();
        let app = router(api.clone());
        tokio::spawn(async move {
            axum::serve(listener, app)
                .with_graceful_shutdown(async move { shutdown.wait().await })
                .await
        })
    };
    let watchdog = tokio::spawn(systemd::watchdog(metrics.clone(), shutdown.clone()));

    // Ready: the store is open and the first scan has listed the files.
    if ready_rx.await.is_ok() {
        api.0.ready.store(true, Ordering::Relaxed);
        systemd::ready(bound);
        tracing::info!(incoming = %config.directories.incoming.display(), "ready");
    }

    let mut waiting = shutdown.clone();
    tokio::select! {
        _ = stop => tracing::info!("stop signal received; stopping"),
        _ = waiting.wait() => {},
    }
    systemd::stopping();
    trigger.trigger();

    let _ = intake_task.await;
    let _ = scheduler.await;
    let _ = outbox_task.await;
    match tokio::time::timeout(HTTP_GRACE, http).await {
        Ok(Ok(Ok(()))) => {}
        Ok(Ok(Err(e))) => tracing::error!("the HTTP server: {e}"),
        Ok(Err(e)) => tracing::error!("the HTTP task: {e}"),
        Err(_) => tracing::warn!("open HTTP connections did not close in time; leaving them"),
    }
    watchdog.abort();
    let flush_store = store.clone();
    tokio::task::spawn_blocking(move || flush_store.flush())
        .await
        .map_err(|e| StoreError::Sled(format!("flushing the store: {e}")))??;
    tracing::info!("stopped");
    Ok(())
}
