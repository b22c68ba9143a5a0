//! The HTTP service: axum routes over the analytics core and the history store.
//!
//! Handlers parse with [`crate::wire`], compute with [`crate::analytics`] (on the
//! blocking pool: an analysis is CPU work of a few milliseconds), persist through
//! [`crate::store::Store`], and return errors as [`error::ApiError`], which is mapped to
//! problem+json in one place. [`start`] binds, serves and shuts down gracefully; tests
//! call it with port 0.

pub mod auth;
pub mod body;
pub mod chart_endpoints;
pub mod connections;
pub mod error;
pub mod examples;
pub mod handlers;
pub mod history;
pub mod metrics;
pub mod openapi;
pub mod query;
pub mod responses;
pub mod smile_endpoints;
pub mod state;
pub mod tenor_charts;
pub mod tenor_history;
pub mod timestamps;
pub mod valuation_endpoints;

pub use connections::{ConnectionLimits, DEFAULT_HEADER_TIMEOUT, DEFAULT_IDLE_TIMEOUT, DEFAULT_MAX_CONNECTIONS};
pub use handlers::{MAX_WAIT_SECONDS, WAIT_RECHECK};
pub use state::{AppState, ServiceSettings};

use crate::store::AnyStore;
use axum::extract::DefaultBodyLimit;
use axum::routing::{get, post};
use axum::Router;
use std::net::SocketAddr;
use std::time::Duration;
use tokio::net::TcpListener;
use tokio::sync::watch;

/// Default request body limit, bytes (16 MiB).
pub const DEFAULT_MAX_BODY: usize = 16 * 1024 * 1024;
/// Default limit on the whole handling of a request; above [`MAX_WAIT_SECONDS`] so a
/// long poll ends by itself first.
pub const DEFAULT_REQUEST_TIMEOUT: Duration = Duration::from_secs(75);

/// The routes, with body limit (a declared `Content-Length` over it refused before the
/// body is read), auth, metrics and the request time limit.
pub fn router(state: AppState) -> Router {
    let max_body = state.settings().max_body;
    Router::new()
        .route("/v1/snapshots", post(handlers::post_snapshot))
        .route("/v1/snapshots/{id}", get(handlers::get_snapshot))
        .route("/v1/snapshots/{id}/chart.svg", get(tenor_charts::get_snapshot_chart))
        .route("/v1/analyze", post(handlers::post_analyze))
        .route("/v1/fits", post(handlers::post_fit))
        .route("/v1/valuations", post(valuation_endpoints::post_valuation))
        .route("/v1/realized", post(valuation_endpoints::post_realized))
        .route("/v1/underlyings", get(handlers::get_underlyings))
        .route("/v1/underlyings/{underlying}/latest", get(handlers::get_latest))
        .route("/v1/underlyings/{underlying}/history", get(history::get_history))
        .route("/v1/underlyings/{underlying}/latest/chart.svg", get(chart_endpoints::get_latest_chart))
        .route("/v1/underlyings/{underlying}/history/chart.svg", get(chart_endpoints::get_history_chart))
        .route("/v1/underlyings/{underlying}/history/tenors.svg", get(tenor_charts::get_tenor_chart))
        .route("/v1/snapshots/{id}/expiries/{index}/smile.svg", get(smile_endpoints::get_smile_chart))
        .route("/", get(chart_endpoints::get_overview))
        .route("/healthz", get(handlers::healthz))
        .route("/readyz", get(handlers::readyz))
        .route("/metrics", get(handlers::get_metrics))
        .route("/openapi.json", get(openapi::get_openapi))
        .fallback(handlers::not_found)
        .method_not_allowed_fallback(handlers::method_not_allowed)
        .layer(axum::middleware::from_fn_with_state(state.settings().access.clone(), auth::require_token))
        .layer(axum::middleware::from_fn_with_state(state.clone(), handlers::limit_time))
        .layer(DefaultBodyLimit::max(max_body))
        .layer(axum::middleware::from_fn_with_state(max_body, body::refuse_declared_oversize))
        .layer(axum::middleware::from_fn_with_state(state.metrics().clone(), metrics::record))
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
    let state = AppState::new(store.clone(), settings, shutdown_rx.clone());
    if let Some(url) = store.listen_url() {
        tokio::spawn(handlers::forward_store_notifications(url, state.clone(), shutdown_rx.clone()));
    }
    let limits = state.settings().connections;
    let metrics = state.metrics().clone();
    let app = router(state);
    let trigger = shutdown_tx.clone();
    tokio::spawn(async move {
        stop.await;
        let _ = trigger.send(true);
    });
    let mut on_shutdown = shutdown_rx.clone();
    tokio::spawn(async move {
        let _ = on_shutdown.wait_for(|down| *down).await;
        tracing::info!("shutting down: no new connections, finishing requests in flight");
    });
    let task = tokio::spawn(connections::serve(listener, app, limits, metrics, shutdown_rx));
    Ok(RunningServer { addr, shutdown: shutdown_tx, task })
}
