//! What every handler shares: the store, the settings, the metrics and the channels
//! that wake long-polling readers.

use super::auth::Access;
use super::connections::ConnectionLimits;
use super::error::ApiError;
use super::metrics::Metrics;
use crate::store::{AnyStore, StoreError};
use std::sync::Arc;
use std::time::Duration;
use tokio::sync::watch;

/// What the service needs besides the store.
#[derive(Debug, Clone)]
pub struct ServiceSettings {
    /// Tokens for writes and reads.
    pub access: Access,
    /// Request body limit, bytes.
    pub max_body: usize,
    /// Limit on handling one request.
    pub request_timeout: Duration,
    /// Header and idle timeouts, connection cap.
    pub connections: ConnectionLimits,
}

/// Shared state of the handlers.
#[derive(Clone)]
pub struct AppState {
    inner: Arc<Shared>,
}

struct Shared {
    store: AnyStore,
    settings: ServiceSettings,
    metrics: Metrics,
    /// Bumped whenever a snapshot is stored (here or, via the store's notifications,
    /// by another replica); long-polling readers wait on it.
    changes: watch::Sender<u64>,
    /// Becomes `true` when shutdown starts; long polls end early.
    shutting_down: watch::Receiver<bool>,
}

impl AppState {
    /// The state of a service over `store`; `shutting_down` turns `true` when shutdown
    /// starts.
    pub(super) fn new(store: AnyStore, settings: ServiceSettings, shutting_down: watch::Receiver<bool>) -> Self {
        let (changes, _) = watch::channel(0u64);
        Self { inner: Arc::new(Shared { store, settings, metrics: Metrics::new(), changes, shutting_down }) }
    }
    pub(super) fn store(&self) -> &AnyStore {
        &self.inner.store
    }
    pub(super) fn metrics(&self) -> &Metrics {
        &self.inner.metrics
    }
    pub(super) fn settings(&self) -> &ServiceSettings {
        &self.inner.settings
    }
    /// Tells long-polling readers that something was stored.
    pub(super) fn announce_change(&self) {
        self.inner.changes.send_modify(|generation| *generation = generation.wrapping_add(1));
    }
    /// A receiver that sees every later [`AppState::announce_change`].
    pub(super) fn subscribe_changes(&self) -> watch::Receiver<u64> {
        self.inner.changes.subscribe()
    }
    /// A receiver that turns `true` when shutdown starts.
    pub(super) fn shutting_down(&self) -> watch::Receiver<bool> {
        self.inner.shutting_down.clone()
    }
    /// Counts a failed store `operation` and turns its error into the response's. A
    /// value the store refused is the request's fault and not counted: a counter
    /// anyone can raise would be a false alarm.
    pub(super) fn store_failed(&self, operation: &str, e: StoreError) -> ApiError {
        if !matches!(e, StoreError::Refused(_)) {
            self.metrics().store_error(operation);
        }
        e.into()
    }
}
