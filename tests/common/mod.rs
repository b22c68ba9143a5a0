//! Helpers shared by the service tests: a real server on port 0 with a fresh store,
//! a reqwest client, and demo snapshots with chosen `as_of` times.
#![allow(dead_code)]

use logstrip::api::auth::Access;
use logstrip::api::{self, RunningServer, ServiceSettings, DEFAULT_MAX_BODY, DEFAULT_REQUEST_TIMEOUT};
use logstrip::store::AnyStore;
use serde_json::Value;
use std::time::Duration;

/// A server started in this process.
pub struct TestServer {
    /// `http://127.0.0.1:PORT`.
    pub base: String,
    /// The running server (taken by `shutdown`).
    pub server: Option<RunningServer>,
    /// HTTP client.
    pub client: reqwest::Client,
    /// Keeps the SQLite file's directory alive.
    pub _dir: Option<tempfile::TempDir>,
}

impl TestServer {
    /// URL of a path.
    pub fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    /// Graceful shutdown.
    pub async fn shutdown(&mut self) {
        if let Some(s) = self.server.take() {
            s.shutdown().await.expect("clean shutdown");
        }
    }
}

/// Default settings: no tokens, 16 MiB bodies.
pub fn open_settings() -> ServiceSettings {
    ServiceSettings { access: Access::default(), max_body: DEFAULT_MAX_BODY, request_timeout: DEFAULT_REQUEST_TIMEOUT }
}

/// Starts a server on port 0 over `store`.
pub async fn start_with_store(
    store: AnyStore,
    settings: ServiceSettings,
    dir: Option<tempfile::TempDir>,
) -> TestServer {
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.expect("bind port 0");
    let server = api::start(listener, store, settings, std::future::pending()).expect("start");
    TestServer {
        base: format!("http://{}", server.addr),
        server: Some(server),
        client: reqwest::Client::builder().timeout(Duration::from_secs(90)).build().expect("client"),
        _dir: dir,
    }
}

/// Starts a server with a temporary SQLite file.
pub async fn start_sqlite(settings: ServiceSettings) -> TestServer {
    let dir = tempfile::tempdir().expect("temp dir");
    let url = format!("sqlite://{}", dir.path().join("history.db").display());
    let store = AnyStore::open(&url).await.expect("open sqlite store");
    start_with_store(store, settings, Some(dir)).await
}

/// The demo snapshot (35 expiries x 60 strikes of the invented index KESTREL50).
pub fn demo_snapshot() -> Value {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/kestrel50-snapshot.json"))
        .expect("demo snapshot");
    serde_json::from_str(&text).expect("demo JSON")
}

/// The demo snapshot valued at another time (minutes before the original `as_of`,
/// so every expiry stays in the future).
pub fn demo_snapshot_at(minutes_before: i64) -> Value {
    let mut doc = demo_snapshot();
    let as_of = chrono::DateTime::parse_from_rfc3339(doc["as_of"].as_str().expect("as_of")).expect("RFC 3339");
    let shifted = as_of - chrono::Duration::minutes(minutes_before);
    doc["as_of"] = Value::from(shifted.to_utc().to_rfc3339_opts(chrono::SecondsFormat::Secs, true));
    doc
}

/// The same snapshot with every object's keys in reverse order and pretty-printed:
/// the same content, different bytes.
pub fn reordered_text(doc: &Value) -> String {
    fn reorder(v: &Value) -> Value {
        match v {
            Value::Object(m) => {
                let mut out = serde_json::Map::new();
                for (k, x) in m.iter().rev() {
                    out.insert(k.clone(), reorder(x));
                }
                Value::Object(out)
            }
            Value::Array(a) => Value::Array(a.iter().map(reorder).collect()),
            other => other.clone(),
        }
    }
    serde_json::to_string_pretty(&reorder(doc)).expect("serialise")
}

/// POSTs JSON text.
pub async fn post_json(server: &TestServer, path: &str, body: String) -> reqwest::Response {
    server
        .client
        .post(server.url(path))
        .header("content-type", "application/json")
        .body(body)
        .send()
        .await
        .expect("request")
}
