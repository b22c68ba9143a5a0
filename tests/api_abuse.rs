//! Abuse: deeply nested JSON, a 100,000-point slice, a client that sends its body too
//! slowly, many concurrent long polls, made-up methods (no new metric series),
//! trickled request heads and idle connections (closed after their timeouts), more
//! connections than the cap (the probe still answers), a declared body over the limit
//! (413 before any `100 Continue`), control characters in underlyings (422 on both
//! stores, no store error counted) and a 6 MB valuation body. Each gets a clear answer
//! and the server keeps serving.

mod common;

use common::*;
use logstrip::api::{ConnectionLimits, ServiceSettings};
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
    let address = server.address();
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

/// The sum of the request counter over the series whose labels contain `label`.
fn requests_with(metrics: &str, label: &str) -> u64 {
    metrics
        .lines()
        .filter(|l| l.starts_with("logstrip_http_requests_total{") && l.contains(label))
        .filter_map(|l| l.rsplit(' ').next()?.parse::<u64>().ok())
        .sum()
}

/// The names and labels of every series, without values.
fn series(metrics: &str) -> Vec<String> {
    metrics
        .lines()
        .filter(|l| !l.starts_with('#'))
        .filter_map(|l| l.rsplit_once(' ').map(|(name, _)| name.to_string()))
        .collect()
}

#[tokio::test]
async fn made_up_methods_add_no_metric_series() {
    let server = start_sqlite(open_settings()).await;
    let send = |i: usize| {
        let method = reqwest::Method::from_bytes(format!("M{i}").as_bytes()).expect("method");
        let path = if i.is_multiple_of(2) { "/v1/snapshots" } else { "/nowhere/else" };
        server.client.request(method, server.url(path)).send()
    };
    for i in 0..200 {
        let response = send(i).await.expect("answered");
        assert!(response.status().is_client_error(), "{}", response.status());
        let text = response.text().await.expect("body");
        assert!(!text.contains(&format!("M{i}")), "the made-up method is not repeated back: {text}");
    }
    let scrape = || async {
        server.client.get(server.url("/metrics")).send().await.expect("metrics").text().await.expect("text")
    };
    scrape().await; // the scrape's own series exists from here on
    let first = scrape().await;
    for i in 200..1200 {
        send(i).await.expect("answered");
    }
    let second = scrape().await;
    assert_eq!(series(&first), series(&second), "1,000 more made-up methods added no series");
    assert!(!second.contains("method=\"M"), "no made-up method is a label");
    assert_eq!(requests_with(&second, "method=\"other\""), 1200, "each is counted, as `other`");
    assert!(!second.contains("/nowhere"), "unknown paths are counted as `unmatched`");
    still_serving(&server).await;
}

fn tight_limits() -> ServiceSettings {
    ServiceSettings {
        connections: ConnectionLimits {
            header_timeout: Duration::from_secs(1),
            idle_timeout: Duration::from_secs(2),
            max_connections: 8,
        },
        max_body: 64 * 1024,
        ..open_settings()
    }
}

/// Reads until the server closes the connection (or `within` passes); whether it
/// closed, and what it sent.
async fn closed_within(stream: &mut tokio::net::TcpStream, within: Duration) -> (bool, String) {
    let mut answer = Vec::new();
    let closed = tokio::time::timeout(within, stream.read_to_end(&mut answer)).await.is_ok();
    (closed, String::from_utf8_lossy(&answer).into_owned())
}

#[tokio::test]
async fn a_trickled_request_head_is_closed_after_the_header_timeout() {
    let server = start_sqlite(tight_limits()).await;
    let address = server.address();
    let mut stream = tokio::net::TcpStream::connect(&address).await.expect("connect");
    let (mut reader, mut writer) = stream.split();
    let trickle = async {
        for byte in
            b"GET /healthz HTTP/1.1\r\nHost: x\r\nX-Slow: aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa"
        {
            if writer.write_all(&[*byte]).await.is_err() {
                return;
            }
            tokio::time::sleep(Duration::from_millis(200)).await;
        }
    };
    let mut answer = Vec::new();
    // Header timeout 1 s; the margin is generous. The trickle alone would last 15 s.
    let read = tokio::time::timeout(Duration::from_secs(6), async {
        tokio::select! {
            _ = reader.read_to_end(&mut answer) => true,
            _ = trickle => false,
        }
    })
    .await;
    assert_eq!(read, Ok(true), "closed by the server within the header timeout plus 5 s");
    assert!(answer.is_empty(), "no response to an unfinished head: {:?}", String::from_utf8_lossy(&answer));
    let metrics = server.client.get(server.url("/metrics")).send().await.expect("metrics").text().await.expect("text");
    assert!(metrics.contains("logstrip_connections_closed_total{reason=\"header_timeout\"} 1"), "{metrics}");
}

#[tokio::test]
async fn idle_connections_are_closed_but_a_long_poll_is_not() {
    let server = start_sqlite(tight_limits()).await;
    let address = server.address();
    // Silent from the start.
    let mut silent = tokio::net::TcpStream::connect(&address).await.expect("connect");
    // Idle after one request on a kept-alive connection.
    let mut kept = tokio::net::TcpStream::connect(&address).await.expect("connect");
    kept.write_all(format!("GET /healthz HTTP/1.1\r\nHost: {address}\r\n\r\n").as_bytes()).await.expect("write");
    let mut first = [0u8; 12];
    kept.read_exact(&mut first).await.expect("response");
    assert_eq!(&first, b"HTTP/1.1 200");
    // Idle timeout 2 s; margin 5 s.
    let (closed, _) = closed_within(&mut silent, Duration::from_secs(7)).await;
    assert!(closed, "a silent connection is closed after the idle timeout");
    let (closed, _) = closed_within(&mut kept, Duration::from_secs(7)).await;
    assert!(closed, "an idle keep-alive connection is closed after the idle timeout");

    // A request in progress is not idle: a long poll of 4 s outlives the 2 s timeout.
    post_json(&server, "/v1/snapshots", logstrip::api::examples::snapshot_example().to_string()).await;
    let latest = server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.expect("latest");
    let tag = latest.headers()["etag"].to_str().expect("etag").to_string();
    let poll = server
        .client
        .get(server.url("/v1/underlyings/KESTREL50/latest?wait=4"))
        .header("if-none-match", tag)
        .send()
        .await
        .expect("the long poll is answered");
    assert_eq!(poll.status(), StatusCode::NOT_MODIFIED);
}

#[tokio::test]
async fn more_connections_than_the_cap_leave_the_probe_answering() {
    let server = start_sqlite(tight_limits()).await;
    let address = server.address();
    let mut held = Vec::new();
    for _ in 0..20 {
        let mut stream = tokio::net::TcpStream::connect(&address).await.expect("connect");
        stream.write_all(b"GET /heal").await.expect("part of a head");
        held.push(stream);
    }
    // 20 half-sent heads against a cap of 8: each newer one took the slot of an older
    // one, and the probe takes one more.
    let client = reqwest::Client::builder().pool_max_idle_per_host(0).build().expect("client");
    let health = client.get(server.url("/healthz")).send().await.expect("healthz answers");
    assert_eq!(health.status(), StatusCode::OK);
    let mut closed = 0;
    for stream in &mut held {
        if closed_within(stream, Duration::from_millis(50)).await.0 {
            closed += 1;
        }
    }
    assert!(closed >= 13, "at least 13 of the 20 were closed to keep within 8, got {closed}");
    let metrics = client.get(server.url("/metrics")).send().await.expect("metrics").text().await.expect("text");
    assert!(metrics.contains("reason=\"evicted\""), "{metrics}");
}

#[tokio::test]
async fn a_declared_body_over_the_limit_is_refused_before_100_continue() {
    let server = start_sqlite(tight_limits()).await;
    let address = server.address();
    let mut stream = tokio::net::TcpStream::connect(&address).await.expect("connect");
    let head = format!(
        "POST /v1/analyze HTTP/1.1\r\nHost: {address}\r\nContent-Type: application/json\r\n\
         Content-Length: 1000000\r\nExpect: 100-continue\r\n\r\n"
    );
    stream.write_all(head.as_bytes()).await.expect("write head");
    let mut answer = vec![0u8; 4096];
    let n = tokio::time::timeout(Duration::from_secs(10), stream.read(&mut answer))
        .await
        .expect("an answer without sending the body")
        .expect("read");
    let text = String::from_utf8_lossy(&answer[..n]);
    assert!(text.starts_with("HTTP/1.1 413"), "413 first, no 100 Continue: {text}");
    assert!(text.contains("application/problem+json"), "{text}");
    still_serving(&server).await;
}

/// Control characters in an underlying, in every place one can be given, on a server
/// over `store`: each a 422 naming the field, none counted as a store error.
async fn control_characters_are_refused(server: &TestServer) {
    let mut doc = logstrip::api::examples::snapshot_example();
    doc["underlying"] = json!("Q\u{0}Z");
    let posted = post_json(server, "/v1/snapshots", doc.to_string()).await;
    assert_eq!(posted.status(), StatusCode::UNPROCESSABLE_ENTITY);
    let problem: Value = posted.json().await.expect("problem");
    assert_eq!(problem["errors"][0]["pointer"], "/underlying", "{problem}");
    assert!(problem["errors"][0]["detail"].as_str().unwrap_or("").contains("control character"), "{problem}");

    let csv = "expiry,strike,vol\n2026-12-18T21:00:00Z,4000,0.2\n2026-12-18T21:00:00Z,4200,0.19\n2026-12-18T21:00:00Z,4400,0.18\n";
    let posted = server
        .client
        .post(server.url("/v1/snapshots?underlying=Q%00Z&as_of=2026-11-30T15:30:00Z"))
        .header("content-type", "text/csv")
        .body(csv)
        .send()
        .await
        .expect("post CSV");
    assert_eq!(posted.status(), StatusCode::UNPROCESSABLE_ENTITY);
    let problem: Value = posted.json().await.expect("problem");
    assert!(problem.to_string().contains("underlying"), "{problem}");

    for path in [
        "/v1/underlyings/Q%00Z/latest",
        "/v1/underlyings/Q%00Z/history",
        "/v1/underlyings/Q%0AZ/latest/chart.svg",
        "/v1/underlyings/Q%00Z/history/chart.svg?param=hurst",
    ] {
        let read = server.client.get(server.url(path)).send().await.expect("read");
        assert_eq!(read.status(), StatusCode::UNPROCESSABLE_ENTITY, "{path}");
        let problem: Value = read.json().await.expect("problem");
        assert_eq!(problem["errors"][0]["parameter"], "underlying", "{path}: {problem}");
    }

    // Characters, not bytes: 200 CJK characters (600 bytes) are a valid name, 201 not.
    let mut doc = logstrip::api::examples::snapshot_example();
    doc["underlying"] = json!("指".repeat(200));
    assert_eq!(post_json(server, "/v1/snapshots", doc.to_string()).await.status(), StatusCode::CREATED);
    doc["underlying"] = json!("指".repeat(201));
    assert_eq!(post_json(server, "/v1/snapshots", doc.to_string()).await.status(), StatusCode::UNPROCESSABLE_ENTITY);

    let metrics = server.client.get(server.url("/metrics")).send().await.expect("metrics").text().await.expect("text");
    assert!(!metrics.contains("logstrip_store_errors_total{"), "no store error counted: {metrics}");
    still_serving(server).await;
}

#[tokio::test]
async fn control_characters_in_underlyings_are_422_on_sqlite() {
    let server = start_sqlite(open_settings()).await;
    control_characters_are_refused(&server).await;
}

#[tokio::test]
async fn control_characters_in_underlyings_are_422_on_postgres() {
    let Some(admin) = postgres_url("control_characters_in_underlyings_are_422_on_postgres") else { return };
    let db = TempDatabase::create(&admin).await;
    let store = logstrip::store::AnyStore::open(&db.url).await.expect("open");
    let server = start_with_store(store, open_settings(), None).await;
    control_characters_are_refused(&server).await;
    drop(server);
    db.drop_now().await;
}

#[tokio::test]
async fn a_leap_second_as_of_is_refused_naming_the_field() {
    let server = start_sqlite(open_settings()).await;
    let mut doc = logstrip::api::examples::snapshot_example();
    doc["as_of"] = json!("2026-12-31T23:59:60Z");
    let posted = post_json(&server, "/v1/snapshots", doc.to_string()).await;
    assert_eq!(posted.status(), StatusCode::UNPROCESSABLE_ENTITY);
    let problem: Value = posted.json().await.expect("problem");
    assert_eq!(problem["errors"][0]["pointer"], "/as_of", "{problem}");
    assert!(problem["errors"][0]["detail"].as_str().unwrap_or("").contains("leap second"), "{problem}");
}

#[tokio::test]
async fn a_leap_second_in_a_position_is_refused_like_one_in_a_snapshot() {
    // The positions' times follow the snapshot's rules (one parser for both).
    let server = start_sqlite(open_settings()).await;
    for field in ["start", "maturity"] {
        let mut doc = logstrip::api::examples::valuation_example();
        doc["positions"][1][field] = json!("2026-12-31T23:59:60Z");
        let posted = post_json(&server, "/v1/valuations", doc.to_string()).await;
        assert_eq!(posted.status(), StatusCode::UNPROCESSABLE_ENTITY, "{field}");
        let problem: Value = posted.json().await.expect("problem");
        assert_eq!(problem["errors"][0]["pointer"], format!("/positions/1/{field}"), "{problem}");
        assert!(problem["errors"][0]["detail"].as_str().unwrap_or("").contains("leap second"), "{problem}");
    }
}

/// A 6 MB valuation body (the demo snapshot and 32,000 positions) is valued, and the
/// liveness probe answers while it is in flight. (How fast it answers is measured by
/// the probe in the commit message, not asserted here.)
#[tokio::test]
async fn a_6_mb_valuation_is_valued_while_the_probe_answers() {
    let server = start_sqlite(open_settings()).await;
    let book: Value = serde_json::from_str(
        &std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/kestrel50-book.json")).expect("book"),
    )
    .expect("JSON");
    let template = book["positions"][0].clone();
    let positions: Vec<Value> = (0..32_000)
        .map(|i| {
            let mut p = template.clone();
            p["id"] = json!(format!("VS-{i:05}"));
            p
        })
        .collect();
    let body = json!({"snapshot": demo_snapshot(), "positions": positions}).to_string();
    assert!(body.len() > 5_000_000, "{} bytes", body.len());
    let valuation = post_json(&server, "/v1/valuations", body);
    let probes = async {
        let mut answered = 0;
        for _ in 0..20 {
            if server.client.get(server.url("/healthz")).send().await.is_ok_and(|r| r.status() == StatusCode::OK) {
                answered += 1;
            }
        }
        answered
    };
    let (valued, answered) = tokio::join!(valuation, probes);
    assert_eq!(answered, 20);
    assert_eq!(valued.status(), StatusCode::OK);
    let doc: Value = valued.json().await.expect("valuation");
    assert_eq!(doc["positions"].as_array().map(Vec::len), Some(32_000), "every position valued");
}
