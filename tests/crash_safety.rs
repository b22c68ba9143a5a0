//! Crash safety: snapshots are posted in a stream, the server is killed with SIGKILL
//! mid-stream, restarted on the same SQLite file, and every snapshot that got a 201 is
//! there and intact, the file passes SQLite's integrity check, and the server serves
//! again. Three rounds.

mod common;

use common::*;
use logstrip::store::AnyStore;
use reqwest::StatusCode;
use serde_json::Value;
use std::sync::{Arc, Mutex};
use std::time::Duration;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn acknowledged_snapshots_survive_kill_9() {
    let dir = tempfile::tempdir().expect("temp dir");
    let db = format!("sqlite://{}", dir.path().join("crash.db").display());
    let http = reqwest::Client::builder().timeout(Duration::from_secs(30)).build().expect("client");
    let acknowledged: Arc<Mutex<Vec<(i64, String)>>> = Arc::default();
    let mut next_minute = 0u32;
    for round in 0..3 {
        let mut server = spawn_serve(&["--database", &db]).await;
        let base = server.base.clone();
        let mut writers = Vec::new();
        for writer in 0..4 {
            let (http, base, acknowledged) = (http.clone(), base.clone(), acknowledged.clone());
            let first = next_minute + writer * 10_000;
            writers.push(tokio::spawn(async move {
                for i in 0..10_000u32 {
                    let minute = first + i;
                    let mut doc = logstrip::api::examples::snapshot_example();
                    let as_of = chrono::DateTime::parse_from_rfc3339("2026-11-01T00:00:00Z").expect("time")
                        + chrono::Duration::seconds(i64::from(minute));
                    let as_of = as_of.to_utc().to_rfc3339_opts(chrono::SecondsFormat::Secs, true);
                    doc["as_of"] = Value::from(as_of.clone());
                    let sent = http
                        .post(format!("{base}/v1/snapshots"))
                        .header("content-type", "application/json")
                        .body(doc.to_string())
                        .send()
                        .await;
                    match sent {
                        Ok(r) if r.status() == StatusCode::CREATED => {
                            let Ok(body) = r.json::<Value>().await else { return };
                            let id = body["id"].as_i64().expect("id");
                            acknowledged.lock().expect("lock").push((id, as_of));
                        }
                        _ => return,
                    }
                }
            }));
        }
        next_minute += 40_000;
        tokio::time::sleep(Duration::from_millis(1500 + 500 * round)).await;
        server.child.start_kill().expect("SIGKILL");
        let status = server.child.wait().await.expect("wait");
        assert!(!status.success(), "killed, not exited");
        for w in writers {
            let _ = w.await;
        }
        let acked = acknowledged.lock().expect("lock").clone();
        assert!(!acked.is_empty(), "round {round}: some snapshots were acknowledged before the kill");

        // The file is sound before anything else opens it for writing.
        match AnyStore::open(&db).await.expect("reopen store") {
            AnyStore::Sqlite(store) => store.integrity_check().await.expect("integrity check passes"),
            AnyStore::Postgres(_) => unreachable!("SQLite URL"),
        }

        let restarted = spawn_serve(&["--database", &db]).await;
        let ready = http.get(restarted.url("/readyz")).send().await.expect("readyz");
        assert_eq!(ready.status(), StatusCode::OK);
        for (id, as_of) in &acked {
            let got = http.get(restarted.url(&format!("/v1/snapshots/{id}"))).send().await.expect("get");
            assert_eq!(got.status(), StatusCode::OK, "round {round}: acknowledged snapshot {id} is missing");
            let body: Value = got.json().await.expect("json");
            assert_eq!(body["as_of"].as_str(), Some(as_of.as_str()), "snapshot {id} intact");
            assert_eq!(body["curve"].as_array().map(Vec::len), Some(4), "snapshot {id} intact");
        }
        let (status, log) = restarted.terminate().await;
        assert!(status.success(), "{log}");
    }
}
