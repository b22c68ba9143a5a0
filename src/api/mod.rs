//! The HTTP service: axum routes over the analytics core and the history store.
//!
//! Handlers parse with [`crate::wire`], compute with [`crate::analytics`] (on the
//! blocking pool: an analysis is CPU work of a few milliseconds), persist through
//! [`crate::store::Store`], and return errors as [`error::ApiError`], which is mapped to
//! problem+json in one place. [`start`] binds, serves and shuts down gracefully; tests
//! call it with port 0.

pub mod auth;
pub mod body;
pub mod charts;
pub mod docs;
pub mod error;
pub mod handlers;
pub mod history;
pub mod metrics;
pub mod risk;

use crate::store::AnyStore;
use auth::Access;
use axum::extract::DefaultBodyLimit;
use axum::routing::{get, post};
use axum::Router;
use std::net::SocketAddr;
use std::sync::Arc;
use std::time::Duration;
use tokio::net::TcpListener;
use tokio::sync::watch;

/// Longest `?wait` a reader may ask for on `latest`, seconds.
pub const MAX_WAIT_SECONDS: u64 = 60;
/// Default request body limit, bytes (16 MiB).
pub const DEFAULT_MAX_BODY: usize = 16 * 1024 * 1024;
/// Default limit on the whole handling of a request; above [`MAX_WAIT_SECONDS`] so a
/// long poll ends by itself first.
pub const DEFAULT_REQUEST_TIMEOUT: Duration = Duration::from_secs(75);
/// Long-polling readers re-check the store at least this often, in case a
/// notification from another replica was lost.
pub const WAIT_RECHECK: Duration = Duration::from_secs(5);

/// What the service needs besides the store.
#[derive(Debug, Clone)]
pub struct ServiceSettings {
    /// Tokens for writes and reads.
    pub access: Access,
    /// Request body limit, bytes.
    pub max_body: usize,
    /// Limit on handling one request.
    pub request_timeout: Duration,
}

/// Shared state of the handlers.
#[derive(Clone)]
pub struct AppState {
    inner: Arc<Shared>,
}

struct Shared {
    store: AnyStore,
    settings: ServiceSettings,
    metrics: metrics::Metrics,
    /// Bumped whenever a snapshot is stored (here or, via the store's notifications,
    /// by another replica); long-polling readers wait on it.
    changes: watch::Sender<u64>,
    /// Becomes `true` when shutdown starts; long polls end early.
    shutting_down: watch::Receiver<bool>,
}

impl AppState {
    fn store(&self) -> &AnyStore {
        &self.inner.store
    }
    fn metrics(&self) -> &metrics::Metrics {
        &self.inner.metrics
    }
    fn settings(&self) -> &ServiceSettings {
        &self.inner.settings
    }
    /// Tells long-polling readers that something was stored.
    fn announce_change(&self) {
        self.inner.changes.send_modify(|generation| *generation = generation.wrapping_add(1));
    }
}

/// The routes, with body limit, auth, metrics and the request time limit.
pub fn router(state: AppState) -> Router {
    let max_body = state.settings().max_body;
    Router::new()
        .route("/v1/snapshots", post(handlers::post_snapshot))
        .route("/v1/snapshots/{id}", get(handlers::get_snapshot))
        .route("/v1/analyze", post(handlers::post_analyze))
        .route("/v1/fits", post(handlers::post_fit))
        .route("/v1/valuations", post(risk::post_valuation))
        .route("/v1/realized", post(risk::post_realized))
        .route("/v1/underlyings", get(handlers::get_underlyings))
        .route("/v1/underlyings/{underlying}/latest", get(handlers::get_latest))
        .route("/v1/underlyings/{underlying}/history", get(history::get_history))
        .route("/v1/underlyings/{underlying}/latest/chart.svg", get(charts::get_latest_chart))
        .route("/v1/underlyings/{underlying}/history/chart.svg", get(charts::get_history_chart))
        .route("/", get(charts::get_overview))
        .route("/healthz", get(handlers::healthz))
        .route("/readyz", get(handlers::readyz))
        .route("/metrics", get(handlers::get_metrics))
        .route("/openapi.json", get(handlers::get_openapi))
        .fallback(handlers::not_found)
        .method_not_allowed_fallback(handlers::method_not_allowed)
        .layer(axum::middleware::from_fn_with_state(state.clone(), auth::require_token))
        .layer(axum::middleware::from_fn_with_state(state.clone(), handlers::limit_time))
        .layer(DefaultBodyLimit::max(max_body))
        .layer(axum::middleware::from_fn_with_state(state.clone(), metrics::record))
        .with_state(state)
}

/// A running service.
pub struct RunningServer {
    /// The bound address (the real port when started on port 0).
    pub addr: SocketAddr,
    shutdown: watch::Sender<bool>,
    task: tokio::task::JoinHandle<std::io::Result<()>>,
}

impl RunningServer {
    /// Starts graceful shutdown: stop accepting, end long polls, finish in-flight
    /// requests; returns when done.
    ///
    /// # Errors
    /// The server's I/O error, if it failed.
    pub async fn shutdown(self) -> std::io::Result<()> {
        let _ = self.shutdown.send(true);
        self.task.await.map_err(std::io::Error::other)?
    }

    /// Waits until the server stops (after a signal passed to [`start`]).
    ///
    /// # Errors
    /// The server's I/O error, if it failed.
    pub async fn wait(self) -> std::io::Result<()> {
        self.task.await.map_err(std::io::Error::other)?
    }
}

/// Binds `listener`, serves until `stop` resolves or [`RunningServer::shutdown`] is
/// called, and then shuts down gracefully.
pub fn start(
    listener: TcpListener,
    store: AnyStore,
    settings: ServiceSettings,
    stop: impl std::future::Future<Output = ()> + Send + 'static,
) -> std::io::Result<RunningServer> {
    let addr = listener.local_addr()?;
    let (shutdown_tx, shutdown_rx) = watch::channel(false);
    let (changes, _) = watch::channel(0u64);
    let state = AppState {
        inner: Arc::new(Shared {
            store: store.clone(),
            settings,
            metrics: metrics::Metrics::new(),
            changes,
            shutting_down: shutdown_rx.clone(),
        }),
    };
    if let Some(url) = store.listen_url() {
        tokio::spawn(handlers::forward_store_notifications(url, state.clone(), shutdown_rx.clone()));
    }
    let app = router(state);
    let mut on_shutdown = shutdown_rx;
    let trigger = shutdown_tx.clone();
    tokio::spawn(async move {
        stop.await;
        let _ = trigger.send(true);
    });
    let task = tokio::spawn(async move {
        axum::serve(listener, app.into_make_service())
            .with_graceful_shutdown(async move {
                let _ = on_shutdown.wait_for(|down| *down).await;
                tracing::info!("shutting down: no new connections, finishing requests in flight");
            })
            .await
    });
    Ok(RunningServer { addr, shutdown: shutdown_tx, task })
}
