//! The service end to end: a real server on port 0 with a temporary SQLite file,
//! talked to with reqwest. Every endpoint, every error status, ETag/304, `?wait`, CSV,
//! auth, idempotent re-post and graceful shutdown.

mod common;

use common::*;
use logstrip::api::auth::{Access, Token};
use logstrip::api::ServiceSettings;
use reqwest::StatusCode;
use serde_json::{json, Value};
use std::time::Duration;

async fn problem(response: reqwest::Response, status: StatusCode) -> Value {
    assert_eq!(response.status(), status);
    assert_eq!(response.headers()["content-type"], "application/problem+json");
    let body: Value = response.json().await.expect("problem JSON");
    assert_eq!(body["status"], status.as_u16());
    for key in ["type", "title", "detail"] {
        assert!(body[key].is_string(), "problem lacks {key}: {body}");
    }
    body
}

#[tokio::test]
async fn stored_snapshot_round_trip_and_idempotent_repost() {
    let server = start_sqlite(open_settings()).await;
    let doc = demo_snapshot();
    let created = post_json(&server, "/v1/snapshots", doc.to_string()).await;
    assert_eq!(created.status(), StatusCode::CREATED);
    let location = created.headers()["location"].to_str().unwrap().to_string();
    let body: Value = created.json().await.unwrap();
    let id = body["id"].as_i64().expect("id");
    assert_eq!(location, format!("/v1/snapshots/{id}"));
    assert_eq!(body["underlying"], "KESTREL50");
    assert_eq!(body["as_of"], doc["as_of"]);
    assert!(body["stored_at"].is_string());
    assert_eq!(body["curve"].as_array().unwrap().len(), 35);
    assert_eq!(body["fit"]["model"], "rough_heston");

    // The same content with other key order and whitespace: 200, the same id, no new row.
    let again = post_json(&server, "/v1/snapshots", reordered_text(&doc)).await;
    assert_eq!(again.status(), StatusCode::OK);
    assert_eq!(again.headers()["location"].to_str().unwrap(), location);
    let again: Value = again.json().await.unwrap();
    assert_eq!(again["id"], id);
    assert_eq!(again["stored_at"], body["stored_at"]);

    let fetched = server.client.get(server.url(&location)).send().await.unwrap();
    assert_eq!(fetched.status(), StatusCode::OK);
    let fetched: Value = fetched.json().await.unwrap();
    assert_eq!(fetched["id"], id);
    assert_eq!(fetched["curve"], body["curve"]);
    assert!(fetched.get("input").is_none());

    let with_input: Value =
        server.client.get(server.url(&format!("{location}?include=input"))).send().await.unwrap().json().await.unwrap();
    assert_eq!(with_input["input"], doc, "the original snapshot is kept");

    let list: Value = server.client.get(server.url("/v1/underlyings")).send().await.unwrap().json().await.unwrap();
    assert_eq!(
        list,
        json!({"underlyings": [{"underlying": "KESTREL50", "latest_as_of": doc["as_of"], "snapshots": 1, "superseded": 0}]})
    );

    problem(server.client.get(server.url("/v1/snapshots/999")).send().await.unwrap(), StatusCode::NOT_FOUND).await;
    problem(server.client.get(server.url("/v1/snapshots/abc")).send().await.unwrap(), StatusCode::NOT_FOUND).await;
    let bad = server.client.get(server.url(&format!("{location}?include=everything"))).send().await.unwrap();
    let bad = problem(bad, StatusCode::BAD_REQUEST).await;
    assert_eq!(bad["errors"][0]["parameter"], "include");
}

#[tokio::test]
async fn analyze_and_fits_store_nothing() {
    let server = start_sqlite(open_settings()).await;
    let analysed = post_json(&server, "/v1/analyze", demo_snapshot().to_string()).await;
    assert_eq!(analysed.status(), StatusCode::OK);
    let analysed: Value = analysed.json().await.unwrap();
    assert_eq!(analysed["curve"].as_array().unwrap().len(), 35);
    assert!(analysed.get("id").is_none());

    // The examples of the OpenAPI document are valid requests.
    let example = post_json(&server, "/v1/analyze", logstrip::api::examples::snapshot_example().to_string()).await;
    assert_eq!(example.status(), StatusCode::OK);
    let fit = post_json(&server, "/v1/fits", logstrip::api::examples::swaps_example().to_string()).await;
    assert_eq!(fit.status(), StatusCode::OK);
    let fit: Value = fit.json().await.unwrap();
    assert_eq!(fit["curve"].as_array().unwrap().len(), 4);
    assert!(fit["fit"]["status"].is_string());

    let list: Value = server.client.get(server.url("/v1/underlyings")).send().await.unwrap().json().await.unwrap();
    assert_eq!(list, json!({"underlyings": []}));
    problem(
        server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.unwrap(),
        StatusCode::NOT_FOUND,
    )
    .await;
    problem(
        server.client.get(server.url("/v1/underlyings/KESTREL50/history")).send().await.unwrap(),
        StatusCode::NOT_FOUND,
    )
    .await;
}

/// A fit document with its run time (`fit.elapsed_us`, the one field that differs
/// between two runs) taken out.
fn without_run_time(mut doc: Value) -> Value {
    if let Some(fit) = doc.get_mut("fit").and_then(Value::as_object_mut) {
        assert!(fit.remove("elapsed_us").is_some_and(|t| t.is_u64()), "fit.elapsed_us expected: {doc}");
    }
    doc
}

/// `logstrip fit` and `POST /v1/fits` run one pipeline (`wire::fit_swap_levels`): the
/// same swap levels give the same document, bar the run time, and the same problems.
#[tokio::test]
async fn the_command_line_and_the_service_fit_alike() {
    let server = start_sqlite(open_settings()).await;
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/kestrel50-swaps.json");
    let text = std::fs::read_to_string(path).unwrap();
    let cli =
        std::process::Command::new(env!("CARGO_BIN_EXE_logstrip")).args(["fit", "--input", path]).output().unwrap();
    assert!(cli.status.success(), "stderr: {}", String::from_utf8_lossy(&cli.stderr));
    let from_cli: Value = serde_json::from_slice(&cli.stdout).unwrap();
    let served = post_json(&server, "/v1/fits", text).await;
    assert_eq!(served.status(), StatusCode::OK);
    let from_service: Value = served.json().await.unwrap();
    assert!(from_cli["fit"]["model_leverage_swap"].as_array().is_some_and(|m| m.len() == 5), "{from_cli}");
    assert_eq!(without_run_time(from_cli), without_run_time(from_service));

    let bad = r#"{"underlying":"KESTREL50","as_of":"2026-11-30T15:30:00Z","swaps":[{"tau":0.5,"variance_swap":-0.04,"gamma_swap":0.039}]}"#;
    let mut child = std::process::Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .args(["fit", "--input", "-"])
        .stdin(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    std::io::Write::write_all(&mut child.stdin.take().unwrap(), bad.as_bytes()).unwrap();
    let cli = child.wait_with_output().unwrap();
    assert_eq!(cli.status.code(), Some(2));
    let body = problem(post_json(&server, "/v1/fits", bad.to_string()).await, StatusCode::UNPROCESSABLE_ENTITY).await;
    assert_eq!(body["errors"][0]["pointer"], "/swaps/0/variance_swap");
    assert_eq!(String::from_utf8_lossy(&cli.stderr).trim(), body["errors"][0]["detail"]);
}

#[tokio::test]
async fn every_error_status_is_problem_json() {
    let settings = ServiceSettings { max_body: 64 * 1024, ..open_settings() };
    let server = start_sqlite(settings).await;

    let malformed =
        problem(post_json(&server, "/v1/snapshots", "{\"underlying\": ".into()).await, StatusCode::BAD_REQUEST).await;
    assert_eq!(malformed["type"], "urn:logstrip:problem:malformed-body");
    problem(post_json(&server, "/v1/analyze", "not json".into()).await, StatusCode::BAD_REQUEST).await;

    let wrong_type = server.client.post(server.url("/v1/snapshots")).body("{}").send().await.unwrap();
    problem(wrong_type, StatusCode::UNSUPPORTED_MEDIA_TYPE).await;
    let text_plain = server
        .client
        .post(server.url("/v1/fits"))
        .header("content-type", "text/plain")
        .body("{}")
        .send()
        .await
        .unwrap();
    problem(text_plain, StatusCode::UNSUPPORTED_MEDIA_TYPE).await;

    let mut doc = logstrip::api::examples::snapshot_example();
    doc["slices"][3]["points"][4]["vol"] = json!(-0.2);
    doc["slices"][1]["forward"] = json!(0.0);
    let invalid =
        problem(post_json(&server, "/v1/analyze", doc.to_string()).await, StatusCode::UNPROCESSABLE_ENTITY).await;
    let pointers: Vec<&str> =
        invalid["errors"].as_array().unwrap().iter().map(|e| e["pointer"].as_str().unwrap()).collect();
    assert!(pointers.contains(&"/slices/3/points/4/vol"), "{invalid}");
    assert!(pointers.contains(&"/slices/1/forward"), "{invalid}");
    let mut unknown_field = logstrip::api::examples::swaps_example();
    unknown_field["colour"] = json!(1);
    let unknown =
        problem(post_json(&server, "/v1/fits", unknown_field.to_string()).await, StatusCode::UNPROCESSABLE_ENTITY)
            .await;
    assert_eq!(unknown["errors"][0]["pointer"], "/colour", "{unknown}");
    // A missing field is pointed at, not its enclosing document.
    let mut missing_field = logstrip::api::examples::swaps_example();
    missing_field.as_object_mut().unwrap().remove("as_of");
    let missing =
        problem(post_json(&server, "/v1/fits", missing_field.to_string()).await, StatusCode::UNPROCESSABLE_ENTITY)
            .await;
    assert_eq!(missing["errors"][0]["pointer"], "/as_of", "{missing}");

    // Over the 64 KiB limit of this server (the demo snapshot is larger).
    let too_large =
        problem(post_json(&server, "/v1/snapshots", demo_snapshot().to_string()).await, StatusCode::PAYLOAD_TOO_LARGE)
            .await;
    assert!(too_large["detail"].as_str().unwrap().contains("65536"));

    problem(server.client.get(server.url("/v2/nothing")).send().await.unwrap(), StatusCode::NOT_FOUND).await;
    problem(server.client.delete(server.url("/v1/snapshots")).send().await.unwrap(), StatusCode::METHOD_NOT_ALLOWED)
        .await;
    for (query, parameter) in [("wait=61", "wait"), ("wait=soon", "wait")] {
        let response =
            server.client.get(server.url(&format!("/v1/underlyings/X/latest?{query}"))).send().await.unwrap();
        let body = problem(response, StatusCode::BAD_REQUEST).await;
        assert_eq!(body["errors"][0]["parameter"], parameter);
    }
    for (query, parameter) in
        [("limit=0", "limit"), ("cursor=zz", "cursor"), ("from=yesterday", "from"), ("format=xml", "format")]
    {
        let response =
            server.client.get(server.url(&format!("/v1/underlyings/X/history?{query}"))).send().await.unwrap();
        let body = problem(response, StatusCode::BAD_REQUEST).await;
        assert_eq!(body["errors"][0]["parameter"], parameter);
    }
}

#[tokio::test]
async fn requests_over_the_time_limit_get_408() {
    let settings = ServiceSettings { request_timeout: Duration::from_secs(1), ..open_settings() };
    let server = start_sqlite(settings).await;
    post_json(&server, "/v1/snapshots", logstrip::api::examples::snapshot_example().to_string()).await;
    let latest = server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.unwrap();
    let tag = latest.headers()["etag"].to_str().unwrap().to_string();
    let held = server
        .client
        .get(server.url("/v1/underlyings/KESTREL50/latest?wait=10"))
        .header("if-none-match", tag)
        .send()
        .await
        .unwrap();
    problem(held, StatusCode::REQUEST_TIMEOUT).await;
}

#[tokio::test]
async fn latest_has_etag_304_and_long_polling() {
    let server = start_sqlite(open_settings()).await;
    let first: Value =
        post_json(&server, "/v1/snapshots", demo_snapshot_at(30).to_string()).await.json().await.unwrap();
    let latest = server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.unwrap();
    assert_eq!(latest.status(), StatusCode::OK);
    let tag = latest.headers()["etag"].to_str().unwrap().to_string();
    let body: Value = latest.json().await.unwrap();
    assert_eq!(body["id"], first["id"]);

    let unchanged = server
        .client
        .get(server.url("/v1/underlyings/KESTREL50/latest"))
        .header("if-none-match", &tag)
        .send()
        .await
        .unwrap();
    assert_eq!(unchanged.status(), StatusCode::NOT_MODIFIED);
    assert_eq!(unchanged.headers()["etag"].to_str().unwrap(), tag);

    // A short wait with nothing new ends in 304.
    let waited = server
        .client
        .get(server.url("/v1/underlyings/KESTREL50/latest?wait=1"))
        .header("if-none-match", &tag)
        .send()
        .await
        .unwrap();
    assert_eq!(waited.status(), StatusCode::NOT_MODIFIED);

    // A long wait is answered by the next snapshot.
    let client = server.client.clone();
    let url = server.url("/v1/underlyings/KESTREL50/latest?wait=60");
    let poll_tag = tag.clone();
    let poll = tokio::spawn(async move { client.get(url).header("if-none-match", poll_tag).send().await.unwrap() });
    tokio::time::sleep(Duration::from_millis(300)).await;
    let second: Value =
        post_json(&server, "/v1/snapshots", demo_snapshot_at(20).to_string()).await.json().await.unwrap();
    let woken = poll.await.unwrap();
    assert_eq!(woken.status(), StatusCode::OK);
    assert_ne!(woken.headers()["etag"].to_str().unwrap(), tag);
    let woken: Value = woken.json().await.unwrap();
    assert_eq!(woken["id"], second["id"]);

    // An older as_of posted later does not become the latest.
    post_json(&server, "/v1/snapshots", demo_snapshot_at(50).to_string()).await;
    let latest: Value =
        server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.unwrap().json().await.unwrap();
    assert_eq!(latest["id"], second["id"]);
}

#[tokio::test]
async fn history_pages_filters_and_csv() {
    let server = start_sqlite(open_settings()).await;
    let mut ids = Vec::new();
    for minutes in [40, 30, 20] {
        let body: Value =
            post_json(&server, "/v1/snapshots", demo_snapshot_at(minutes).to_string()).await.json().await.unwrap();
        ids.push(body["id"].as_i64().unwrap());
    }
    let first = server.client.get(server.url("/v1/underlyings/KESTREL50/history?limit=2")).send().await.unwrap();
    assert_eq!(first.status(), StatusCode::OK);
    let link = first.headers()["link"].to_str().unwrap().to_string();
    assert!(link.contains("rel=\"next\""), "{link}");
    let first: Value = first.json().await.unwrap();
    let items = first["items"].as_array().unwrap();
    assert_eq!(items.len(), 2);
    assert_eq!(items[0]["id"], ids[0]);
    assert_eq!(items[1]["id"], ids[1]);
    assert_eq!(items[0]["curve"].as_array().unwrap().len(), 35);
    assert!(items[0]["fit"]["hurst"].is_number());
    assert!(items[0]["curve"][0]["model_leverage_swap"].is_number());
    let cursor = first["next_cursor"].as_str().unwrap();

    let second: Value = server
        .client
        .get(server.url(&format!("/v1/underlyings/KESTREL50/history?limit=2&cursor={cursor}")))
        .send()
        .await
        .unwrap()
        .json()
        .await
        .unwrap();
    assert_eq!(second["items"].as_array().unwrap().len(), 1);
    assert_eq!(second["items"][0]["id"], ids[2]);
    assert!(second.get("next_cursor").is_none());

    // from inclusive, to exclusive.
    let window: Value = server
        .client
        .get(server.url("/v1/underlyings/KESTREL50/history?from=2026-11-30T14:50:00Z&to=2026-11-30T15:10:00Z"))
        .send()
        .await
        .unwrap()
        .json()
        .await
        .unwrap();
    let window_ids: Vec<i64> = window["items"].as_array().unwrap().iter().map(|i| i["id"].as_i64().unwrap()).collect();
    assert_eq!(window_ids, vec![ids[0], ids[1]]);

    // The JSON page the CSV rows are checked against.
    let history = server.get_json("/v1/underlyings/KESTREL50/history").await;
    for request in [
        server.client.get(server.url("/v1/underlyings/KESTREL50/history?format=csv")),
        server.client.get(server.url("/v1/underlyings/KESTREL50/history")).header("accept", "text/csv"),
    ] {
        let csv = request.send().await.unwrap();
        assert_eq!(csv.status(), StatusCode::OK);
        assert!(csv.headers()["content-type"].to_str().unwrap().starts_with("text/csv"));
        let text = csv.text().await.unwrap();
        let mut reader = csv::Reader::from_reader(text.as_bytes());
        let header = reader.headers().unwrap().clone();
        assert_eq!(header.iter().collect::<Vec<_>>(), logstrip::api::history::CSV_HEADER.to_vec());
        let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.unwrap()).collect();
        assert_eq!(rows.len(), 3 * 35, "one row per snapshot and expiry");
        let column = header.iter().position(|h| h == "variance_swap").unwrap();
        let vs: f64 = rows[0][column].parse().unwrap();
        assert!(vs > 0.0);
        // The vol form and the quality flags ride along; numbers carry at most 12
        // significant digits (no last-bit noise).
        let at = |name: &str| header.iter().position(|h| h == name).unwrap();
        // Vols in vol points to 3 decimals (half a unit of the last decimal: 5e-4).
        let vol: f64 = rows[0][at("variance_swap_vol_pts")].parse().unwrap();
        assert!((vol - 100.0 * vs.sqrt()).abs() <= 5e-4 + 1e-12, "vol {vol} against 100 sqrt({vs})");
        let first = &history["items"][0]["curve"][0];
        for (column, field) in [("atm_vol_pts", "atm_vol"), ("skew_25_delta_pts", "skew_25_delta")] {
            let pts: f64 = rows[0][at(column)].parse().unwrap();
            let json = 100.0 * first[field].as_f64().unwrap();
            assert!((pts - json).abs() <= 5e-4 + 1e-12, "{column} {pts} against {json}");
        }
        assert!(rows.iter().all(|r| ["true", "false"].contains(&&r[at("butterfly_ok")])));
        assert!(rows.iter().all(|r| r[at("excluded_points")].parse::<u32>().is_ok()));
        let digits = |cell: &str| {
            cell.trim_start_matches('-').split('e').next().unwrap().replace('.', "").trim_start_matches('0').len()
        };
        assert!(rows.iter().all(|r| digits(&r[column]) <= 12), "at most 12 significant digits");
    }
    let history: serde_json::Value =
        server.client.get(server.url("/v1/underlyings/KESTREL50/history")).send().await.unwrap().json().await.unwrap();
    let point = &history["items"][0]["curve"][0];
    assert!(point["variance_swap_vol"].as_f64().unwrap() > 0.0, "{point}");
    assert!(point["quality"]["calendar_ok"].is_boolean(), "{point}");
}

#[tokio::test]
async fn tokens_guard_writes_and_reads() {
    let settings = ServiceSettings {
        access: Access {
            write: Some(Token::new("write-secret").unwrap()),
            read: Some(Token::new("read-secret").unwrap()),
        },
        ..open_settings()
    };
    let server = start_sqlite(settings).await;
    let body = logstrip::api::examples::snapshot_example().to_string();
    let post = |token: Option<&'static str>| {
        let mut request = server.client.post(server.url("/v1/snapshots")).header("content-type", "application/json");
        if let Some(t) = token {
            request = request.bearer_auth(t);
        }
        request.body(body.clone()).send()
    };
    let anonymous = post(None).await.unwrap();
    assert!(anonymous.headers()["www-authenticate"].to_str().unwrap().starts_with("Bearer"));
    problem(anonymous, StatusCode::UNAUTHORIZED).await;
    problem(post(Some("wrong")).await.unwrap(), StatusCode::UNAUTHORIZED).await;
    problem(post(Some("read-secret")).await.unwrap(), StatusCode::FORBIDDEN).await;
    assert_eq!(post(Some("write-secret")).await.unwrap().status(), StatusCode::CREATED);

    let read = |token: Option<&'static str>| {
        let mut request = server.client.get(server.url("/v1/underlyings"));
        if let Some(t) = token {
            request = request.bearer_auth(t);
        }
        request.send()
    };
    problem(read(None).await.unwrap(), StatusCode::UNAUTHORIZED).await;
    assert_eq!(read(Some("read-secret")).await.unwrap().status(), StatusCode::OK);
    assert_eq!(read(Some("write-secret")).await.unwrap().status(), StatusCode::OK);
    for open in ["/healthz", "/readyz", "/openapi.json"] {
        assert_eq!(server.client.get(server.url(open)).send().await.unwrap().status(), StatusCode::OK, "{open}");
    }
}

#[tokio::test]
async fn probes_metrics_and_the_committed_openapi_document() {
    let server = start_sqlite(open_settings()).await;
    let health: Value = server.client.get(server.url("/healthz")).send().await.unwrap().json().await.unwrap();
    assert_eq!(health, json!({"status": "ok"}));
    let ready: Value = server.client.get(server.url("/readyz")).send().await.unwrap().json().await.unwrap();
    assert_eq!(ready, json!({"status": "ready"}));

    post_json(&server, "/v1/analyze", logstrip::api::examples::snapshot_example().to_string()).await;
    post_json(&server, "/v1/analyze", "{".into()).await;
    let metrics = server.client.get(server.url("/metrics")).send().await.unwrap().text().await.unwrap();
    for expected in [
        "logstrip_http_requests_total{route=\"/v1/analyze\",method=\"POST\",status=\"200\"} 1",
        "logstrip_http_requests_total{route=\"/v1/analyze\",method=\"POST\",status=\"400\"} 1",
        "logstrip_http_request_duration_seconds_bucket",
        "logstrip_analyses_total{outcome=\"ok\"} 1",
        "logstrip_fit_duration_seconds_count 1",
    ] {
        assert!(metrics.contains(expected), "metrics lack {expected}:\n{metrics}");
    }

    let served = server.client.get(server.url("/openapi.json")).send().await.unwrap().text().await.unwrap();
    let committed = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/openapi/logstrip.json"))
        .expect("openapi/logstrip.json is committed");
    assert!(
        served == committed,
        "openapi/logstrip.json differs from GET /openapi.json; regenerate with \
         `cargo run -- openapi > openapi/logstrip.json`"
    );
    let doc: Value = serde_json::from_str(&served).unwrap();
    assert!(doc["openapi"].as_str().unwrap().starts_with("3.1"));
    for path in [
        "/v1/snapshots",
        "/v1/analyze",
        "/v1/fits",
        "/v1/snapshots/{id}",
        "/v1/underlyings",
        "/v1/underlyings/{underlying}/latest",
        "/v1/underlyings/{underlying}/history",
        "/healthz",
        "/readyz",
        "/metrics",
        "/openapi.json",
    ] {
        assert!(doc["paths"].get(path).is_some(), "OpenAPI lacks {path}");
    }
}

#[tokio::test]
async fn graceful_shutdown_ends_long_polls_and_stops_accepting() {
    let mut server = start_sqlite(open_settings()).await;
    post_json(&server, "/v1/snapshots", logstrip::api::examples::snapshot_example().to_string()).await;
    let latest = server.client.get(server.url("/v1/underlyings/KESTREL50/latest")).send().await.unwrap();
    let tag = latest.headers()["etag"].to_str().unwrap().to_string();
    let client = server.client.clone();
    let url = server.url("/v1/underlyings/KESTREL50/latest?wait=60");
    let poll = tokio::spawn(async move { client.get(url).header("if-none-match", tag).send().await });
    tokio::time::sleep(Duration::from_millis(300)).await;
    server.shutdown().await;
    let answered = poll.await.unwrap().expect("the in-flight request is answered");
    assert_eq!(answered.status(), StatusCode::NOT_MODIFIED);
    assert!(server.client.get(server.url("/healthz")).send().await.is_err(), "no new connections after shutdown");
}
