//! Valuations, realized variance, CSV snapshots and backfill through a real server.

mod common;

use common::*;
use logstrip::api::examples::{snapshot_example, valuation_example, CSV_SNAPSHOT_EXAMPLE};
use reqwest::StatusCode;
use serde_json::{json, Value};

async fn post_csv(server: &TestServer, path: &str, body: &str) -> reqwest::Response {
    server
        .client
        .post(server.url(path))
        .header("content-type", "text/csv")
        .body(body.to_string())
        .send()
        .await
        .expect("request")
}

async fn problem_pointers(response: reqwest::Response) -> Vec<String> {
    assert_eq!(response.status(), StatusCode::UNPROCESSABLE_ENTITY);
    let body: Value = response.json().await.expect("problem");
    body["errors"].as_array().expect("errors").iter().map(|e| e["pointer"].as_str().unwrap_or("").to_string()).collect()
}

#[tokio::test]
async fn valuations_inline_and_by_stored_id_agree() {
    let server = start_sqlite(open_settings()).await;
    let inline = post_json(&server, "/v1/valuations", valuation_example().to_string()).await;
    assert_eq!(inline.status(), StatusCode::OK);
    let inline: Value = inline.json().await.unwrap();
    assert_eq!(inline["positions"].as_array().unwrap().len(), 2);
    let first = &inline["positions"][0];
    for key in ["id", "value", "accrued_leg", "remaining_leg", "implied_level", "vega_buckets", "parallel_vega"] {
        assert!(first.get(key).is_some(), "position lacks {key}: {first}");
    }
    // Only the expiries the swap has vega to are listed (none beyond its maturity).
    let buckets = first["vega_buckets"].as_array().unwrap();
    assert!(!buckets.is_empty() && buckets.len() <= 4, "{first}");
    assert!(buckets.iter().all(|b| b["vega"].as_f64().unwrap().abs() > 0.0), "{first}");
    assert!(inline["totals"]["book"]["value"].is_number());

    let stored: Value = post_json(&server, "/v1/snapshots", snapshot_example().to_string()).await.json().await.unwrap();
    let mut by_id = valuation_example();
    by_id.as_object_mut().unwrap().remove("snapshot");
    by_id["snapshot_id"] = stored["id"].clone();
    let by_id: Value = post_json(&server, "/v1/valuations", by_id.to_string()).await.json().await.unwrap();
    assert_eq!(by_id["positions"][0]["value"], inline["positions"][0]["value"]);
    assert_eq!(by_id["totals"], inline["totals"]);
}

#[tokio::test]
async fn valuation_errors_point_at_the_field() {
    let server = start_sqlite(open_settings()).await;
    let mut far = valuation_example();
    far["positions"][0]["maturity"] = json!("2031-01-01T00:00:00Z");
    far["snapshot"]["slices"][2]["points"][1]["vol"] = json!(-0.3);
    let pointers = problem_pointers(post_json(&server, "/v1/valuations", far.to_string()).await).await;
    assert_eq!(pointers, vec!["/snapshot/slices/2/points/1/vol"], "snapshot problems come first");
    let mut far = valuation_example();
    far["positions"][0]["maturity"] = json!("2031-01-01T00:00:00Z");
    let pointers = problem_pointers(post_json(&server, "/v1/valuations", far.to_string()).await).await;
    assert_eq!(pointers, vec!["/positions/0/maturity"]);
    let mut both = valuation_example();
    both["snapshot_id"] = json!(1);
    let pointers = problem_pointers(post_json(&server, "/v1/valuations", both.to_string()).await).await;
    assert_eq!(pointers, vec!["/snapshot_id"]);
    let mut unknown = valuation_example();
    unknown.as_object_mut().unwrap().remove("snapshot");
    unknown["snapshot_id"] = json!(404);
    // An id that names no stored snapshot is a 404 naming the field (issue 19).
    let response = post_json(&server, "/v1/valuations", unknown.to_string()).await;
    assert_eq!(response.status(), StatusCode::NOT_FOUND);
    let problem: Value = response.json().await.expect("problem");
    assert_eq!(problem["detail"], json!("snapshot_id: no stored snapshot with id 404"));
}

#[tokio::test]
async fn caps_are_refused_and_an_earlier_stored_snapshot_explains_the_change() {
    let server = start_sqlite(open_settings()).await;
    let mut capped = valuation_example();
    capped["positions"][0]["cap_multiple"] = json!(2.5);
    let pointers = problem_pointers(post_json(&server, "/v1/valuations", capped.to_string()).await).await;
    assert_eq!(pointers, vec!["/positions/0/cap_multiple"]);

    // The same snapshot stored as the earlier one: nothing moved, every part is zero
    // and the change is exactly zero.
    let stored: Value = post_json(&server, "/v1/snapshots", snapshot_example().to_string()).await.json().await.unwrap();
    let mut since = valuation_example();
    since["since_snapshot_id"] = stored["id"].clone();
    let response = post_json(&server, "/v1/valuations", since.to_string()).await;
    assert_eq!(response.status(), StatusCode::OK);
    let doc: Value = response.json().await.unwrap();
    let explain = &doc["explain"];
    assert_eq!(explain["positions"].as_array().unwrap().len(), 2, "{explain}");
    for part in ["change", "realized_accrual", "time_decay", "vega", "discounting", "unexplained"] {
        assert!(explain["book"][part].as_f64().unwrap().abs() < 1e-9, "{part}: {explain}");
    }
    assert_eq!(doc["conventions"]["variance_notional_unit"], "currency per vol point squared");
    since["since_snapshot"] = snapshot_example();
    let pointers = problem_pointers(post_json(&server, "/v1/valuations", since.to_string()).await).await;
    assert_eq!(pointers, vec!["/since_snapshot_id"]);
}

#[tokio::test]
async fn realized_variance_and_gaps() {
    let server = start_sqlite(open_settings()).await;
    let ok = post_json(&server, "/v1/realized", json!({"closes": [100.0, 110.0, 99.0]}).to_string()).await;
    assert_eq!(ok.status(), StatusCode::OK);
    let ok: Value = ok.json().await.unwrap();
    // Hand-computed: 252/2 (ln(1.1)^2 + ln(0.9)^2).
    let expected = 126.0 * (1.1f64.ln().powi(2) + 0.9f64.ln().powi(2));
    assert!((ok["variance"].as_f64().unwrap() - expected).abs() < 1e-12 * expected);
    assert_eq!(ok["returns"], 2);
    let gap = post_json(&server, "/v1/realized", json!({"closes": [100.0, 101.0, null, -4.0]}).to_string()).await;
    assert_eq!(problem_pointers(gap).await, vec!["/closes/2", "/closes/3"]);
}

#[tokio::test]
async fn csv_snapshots_are_analysed_stored_and_named_by_line() {
    let server = start_sqlite(open_settings()).await;
    let created = post_csv(&server, "/v1/snapshots", CSV_SNAPSHOT_EXAMPLE).await;
    assert_eq!(created.status(), StatusCode::CREATED);
    let created: Value = created.json().await.unwrap();
    assert_eq!(created["curve"].as_array().unwrap().len(), 2);
    let again = post_csv(&server, "/v1/snapshots", &CSV_SNAPSHOT_EXAMPLE.replace('\n', "\r\n")).await;
    assert_eq!(again.status(), StatusCode::OK, "the same CSV with other line endings is the same content");
    let stored: Value = server
        .client
        .get(server.url(&format!("/v1/snapshots/{}?include=input", created["id"])))
        .send()
        .await
        .unwrap()
        .json()
        .await
        .unwrap();
    assert_eq!(stored["input"], json!(CSV_SNAPSHOT_EXAMPLE));

    // underlying and as_of from the query when the table lacks them.
    let bare: String =
        CSV_SNAPSHOT_EXAMPLE.lines().map(|l| l.splitn(3, ',').nth(2).unwrap_or("").to_string() + "\n").collect();
    let from_query = post_csv(&server, "/v1/snapshots?underlying=HERON&as_of=2026-11-30T15:30:00Z", &bare).await;
    assert_eq!(from_query.status(), StatusCode::CREATED);
    assert_eq!(from_query.json::<Value>().await.unwrap()["underlying"], "HERON");

    let bad = CSV_SNAPSHOT_EXAMPLE.replacen("0.26,", "-0.26,", 1);
    let rejected = post_csv(&server, "/v1/analyze", &bad).await;
    assert_eq!(rejected.status(), StatusCode::UNPROCESSABLE_ENTITY);
    let body: Value = rejected.json().await.unwrap();
    assert_eq!(body["errors"][0]["line"], 3);
    assert_eq!(body["errors"][0]["column"], "vol");
    let analysed = post_csv(&server, "/v1/analyze", CSV_SNAPSHOT_EXAMPLE).await;
    assert_eq!(analysed.status(), StatusCode::OK);
}

#[tokio::test]
async fn backfill_posts_a_directory_skips_on_rerun_and_lists_failures() {
    let server = start_sqlite(open_settings()).await;
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("snapshots");
    std::fs::create_dir_all(input.join("day2")).unwrap();
    for minutes in [30, 20, 10] {
        std::fs::write(input.join(format!("snap-{minutes}.json")), demo_snapshot_at(minutes).to_string()).unwrap();
    }
    std::fs::write(input.join("day2").join("quotes.csv"), CSV_SNAPSHOT_EXAMPLE).unwrap();
    std::fs::write(input.join("day2").join("broken.json"), "{\"underlying\": \"KESTREL50\", ").unwrap();
    std::fs::write(input.join("notes.txt"), "not a snapshot").unwrap();
    let failures = dir.path().join("failures.txt");
    let (input_dir, base, failures_file) =
        (input.to_str().unwrap().to_string(), server.base.clone(), failures.to_str().unwrap().to_string());
    let run = move || {
        std::process::Command::new(env!("CARGO_BIN_EXE_logstrip"))
            .args(["backfill", &input_dir, "--to", &base, "--concurrency", "3"])
            .args(["--failures", &failures_file])
            .output()
            .expect("run backfill")
    };
    let first = tokio::task::spawn_blocking(run.clone()).await.unwrap();
    let stdout = String::from_utf8_lossy(&first.stdout);
    let stderr = String::from_utf8_lossy(&first.stderr);
    assert!(stdout.contains("5 files, 4 done, 0 skipped (already stored), 1 failed"), "{stdout}\n{stderr}");
    assert!(stdout.contains("broken.json: HTTP 400"), "{stdout}");
    assert!(stderr.contains("backfill: 5/5 files"), "plain progress lines off a terminal: {stderr}");
    // The rate reads to one decimal ("52.5 files/s"), not the four of "52.5377/s".
    for line in stderr.lines().filter(|line| line.starts_with("backfill: ")) {
        let rate = line.split(", ").nth(1).and_then(|part| part.strip_suffix(" files/s")).expect("a rate");
        let decimals = rate.split_once('.').map(|(_, d)| d.len());
        assert!(rate.parse::<f64>().is_ok() && decimals == Some(1), "rate {rate:?} in {line:?}");
    }
    assert_eq!(first.status.code(), Some(1), "failures make the exit status 1");
    let listed = std::fs::read_to_string(&failures).unwrap();
    assert_eq!(listed.lines().count(), 1);
    assert!(listed.starts_with(input.join("day2").join("broken.json").to_str().unwrap()), "{listed}");

    let second = tokio::task::spawn_blocking(run).await.unwrap();
    let stdout = String::from_utf8_lossy(&second.stdout);
    assert!(stdout.contains("5 files, 0 done, 4 skipped (already stored), 1 failed"), "{stdout}");

    let history: Value =
        server.client.get(server.url("/v1/underlyings/KESTREL50/history")).send().await.unwrap().json().await.unwrap();
    assert_eq!(history["items"].as_array().unwrap().len(), 4, "3 JSON snapshots and the CSV one");
}

/// Found by schemathesis once the OpenAPI parameters had examples: a snapshot posted as
/// CSV comes back under `?include=input` as the CSV text (a JSON string), which the
/// schema, allowing only a snapshot object, rejected. The input stays as sent; the
/// schema (`StoredInputDoc`) now allows the string.
#[tokio::test]
async fn a_csv_snapshot_with_include_input_returned_a_string_the_schema_did_not_allow() {
    let server = start_sqlite(open_settings()).await;
    let stored = post_csv(&server, "/v1/snapshots", CSV_SNAPSHOT_EXAMPLE).await;
    assert_eq!(stored.status(), StatusCode::CREATED);
    let id = stored.json::<Value>().await.unwrap()["id"].as_i64().expect("id");
    let with_input: Value = server
        .client
        .get(server.url(&format!("/v1/snapshots/{id}?include=input")))
        .send()
        .await
        .expect("request")
        .json()
        .await
        .expect("JSON");
    assert_eq!(with_input["input"].as_str(), Some(CSV_SNAPSHOT_EXAMPLE), "{}", with_input["input"]);

    let text =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/openapi/logstrip.json")).expect("committed");
    let doc: Value = serde_json::from_str(&text).expect("JSON");
    let variants = doc["components"]["schemas"]["StoredInputDoc"]["oneOf"].as_array().expect("oneOf").clone();
    assert!(variants.iter().any(|v| v["type"] == "string"), "{variants:?}");
    assert!(variants.iter().any(|v| v["$ref"] == "#/components/schemas/SnapshotDoc"), "{variants:?}");
}
