//! Accepting and watching connections: at most [`ConnectionLimits::max_connections`]
//! open at once, a request head must arrive within the header timeout of its first
//! byte, and a connection that moves no bytes and has no request in progress is closed
//! after the idle timeout. When every slot is taken, a new connection takes the slot of
//! the one that has waited longest without a request in progress (a client trickling a
//! request head, or an idle keep-alive); when all are busy with requests, the new one is
//! closed. Graceful shutdown stops accepting and lets requests in flight finish.

use super::metrics::Metrics;
use axum::body::Body;
use axum::Router;
use hyper::body::Incoming;
use hyper_util::rt::{TokioExecutor, TokioIo};
use hyper_util::server::conn::auto::Builder;
use std::collections::HashMap;
use std::io;
use std::pin::{pin, Pin};
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex};
use std::task::{Context, Poll};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::net::{TcpListener, TcpStream};
use tokio::sync::{watch, Notify};
use tokio::time::Instant;
use tower::ServiceExt;

/// Default time a client has to send a whole request head once its first byte came.
pub const DEFAULT_HEADER_TIMEOUT: Duration = Duration::from_secs(10);
/// Default time a connection may stay open with no request and no bytes moving.
pub const DEFAULT_IDLE_TIMEOUT: Duration = Duration::from_secs(30);
/// Default cap on open connections (well under the common limit of 1,024 open files).
pub const DEFAULT_MAX_CONNECTIONS: usize = 512;
/// Pause after a failed `accept` (out of file descriptors, say) before the next.
const ACCEPT_RETRY: Duration = Duration::from_millis(100);

/// Limits on connections.
#[derive(Debug, Clone, Copy)]
pub struct ConnectionLimits {
    /// Longest time from the first byte of a request head to its end.
    pub header_timeout: Duration,
    /// Longest time without a request in progress and without bytes moving.
    pub idle_timeout: Duration,
    /// Most connections open at once.
    pub max_connections: usize,
}

impl Default for ConnectionLimits {
    fn default() -> Self {
        Self {
            header_timeout: DEFAULT_HEADER_TIMEOUT,
            idle_timeout: DEFAULT_IDLE_TIMEOUT,
            max_connections: DEFAULT_MAX_CONNECTIONS,
        }
    }
}

/// What the watchdog of one connection knows about it. Times are milliseconds since
/// the server started.
struct Watch {
    /// Requests being handled.
    busy: AtomicUsize,
    /// When the connection last became idle or last moved bytes while idle.
    idle_since: AtomicU64,
    /// When the first byte of the next request head came (0: none yet).
    head_started: AtomicU64,
    /// Wakes the watchdog when the state changes.
    changed: Notify,
    /// Set when another connection takes this one's slot.
    evicted: AtomicBool,
}

/// The clock of the connection table.
#[derive(Clone, Copy)]
struct Clock(Instant);

impl Clock {
    /// Milliseconds since start, at least 1 (0 means "not set").
    fn now(self) -> u64 {
        u64::try_from(self.0.elapsed().as_millis()).unwrap_or(u64::MAX).max(1)
    }
    fn at(self, millis: u64) -> Instant {
        self.0 + Duration::from_millis(millis)
    }
}

impl Watch {
    fn new(now: u64) -> Self {
        Self {
            busy: AtomicUsize::new(0),
            idle_since: AtomicU64::new(now),
            head_started: AtomicU64::new(0),
            changed: Notify::new(),
            evicted: AtomicBool::new(false),
        }
    }

    /// Bytes came in: while idle, the first starts the header clock.
    fn on_read(&self, now: u64) {
        if self.busy.load(Ordering::Acquire) == 0
            && self.head_started.compare_exchange(0, now, Ordering::AcqRel, Ordering::Acquire).is_ok()
        {
            self.changed.notify_one();
        }
    }

    /// Bytes went out: while idle (a response body still being written), the idle
    /// clock restarts.
    fn on_write(&self, now: u64) {
        if self.busy.load(Ordering::Acquire) == 0 {
            self.idle_since.store(now, Ordering::Release);
        }
    }

    /// How long this connection has been waiting without a request in progress, if it
    /// is.
    fn waiting_since(&self) -> Option<u64> {
        if self.busy.load(Ordering::Acquire) > 0 {
            return None;
        }
        let head = self.head_started.load(Ordering::Acquire);
        Some(if head > 0 { head } else { self.idle_since.load(Ordering::Acquire) })
    }
}

/// Marks a request in progress on its connection until dropped.
struct InRequest {
    watch: Arc<Watch>,
    clock: Clock,
}

impl InRequest {
    fn enter(watch: Arc<Watch>, clock: Clock) -> Self {
        watch.busy.fetch_add(1, Ordering::AcqRel);
        watch.head_started.store(0, Ordering::Release);
        watch.changed.notify_one();
        Self { watch, clock }
    }
}

impl Drop for InRequest {
    fn drop(&mut self) {
        self.watch.idle_since.store(self.clock.now(), Ordering::Release);
        self.watch.head_started.store(0, Ordering::Release);
        self.watch.busy.fetch_sub(1, Ordering::AcqRel);
        self.watch.changed.notify_one();
    }
}

/// A TCP stream that reports its reads and writes to its [`Watch`].
struct WatchedStream {
    inner: TcpStream,
    watch: Arc<Watch>,
    clock: Clock,
}

impl AsyncRead for WatchedStream {
    fn poll_read(mut self: Pin<&mut Self>, cx: &mut Context<'_>, buf: &mut ReadBuf<'_>) -> Poll<io::Result<()>> {
        let before = buf.filled().len();
        let polled = Pin::new(&mut self.inner).poll_read(cx, buf);
        if matches!(polled, Poll::Ready(Ok(()))) && buf.filled().len() > before {
            self.watch.on_read(self.clock.now());
        }
        polled
    }
}

impl AsyncWrite for WatchedStream {
    fn poll_write(mut self: Pin<&mut Self>, cx: &mut Context<'_>, data: &[u8]) -> Poll<io::Result<usize>> {
        let polled = Pin::new(&mut self.inner).poll_write(cx, data);
        if matches!(polled, Poll::Ready(Ok(n)) if n > 0) {
            self.watch.on_write(self.clock.now());
        }
        polled
    }
    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_flush(cx)
    }
    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        Pin::new(&mut self.inner).poll_shutdown(cx)
    }
}

/// The open connections, by number.
#[derive(Default)]
struct Table {
    open: Mutex<HashMap<u64, Arc<Watch>>>,
}

impl Table {
    fn lock(&self) -> std::sync::MutexGuard<'_, HashMap<u64, Arc<Watch>>> {
        self.open.lock().unwrap_or_else(std::sync::PoisonError::into_inner)
    }

    /// Registers connection `id` if there is room, making room by evicting the
    /// connection waiting longest without a request when full. `false` when every
    /// connection is busy with a request.
    fn admit(&self, id: u64, watch: Arc<Watch>, limit: usize) -> Admission {
        let mut open = self.lock();
        let mut outcome = Admission::Free;
        if open.len() >= limit {
            let oldest = open
                .iter()
                .filter(|(_, w)| !w.evicted.load(Ordering::Acquire))
                .filter_map(|(k, w)| w.waiting_since().map(|t| (t, *k)))
                .min();
            let Some((_, victim)) = oldest else {
                return Admission::Refused;
            };
            if let Some(w) = open.remove(&victim) {
                w.evicted.store(true, Ordering::Release);
                w.changed.notify_one();
            }
            outcome = Admission::Evicted;
        }
        open.insert(id, watch);
        outcome
    }

    fn remove(&self, id: u64) {
        self.lock().remove(&id);
    }
}

enum Admission {
    Free,
    Evicted,
    Refused,
}

/// Why a connection was closed by the server.
#[derive(Clone, Copy)]
enum Closed {
    HeaderTimeout,
    IdleTimeout,
    Evicted,
}

impl Closed {
    fn label(self) -> &'static str {
        match self {
            Self::HeaderTimeout => "header_timeout",
            Self::IdleTimeout => "idle_timeout",
            Self::Evicted => "evicted",
        }
    }
}

/// Resolves when the connection must be closed, with the reason.
async fn watchdog(watch: &Watch, limits: ConnectionLimits, clock: Clock) -> Closed {
    loop {
        let notified = watch.changed.notified();
        let mut notified = pin!(notified);
        notified.as_mut().enable();
        if watch.evicted.load(Ordering::Acquire) {
            return Closed::Evicted;
        }
        let deadline = if watch.busy.load(Ordering::Acquire) > 0 {
            None
        } else {
            let head = watch.head_started.load(Ordering::Acquire);
            if head > 0 {
                Some((clock.at(head) + limits.header_timeout, Closed::HeaderTimeout))
            } else {
                Some((clock.at(watch.idle_since.load(Ordering::Acquire)) + limits.idle_timeout, Closed::IdleTimeout))
            }
        };
        match deadline {
            None => notified.await,
            Some((at, reason)) => {
                tokio::select! {
                    _ = notified => {}
                    _ = tokio::time::sleep_until(at) => {
                        // Bytes written meanwhile move the idle clock: check again.
                        let still_due = match reason {
                            Closed::IdleTimeout => watch.busy.load(Ordering::Acquire) == 0
                                && watch.head_started.load(Ordering::Acquire) == 0
                                && clock.at(watch.idle_since.load(Ordering::Acquire)) + limits.idle_timeout <= Instant::now(),
                            _ => watch.busy.load(Ordering::Acquire) == 0 && watch.head_started.load(Ordering::Acquire) > 0,
                        };
                        if still_due {
                            return reason;
                        }
                    }
                }
            }
        }
    }
}

/// Accepts connections on `listener` and serves `app` on each until `shutdown` turns
/// `true`; then stops accepting, lets each connection finish its request in flight and
/// returns when all are closed.
pub async fn serve(
    listener: TcpListener,
    app: Router,
    limits: ConnectionLimits,
    metrics: Metrics,
    mut shutdown: watch::Receiver<bool>,
) -> io::Result<()> {
    let clock = Clock(Instant::now());
    let table = Arc::new(Table::default());
    let mut tasks = tokio::task::JoinSet::new();
    let mut next_id: u64 = 0;
    loop {
        let accepted = tokio::select! {
            accepted = listener.accept() => accepted,
            _ = shutdown.wait_for(|down| *down) => break,
            Some(_) = tasks.join_next(), if !tasks.is_empty() => continue,
        };
        let stream = match accepted {
            Ok((stream, _)) => stream,
            Err(e) => {
                tracing::warn!(error = %e, "accept failed; retrying");
                tokio::time::sleep(ACCEPT_RETRY).await;
                continue;
            }
        };
        next_id += 1;
        let id = next_id;
        let watch = Arc::new(Watch::new(clock.now()));
        match table.admit(id, watch.clone(), limits.max_connections.max(1)) {
            Admission::Refused => {
                metrics.connection_closed("refused");
                drop(stream);
                continue;
            }
            Admission::Evicted => metrics.connection_closed(Closed::Evicted.label()),
            Admission::Free => {}
        }
        let io = TokioIo::new(WatchedStream { inner: stream, watch: watch.clone(), clock });
        let (app, table, metrics, mut shutdown) = (app.clone(), table.clone(), metrics.clone(), shutdown.clone());
        tasks.spawn(async move {
            let per_request = watch.clone();
            let service = hyper::service::service_fn(move |request: hyper::Request<Incoming>| {
                let guard = InRequest::enter(per_request.clone(), clock);
                let app = app.clone();
                async move {
                    let response = app.oneshot(request.map(Body::new)).await;
                    drop(guard);
                    response
                }
            });
            let builder = Builder::new(TokioExecutor::new());
            let mut connection = pin!(builder.serve_connection_with_upgrades(io, service));
            let mut dog = pin!(watchdog(&watch, limits, clock));
            let mut draining = false;
            loop {
                tokio::select! {
                    result = connection.as_mut() => {
                        if let Err(e) = result {
                            tracing::debug!(error = %e, "connection ended with an error");
                        }
                        break;
                    }
                    reason = dog.as_mut() => {
                        if !matches!(reason, Closed::Evicted) {
                            metrics.connection_closed(reason.label());
                        }
                        break;
                    }
                    _ = shutdown.wait_for(|down| *down), if !draining => {
                        draining = true;
                        connection.as_mut().graceful_shutdown();
                    }
                }
            }
            table.remove(id);
        });
    }
    drop(listener);
    while tasks.join_next().await.is_some() {}
    Ok(())
}
