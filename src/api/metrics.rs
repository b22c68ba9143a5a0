//! Prometheus metrics (text exposition format) in a registry owned by the service, not
//! a global: request counts and latencies by route and status, analyses by outcome,
//! fit durations, store errors.

use axum::extract::{MatchedPath, Request, State};
use axum::middleware::Next;
use axum::response::Response;
use prometheus_client::encoding::EncodeLabelSet;
use prometheus_client::metrics::counter::Counter;
use prometheus_client::metrics::family::Family;
use prometheus_client::metrics::histogram::{exponential_buckets, Histogram};
use prometheus_client::registry::Registry;
use std::sync::Arc;
use std::time::Instant;

/// Labels of a request.
#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct RequestLabels {
    /// Route template, e.g. `/v1/snapshots/{id}` (`unmatched` for unknown paths): one
    /// of the router's templates, never the path a client sent.
    pub route: String,
    /// HTTP method: one of [`KNOWN_METHODS`], else `other`, so made-up methods cannot
    /// add series.
    pub method: &'static str,
    /// Status code.
    pub status: u16,
}

/// The methods counted by name; every other method is counted as `other`.
pub const KNOWN_METHODS: [&str; 9] = ["GET", "HEAD", "POST", "PUT", "DELETE", "PATCH", "OPTIONS", "TRACE", "CONNECT"];

/// The label of a request's method: its name when standard, else `other`.
pub fn method_label(method: &axum::http::Method) -> &'static str {
    KNOWN_METHODS.iter().copied().find(|known| *known == method.as_str()).unwrap_or("other")
}

/// Labels of an analysis.
#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct OutcomeLabels {
    /// `ok` or `invalid_input`.
    pub outcome: String,
}

/// Labels of a connection the server closed.
#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct ConnectionLabels {
    /// `header_timeout`, `idle_timeout`, `evicted` (its slot given to a new
    /// connection) or `refused` (every slot busy with a request).
    pub reason: &'static str,
}

/// Labels of a store error.
#[derive(Clone, Debug, Hash, PartialEq, Eq, EncodeLabelSet)]
pub struct StoreLabels {
    /// Store operation.
    pub operation: String,
}

fn latency_histogram() -> Histogram {
    // 100 us to about 100 s: analysis takes milliseconds, long polls up to a minute.
    Histogram::new(exponential_buckets(1e-4, 2.0, 21))
}

fn fit_histogram() -> Histogram {
    // 10 us to about 80 ms.
    Histogram::new(exponential_buckets(1e-5, 2.0, 14))
}

/// The service's metrics.
#[derive(Clone)]
pub struct Metrics {
    registry: Arc<Registry>,
    requests: Family<RequestLabels, Counter>,
    latency: Family<RequestLabels, Histogram, fn() -> Histogram>,
    analyses: Family<OutcomeLabels, Counter>,
    fit_seconds: Histogram,
    store_errors: Family<StoreLabels, Counter>,
    connections_closed: Family<ConnectionLabels, Counter>,
}

impl Default for Metrics {
    fn default() -> Self {
        Self::new()
    }
}

impl Metrics {
    /// A fresh registry with every metric registered.
    pub fn new() -> Self {
        let mut registry = Registry::with_prefix("logstrip");
        let requests = Family::<RequestLabels, Counter>::default();
        let latency = Family::<RequestLabels, Histogram, fn() -> Histogram>::new_with_constructor(latency_histogram);
        let analyses = Family::<OutcomeLabels, Counter>::default();
        let fit_seconds = fit_histogram();
        let store_errors = Family::<StoreLabels, Counter>::default();
        let connections_closed = Family::<ConnectionLabels, Counter>::default();
        registry.register("http_requests", "HTTP requests by route, method and status", requests.clone());
        registry.register("http_request_duration_seconds", "HTTP request latency, seconds", latency.clone());
        registry.register("analyses", "Snapshot analyses by outcome", analyses.clone());
        registry.register("fit_duration_seconds", "Model fit duration, seconds", fit_seconds.clone());
        registry.register("store_errors", "Store errors by operation", store_errors.clone());
        registry.register("connections_closed", "Connections the server closed, by reason", connections_closed.clone());
        Self {
            registry: Arc::new(registry),
            requests,
            latency,
            analyses,
            fit_seconds,
            store_errors,
            connections_closed,
        }
    }

    /// Counts an analysis (`ok` or `invalid_input`).
    pub fn analysis(&self, outcome: &str) {
        self.analyses.get_or_create(&OutcomeLabels { outcome: outcome.to_string() }).inc();
    }

    /// Records a fit duration, microseconds.
    pub fn fit_duration_us(&self, micros: u64) {
        self.fit_seconds.observe(micros as f64 * 1e-6);
    }

    /// Counts a store error.
    pub fn store_error(&self, operation: &str) {
        self.store_errors.get_or_create(&StoreLabels { operation: operation.to_string() }).inc();
    }

    /// Counts a connection the server closed (`reason` as in [`ConnectionLabels`]).
    pub fn connection_closed(&self, reason: &'static str) {
        self.connections_closed.get_or_create(&ConnectionLabels { reason }).inc();
    }

    /// The text exposition.
    pub fn render(&self) -> String {
        let mut text = String::new();
        if prometheus_client::encoding::text::encode(&mut text, &self.registry).is_err() {
            text.clear();
        }
        text
    }
}

/// Middleware: counts and times every request by route template, method and status.
/// Every label comes from a fixed set (the router's templates or `unmatched`, the
/// standard methods or `other`, the status codes the service sends), so no request can
/// add series of its own.
pub async fn record(State(metrics): State<Metrics>, request: Request, next: Next) -> Response {
    let started = Instant::now();
    let route = request
        .extensions()
        .get::<MatchedPath>()
        .map(|p| p.as_str().to_string())
        .unwrap_or_else(|| "unmatched".to_string());
    let method = method_label(request.method());
    let response = next.run(request).await;
    let labels = RequestLabels { route, method, status: response.status().as_u16() };
    metrics.requests.get_or_create(&labels).inc();
    metrics.latency.get_or_create(&labels).observe(started.elapsed().as_secs_f64());
    response
}
