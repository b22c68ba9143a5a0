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

    /// `GET path` as JSON, asserting a 200.
    pub async fn get_json(&self, path: &str) -> serde_json::Value {
        let response = self.client.get(self.url(path)).send().await.expect("request");
        assert_eq!(response.status(), reqwest::StatusCode::OK, "GET {path}");
        response.json().await.expect("JSON")
    }

    /// `host:port` of the server, for raw TCP connections.
    pub fn address(&self) -> String {
        self.base.trim_start_matches("http://").to_string()
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
    ServiceSettings {
        access: Access::default(),
        max_body: DEFAULT_MAX_BODY,
        request_timeout: DEFAULT_REQUEST_TIMEOUT,
        connections: api::ConnectionLimits::default(),
    }
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

/// A snapshot of the invented demo day (`demo-data/day`), by its time of day (`1220`).
pub fn demo_day_snapshot(hhmm: &str) -> Value {
    let path = format!("{}/demo-data/day/kestrel50-2026-11-30T{hhmm}.json", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(path).expect("demo day snapshot");
    serde_json::from_str(&text).expect("demo day JSON")
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

/// A `logstrip serve` child process.
pub struct ServeProcess {
    /// The child.
    pub child: tokio::process::Child,
    /// `http://127.0.0.1:PORT`.
    pub base: String,
    /// Standard error, collected after exit.
    pub stderr: tokio::process::ChildStderr,
}

impl ServeProcess {
    /// URL of a path.
    pub fn url(&self, path: &str) -> String {
        format!("{}{path}", self.base)
    }

    /// Sends SIGTERM and waits for the exit; returns the status and the log.
    pub async fn terminate(mut self) -> (std::process::ExitStatus, String) {
        let pid = self.child.id().expect("running child").to_string();
        let sent = tokio::process::Command::new("kill").args(["-TERM", &pid]).status().await.expect("kill");
        assert!(sent.success());
        let status = tokio::time::timeout(Duration::from_secs(30), self.child.wait())
            .await
            .expect("exits within 30 s of SIGTERM")
            .expect("wait");
        let mut log = String::new();
        use tokio::io::AsyncReadExt;
        let _ = self.stderr.read_to_string(&mut log).await;
        (status, log)
    }
}

/// Starts `logstrip serve --listen 127.0.0.1:0` with extra arguments and waits for the
/// line naming its address.
pub async fn spawn_serve(args: &[&str]) -> ServeProcess {
    use tokio::io::AsyncBufReadExt;
    let mut child = tokio::process::Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .arg("serve")
        .args(["--listen", "127.0.0.1:0"])
        .args(args)
        .env_remove("LOGSTRIP_TOKEN_FILE")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .kill_on_drop(true)
        .spawn()
        .expect("spawn logstrip serve");
    let stdout = child.stdout.take().expect("stdout");
    let stderr = child.stderr.take().expect("stderr");
    let mut lines = tokio::io::BufReader::new(stdout).lines();
    let line = tokio::time::timeout(Duration::from_secs(60), lines.next_line())
        .await
        .expect("serve prints its address within 60 s")
        .expect("read stdout")
        .expect("a line on stdout");
    let base = line.rsplit(' ').next().expect("address").to_string();
    assert!(base.starts_with("http://127.0.0.1:"), "{line}");
    ServeProcess { child, base, stderr }
}

/// A PostgreSQL database made for one test and dropped by [`TempDatabase::drop_now`].
pub struct TempDatabase {
    admin_url: String,
    /// Database name.
    pub name: String,
    /// URL of the new database.
    pub url: String,
}

/// The test server's URL, or `None` (and a note on stderr) when it is not configured.
pub fn postgres_url(test: &str) -> Option<String> {
    match std::env::var("LOGSTRIP_TEST_POSTGRES_URL") {
        Ok(url) if !url.is_empty() => Some(url),
        _ => {
            eprintln!("{test}: skipped: LOGSTRIP_TEST_POSTGRES_URL is not set (.ci/run sets it)");
            None
        }
    }
}

impl TempDatabase {
    /// Creates a uniquely named database on the server at `admin_url`.
    pub async fn create(admin_url: &str) -> Self {
        use sqlx::Connection;
        let nanos = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).expect("clock").as_nanos();
        let name = format!("logstrip_test_{}_{}", std::process::id(), nanos % 1_000_000_000_000);
        let mut admin = sqlx::PgConnection::connect(admin_url).await.expect("connect to LOGSTRIP_TEST_POSTGRES_URL");
        sqlx::raw_sql(sqlx::AssertSqlSafe(format!("CREATE DATABASE {name}")))
            .execute(&mut admin)
            .await
            .expect("create database");
        let _ = admin.close().await;
        let (server, _) = admin_url.rsplit_once('/').expect("URL with a database path");
        Self { admin_url: admin_url.to_string(), url: format!("{server}/{name}"), name }
    }

    /// Drops the database (closing other sessions first).
    pub async fn drop_now(self) {
        use sqlx::Connection;
        let mut admin = sqlx::PgConnection::connect(&self.admin_url).await.expect("connect");
        sqlx::raw_sql(sqlx::AssertSqlSafe(format!("DROP DATABASE IF EXISTS {} WITH (FORCE)", self.name)))
            .execute(&mut admin)
            .await
            .expect("drop database");
        let _ = admin.close().await;
    }
}

/// The [`logstrip::store::Store`] contract, run against any implementation: idempotent
/// insert without skipped ids, revisions of one `as_of` (the newest current, the older
/// ones kept), latest, underlyings, history windows and paging, inputs kept, and
/// corrections posted at once numbered apart.
pub async fn exercise_store(store: &AnyStore) {
    use chrono::{TimeZone, Utc};
    use logstrip::store::{HistoryPosition, HistoryQuery, NewSnapshot, Revisions, Store};
    let at = |minute: u32| Utc.with_ymd_and_hms(2026, 11, 30, 15, minute, 0).single().expect("time");
    let record = |underlying: &str, minute: u32, digest: &str| {
        NewSnapshot::new(
            underlying.to_string(),
            at(minute),
            digest.to_string(),
            "application/json",
            format!("{{\"underlying\":\"{underlying}\",\"minute\":{minute}}}"),
            format!("{{\"underlying\":\"{underlying}\",\"as_of\":\"x\",\"curve\":[],\"minute\":{minute}}}"),
        )
    };
    assert!(store.latest("ORIOLE").await.expect("latest").is_none());
    let first = store.insert(record("ORIOLE", 10, "a")).await.expect("insert");
    assert!(first.created);
    assert_eq!((first.revision, first.supersedes), (1, None), "the first snapshot of an as_of is revision 1");
    let again = store.insert(record("ORIOLE", 10, "a")).await.expect("insert");
    assert_eq!(
        (again.id, again.stored_at, again.created, again.revision),
        (first.id, first.stored_at, false, 1),
        "same content, same row"
    );
    let revision = store.insert(record("ORIOLE", 10, "b")).await.expect("insert");
    assert!(revision.created, "other content at the same as_of is stored");
    assert_eq!(revision.id, first.id + 1, "the identical repost used up no id");
    assert_eq!((revision.revision, revision.supersedes), (2, Some(first.id)), "and it is the next revision");
    let old_again = store.insert(record("ORIOLE", 10, "a")).await.expect("insert");
    assert_eq!(
        (old_again.id, old_again.created, old_again.revision),
        (first.id, false, 1),
        "an older revision's content finds that revision"
    );
    let later = store.insert(record("ORIOLE", 20, "c")).await.expect("insert");
    let earlier_posted_last = store.insert(record("ORIOLE", 5, "d")).await.expect("insert");
    let heron = store.insert(record("HERON", 15, "e")).await.expect("insert");
    assert_eq!(
        vec![later.id, earlier_posted_last.id, heron.id],
        vec![revision.id + 1, revision.id + 2, revision.id + 3],
        "ids do not skip"
    );

    assert_eq!(store.latest_id("ORIOLE").await.expect("latest id"), Some(later.id), "latest is the largest as_of");
    let latest = store.latest("ORIOLE").await.expect("latest").expect("some");
    assert_eq!((latest.id, latest.as_of, latest.revision), (later.id, at(20), 1));
    assert!(latest.input.is_none());

    let with_input = store.get(first.id, true).await.expect("get").expect("some");
    assert_eq!(with_input.input, Some(("application/json".into(), "{\"underlying\":\"ORIOLE\",\"minute\":10}".into())));
    assert_eq!(
        (with_input.revision, with_input.supersedes, with_input.superseded_by),
        (1, None, Some(revision.id)),
        "a superseded revision stays readable and says what replaced it"
    );
    let current = store.get(revision.id, false).await.expect("get").expect("some");
    assert_eq!((current.revision, current.supersedes, current.superseded_by), (2, Some(first.id), None));
    assert!(store.get(first.id + 1000, false).await.expect("get").is_none());

    let list = store.underlyings().await.expect("underlyings");
    let counts: Vec<(&str, i64, i64)> =
        list.iter().map(|u| (u.underlying.as_str(), u.snapshots, u.superseded)).collect();
    assert_eq!(counts, vec![("HERON", 1, 0), ("ORIOLE", 3, 1)], "a corrected as_of counts once");
    assert_eq!(list[1].latest_as_of, at(20));

    let query = |from, to, after, limit, revisions| HistoryQuery {
        underlying: "ORIOLE".into(),
        from,
        to,
        after,
        limit,
        revisions,
    };
    let ids = |rows: &[logstrip::store::StoredSnapshot]| rows.iter().map(|s| s.id).collect::<Vec<_>>();
    let current = store.history(&query(None, None, None, 100, Revisions::Current)).await.expect("history");
    assert_eq!(ids(&current), vec![earlier_posted_last.id, revision.id, later.id], "current revisions, by as_of");
    assert!(current.iter().all(|s| s.superseded_by.is_none()));
    let all = store.history(&query(None, None, None, 100, Revisions::All)).await.expect("history");
    assert_eq!(
        ids(&all),
        vec![earlier_posted_last.id, first.id, revision.id, later.id],
        "every revision, ascending (as_of, id)"
    );
    assert_eq!(
        all.iter().map(|s| (s.revision, s.superseded_by)).collect::<Vec<_>>(),
        vec![(1, None), (1, Some(revision.id)), (2, None), (1, None)]
    );
    for (revisions, expected) in
        [(Revisions::Current, vec![revision.id]), (Revisions::All, vec![first.id, revision.id])]
    {
        let window = store.history(&query(Some(at(10)), Some(at(20)), None, 100, revisions)).await.expect("history");
        assert_eq!(ids(&window), expected, "from inclusive, to exclusive ({revisions:?})");
    }
    for (revisions, expected) in [(Revisions::Current, vec![later.id]), (Revisions::All, vec![revision.id, later.id])] {
        let page = store.history(&query(None, None, None, 2, revisions)).await.expect("history");
        let after = HistoryPosition { as_of: page[1].as_of, id: page[1].id };
        let rest = store.history(&query(None, None, Some(after), 2, revisions)).await.expect("history");
        assert_eq!(ids(&rest), expected, "keyset paging ({revisions:?})");
    }

    // The snapshot before a time: the current revision of the latest earlier as_of,
    // never one at that time, never another underlying's.
    let before = |t| store.latest_before("ORIOLE", t);
    assert_eq!(before(at(20)).await.expect("before").map(|s| s.id), Some(revision.id), "current revision");
    assert_eq!(before(at(10)).await.expect("before").map(|s| s.id), Some(earlier_posted_last.id));
    assert!(before(at(5)).await.expect("before").is_none(), "nothing before the first");

    // A correction of the latest as_of becomes the latest.
    let corrected = store.insert(record("ORIOLE", 20, "f")).await.expect("insert");
    assert_eq!((corrected.id, corrected.revision, corrected.supersedes), (heron.id + 1, 2, Some(later.id)));
    assert_eq!(store.latest_id("ORIOLE").await.expect("latest id"), Some(corrected.id));
    assert_eq!(store.latest("ORIOLE").await.expect("latest").expect("some").id, corrected.id);

    // Corrections and repeats of one as_of posted at once: each distinct content gets
    // its own revision, repeats find it, and no id is used up.
    let mut tasks = tokio::task::JoinSet::new();
    for k in 0..8u32 {
        let store = store.clone();
        let digest = format!("k{}", k % 5);
        let snapshot = record("KITE", 0, &digest);
        tasks.spawn(async move { (digest, store.insert(snapshot).await.expect("insert")) });
    }
    let mut outcomes = tasks.join_all().await;
    outcomes.sort_by_key(|(_, i)| (i.revision, !i.created));
    let created: Vec<_> = outcomes.iter().filter(|(_, i)| i.created).collect();
    assert_eq!(created.iter().map(|(_, i)| i.revision).collect::<Vec<_>>(), vec![1, 2, 3, 4, 5]);
    let mut new_ids: Vec<i64> = created.iter().map(|(_, i)| i.id).collect();
    new_ids.sort_unstable();
    assert_eq!(new_ids, (corrected.id + 1..=corrected.id + 5).collect::<Vec<_>>(), "ids do not skip");
    for (digest, repeat) in outcomes.iter().filter(|(_, i)| !i.created) {
        let (_, original) = created.iter().find(|(d, _)| d == digest).expect("the repeated content was stored");
        assert_eq!((repeat.id, repeat.revision), (original.id, original.revision), "a repeat finds its revision");
    }
    for (_, i) in &created {
        let expected = (i.revision > 1).then(|| created[usize::try_from(i.revision).expect("small") - 2].1.id);
        assert_eq!(i.supersedes, expected, "revision {} supersedes the one before", i.revision);
    }
    store.ping().await.expect("ping");
}
