//! Abuse: deeply nested JSON, a 100,000-point slice, a client that sends its body too
//! slowly, and many concurrent long polls. Each gets a clear answer and the server
//! keeps serving.

mod common;

use common::*;
use logstrip::api::ServiceSettings;
use reqwest::StatusCode;
use serde_json::{json, Value};
use std::time::Duration;
use tokio::io::{AsyncReadExt, AsyncWriteExt};

async fn still_serving(server: &TestServer) {
    let health = server.client.get(server.url("/healthz")).send().await.expect("healthz");
    assert_eq!(health.status(), StatusCode::OK);
}

#[tokio::test]
async fn deeply_nested_json_is_a_400() {
    let server = start_sqlite(open_settings()).await;
    let depth = 100_000;
    // `snapshot` takes any JSON value at first, so the nesting reaches the parser's
    // recursion limit instead of a type error.
    let body = format!("{{\"snapshot\": {}{}, \"positions\": []}}", "[".repeat(depth), "]".repeat(depth));
    let response = post_json(&server, "/v1/valuations", body).await;
    assert_eq!(response.status(), StatusCode::BAD_REQUEST);
    let problem: Value = response.json().await.expect("problem");
    assert!(problem["errors"][0]["detail"].as_str().unwrap_or("").contains("recursion limit"), "{problem}");
    still_serving(&server).await;
}

#[tokio::test]
async fn a_100000_point_slice_is_analysed_or_refused_clearly() {
    let server = start_sqlite(open_settings()).await;
    let n = 100_000;
    let points: Vec<Value> = (0..n)
        .map(|i| {
            let k = -1.0 + 1.6 * f64::from(i) / f64::from(n);
            json!({"strike": 100.0 * f64::exp(k), "vol": 0.2 + 0.05 * k * k})
        })
        .collect();
    let body = json!({"underlying": "HERON", "as_of": "2026-11-30T15:30:00Z",
                      "slices": [{"tau": 0.5, "forward": 100.0, "points": points}], "fit": {"model": "none"}});
    let response = post_json(&server, "/v1/analyze", body.to_string()).await;
    let status = response.status();
    let answer: Value = response.json().await.expect("JSON answer");
    assert!(status == StatusCode::OK || status == StatusCode::UNPROCESSABLE_ENTITY, "{status}: {answer}");
    if status == StatusCode::OK {
        assert_eq!(answer["curve"][0]["quality"]["points"], n);
    }
    still_serving(&server).await;
}

#[tokio::test]
async fn a_body_sent_too_slowly_gets_408() {
    let settings = ServiceSettings { request_timeout: Duration::from_secs(1), ..open_settings() };
    let server = start_sqlite(settings).await;
    let address = server.base.trim_start_matches("http://").to_string();
    let mut stream = tokio::net::TcpStream::connect(&address).await.expect("connect");
    let head = format!(
        "POST /v1/analyze HTTP/1.1\r\nHost: {address}\r\nContent-Type: application/json\r\nContent-Length: 1000\r\n\r\n{{"
    );
    stream.write_all(head.as_bytes()).await.expect("write head");
    // Then nothing more: the server must give up after its request time limit.
    let mut answer = Vec::new();
    let read = tokio::time::timeout(Duration::from_secs(20), stream.read_to_end(&mut answer)).await;
    assert!(read.is_ok(), "the server answered and closed within 20 s");
    let text = String::from_utf8_lossy(&answer);
    assert!(text.starts_with("HTTP/1.1 408"), "{text}");
    assert!(text.contains("application/problem+json"), "{text}");
    still_serving(&server).await;
}

#[tokio::test]
async fn many_concurrent_long_polls_all_get_answers() {
    let server = start_sqlite(open_settings()).await;
    post_json(&server, "/v1/snapshots", logstrip::api::examples::snapshot_example().to_string()).await;
    let latest = server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.expect("latest");
    let tag = latest.headers()["etag"].to_str().expect("etag").to_string();
    let client = reqwest::Client::builder().pool_max_idle_per_host(0).build().expect("client");
    let mut polls = Vec::new();
    for _ in 0..300 {
        let (client, url, tag) = (client.clone(), server.url("/v1/underlyings/KESTREL50/latest?wait=2"), tag.clone());
        polls.push(tokio::spawn(async move {
            client.get(url).header("if-none-match", tag).send().await.map(|r| r.status())
        }));
    }
    let mut not_modified = 0;
    for p in polls {
        if p.await.expect("join").expect("answered") == StatusCode::NOT_MODIFIED {
            not_modified += 1;
        }
    }
    assert_eq!(not_modified, 300, "every long poll ends with 304 when nothing changes");
    still_serving(&server).await;
}
