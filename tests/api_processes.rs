//! `logstrip serve` as a process: configuration checks, SIGTERM with a request in
//! flight, and two replicas sharing one PostgreSQL (skipped, saying so, without
//! `LOGSTRIP_TEST_POSTGRES_URL`).

mod common;

use common::*;
use reqwest::StatusCode;
use serde_json::Value;
use std::time::Duration;

fn client() -> reqwest::Client {
    reqwest::Client::builder().timeout(Duration::from_secs(90)).build().expect("client")
}

async fn post(client: &reqwest::Client, url: String, body: String) -> reqwest::Response {
    client.post(url).header("content-type", "application/json").body(body).send().await.expect("post")
}

#[tokio::test]
async fn sigterm_finishes_the_request_in_flight_then_exits_cleanly() {
    let dir = tempfile::tempdir().expect("temp dir");
    let token_path = dir.path().join("token");
    std::fs::write(&token_path, "process-test-token\n").expect("token file");
    let db = format!("sqlite://{}", dir.path().join("h.db").display());
    let server = spawn_serve(&["--database", &db, "--token-file", token_path.to_str().expect("utf-8")]).await;
    let http = client();
    let created = http
        .post(server.url("/v1/snapshots"))
        .bearer_auth("process-test-token")
        .header("content-type", "application/json")
        .body(logstrip::api::examples::snapshot_example().to_string())
        .send()
        .await
        .expect("post");
    assert_eq!(created.status(), StatusCode::CREATED);
    let latest = http.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.expect("get");
    let tag = latest.headers()["etag"].to_str().expect("etag").to_string();
    let url = server.url("/v1/underlyings/KESTREL50/latest?wait=60");
    let poll = tokio::spawn({
        let http = http.clone();
        async move { http.get(url).header("if-none-match", tag).send().await }
    });
    tokio::time::sleep(Duration::from_millis(500)).await;
    let (status, log) = server.terminate().await;
    assert!(status.success(), "exit status {status:?}\n{log}");
    let answered = poll.await.expect("join").expect("the long poll is answered, not cut");
    assert_eq!(answered.status(), StatusCode::NOT_MODIFIED);
    assert!(log.contains("listen=127.0.0.1:0") && log.contains("write_token=set"), "configuration printed:\n{log}");
    assert!(!log.contains("process-test-token"), "the token never appears in the log");
    assert!(log.contains("shutting down"), "{log}");
    // Standard error is a pipe here, not a terminal: plain text, no colour codes.
    assert!(!log.contains('\u{1b}'), "no terminal colour codes in a log written to a pipe:\n{log}");
}

#[tokio::test]
async fn bad_configuration_exits_with_status_2_naming_the_flag() {
    let cases: [(&[&str], &str); 3] = [
        (&["serve", "--listen", "0.0.0.0:0"], "--insecure-public"),
        (&["serve", "--max-body", "12GB"], "--max-body"),
        (&["serve", "--token-file", "/nonexistent/token"], "--token-file"),
    ];
    for (args, expected) in cases {
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_logstrip")).args(args).output().expect("run");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(stderr.contains(expected), "{args:?}: {stderr}");
        assert_ne!(out.status.code(), Some(0), "{args:?}");
    }
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .args(["serve", "--listen", "0.0.0.0:0"])
        .output()
        .expect("run");
    assert_eq!(out.status.code(), Some(2));
}

#[tokio::test]
async fn two_replicas_share_one_postgres() {
    let Some(admin) = postgres_url("two_replicas_share_one_postgres") else { return };
    let db = TempDatabase::create(&admin).await;
    let writer = spawn_serve(&["--database", &db.url]).await;
    let reader = spawn_serve(&["--database", &db.url]).await;
    let http = client();

    let first: Value =
        post(&http, writer.url("/v1/snapshots"), demo_snapshot_at(30).to_string()).await.json().await.expect("json");
    let latest = http.get(reader.url("/v1/underlyings/KESTREL50/latest")).send().await.expect("get");
    assert_eq!(latest.status(), StatusCode::OK);
    let tag = latest.headers()["etag"].to_str().expect("etag").to_string();
    let latest: Value = latest.json().await.expect("json");
    assert_eq!(latest["id"], first["id"]);

    // A reader waiting on one replica is woken by a post to the other.
    let url = reader.url("/v1/underlyings/KESTREL50/latest?wait=30");
    let poll = tokio::spawn({
        let http = http.clone();
        async move { http.get(url).header("if-none-match", tag).send().await.expect("poll") }
    });
    tokio::time::sleep(Duration::from_millis(500)).await;
    let second: Value =
        post(&http, writer.url("/v1/snapshots"), demo_snapshot_at(20).to_string()).await.json().await.expect("json");
    let woken = poll.await.expect("join");
    assert_eq!(woken.status(), StatusCode::OK);
    assert_eq!(woken.json::<Value>().await.expect("json")["id"], second["id"]);

    // Re-posting to the other replica finds the stored row.
    let again = post(&http, reader.url("/v1/snapshots"), demo_snapshot_at(30).to_string()).await;
    assert_eq!(again.status(), StatusCode::OK);
    assert_eq!(again.json::<Value>().await.expect("json")["id"], first["id"]);

    let history: Value = http
        .get(reader.url("/v1/underlyings/KESTREL50/history"))
        .send()
        .await
        .expect("get")
        .json()
        .await
        .expect("json");
    let ids: Vec<&Value> = history["items"].as_array().expect("items").iter().map(|i| &i["id"]).collect();
    assert_eq!(ids, vec![&first["id"], &second["id"]]);

    for server in [writer, reader] {
        let (status, log) = server.terminate().await;
        assert!(status.success(), "{log}");
    }
    db.drop_now().await;
}
