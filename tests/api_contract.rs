//! The OpenAPI document says exactly what the service accepts: each case schemathesis
//! found (a request the document called valid that the server refused, issue 19) as a
//! request to a real server, beside the part of the document that now states the rule.

mod common;

use common::*;
use reqwest::StatusCode;
use serde_json::{json, Value};

fn document() -> Value {
    serde_json::from_str(&logstrip::api::openapi::openapi_json()).expect("document is JSON")
}

fn parameter_schema(doc: &Value, path: &str, name: &str) -> Value {
    let parameters = doc["paths"][path]["get"]["parameters"].as_array().expect("parameters");
    parameters.iter().find(|p| p["name"] == name).expect("parameter")["schema"].clone()
}

async fn get(server: &TestServer, path: &str) -> (StatusCode, Value) {
    let response = server.client.get(server.url(path)).send().await.expect("request");
    let status = response.status();
    (status, response.json().await.unwrap_or(Value::Null))
}

async fn post(server: &TestServer, path: &str, body: Value) -> (StatusCode, Value) {
    let response = post_json(server, path, body.to_string()).await;
    let status = response.status();
    (status, response.json().await.unwrap_or(Value::Null))
}

fn named(problem: &Value, key: &str) -> Vec<String> {
    problem["errors"].as_array().into_iter().flatten().filter_map(|e| e[key].as_str().map(str::to_string)).collect()
}

async fn server_with_snapshot() -> TestServer {
    let server = start_sqlite(open_settings()).await;
    let (status, _) = post(&server, "/v1/snapshots", demo_snapshot()).await;
    assert_eq!(status, StatusCode::CREATED);
    server
}

#[tokio::test]
async fn query_parameters_are_enums_and_ranges_the_server_keeps() {
    let doc = document();
    assert_eq!(parameter_schema(&doc, "/v1/snapshots/{id}", "include")["enum"], json!(["input"]));
    let chart = "/v1/underlyings/{underlying}/history/chart.svg";
    assert_eq!(
        parameter_schema(&doc, chart, "param")["enum"],
        json!(["hurst", "rho_nu", "mean_reversion", "leverage_rmse"])
    );
    let wait = parameter_schema(&doc, "/v1/underlyings/{underlying}/latest", "wait");
    assert_eq!(
        (wait["type"].clone(), wait["minimum"].clone(), wait["maximum"].clone()),
        (json!("integer"), json!(0), json!(60))
    );
    let history = "/v1/underlyings/{underlying}/history";
    assert_eq!(parameter_schema(&doc, history, "format")["enum"], json!(["json", "csv"]));
    assert_eq!(parameter_schema(&doc, history, "from")["format"], json!("date-time"));

    let server = server_with_snapshot().await;
    let id = {
        let (_, latest) = get(&server, "/v1/underlyings/KESTREL50/latest").await;
        latest["id"].as_i64().expect("id")
    };
    let (status, body) = get(&server, &format!("/v1/snapshots/{id}?include=input")).await;
    assert_eq!(status, StatusCode::OK);
    assert!(body["input"].is_object());
    for (path, parameter) in [
        (format!("/v1/snapshots/{id}?include="), "include"),
        (format!("/v1/snapshots/{id}?include=inputs"), "include"),
        ("/v1/underlyings/KESTREL50/latest?wait=".to_string(), "wait"),
        ("/v1/underlyings/KESTREL50/latest?wait=61".to_string(), "wait"),
        ("/v1/underlyings/KESTREL50/history?format=xml".to_string(), "format"),
        ("/v1/underlyings/KESTREL50/history?limit=0".to_string(), "limit"),
        ("/v1/underlyings/KESTREL50/history/chart.svg?param=vol".to_string(), "param"),
        ("/v1/underlyings/KESTREL50/history/chart.svg?from=yesterday".to_string(), "from"),
        ("/v1/underlyings/KESTREL50/history/chart.svg?width=100".to_string(), "width"),
        ("/v1/underlyings/KESTREL50/latest/chart.svg?width=wide".to_string(), "width"),
    ] {
        let (status, problem) = get(&server, &path).await;
        assert_eq!(status, StatusCode::BAD_REQUEST, "{path}");
        assert_eq!(named(&problem, "parameter"), vec![parameter.to_string()], "{path}");
    }
}

/// Three cases schemathesis found (CI, seed 20261202) where the document and the
/// server disagreed, each with the rule now stated.
#[tokio::test]
async fn the_page_the_tenor_chart_and_path_underlyings_keep_their_documented_rules() {
    let doc = document();
    let server = server_with_snapshot().await;
    // The page's `snapshot` is an int64: one beyond it is a 400 naming it.
    let (status, _) = get(&server, "/?snapshot=1").await;
    assert_eq!(status, StatusCode::OK);
    let (status, problem) = get(&server, "/?snapshot=9223372036854775808").await;
    assert_eq!(status, StatusCode::BAD_REQUEST);
    assert_eq!(named(&problem, "parameter"), vec!["snapshot".to_string()]);
    // Every figure the document lists is one the tenor chart draws (the enum said
    // `skew25_delta` while the server took `skew_25_delta`).
    let tenors = "/v1/underlyings/{underlying}/history/tenors.svg";
    let figures = parameter_schema(&doc, tenors, "figure")["enum"].as_array().cloned().unwrap_or_default();
    assert_eq!(figures.len(), 5);
    for figure in figures {
        let figure = figure.as_str().unwrap_or_default().to_string();
        let response = server
            .client
            .get(server.url(&format!("/v1/underlyings/KESTREL50/history/tenors.svg?figure={figure}")))
            .send()
            .await
            .expect("request");
        assert_eq!(response.status(), StatusCode::OK, "{figure}");
    }
    // An underlying in a path: the document states the service's rules (no control
    // character, not only white space, at most 200 characters), which refuse with 422.
    for path in ["/v1/underlyings/{underlying}/history", tenors, "/v1/underlyings/{underlying}/latest"] {
        let schema = parameter_schema(&doc, path, "underlying");
        assert_eq!(schema["maxLength"], json!(logstrip::wire::input::MAX_UNDERLYING_CHARS), "{path}");
        assert_eq!(schema["pattern"], json!(logstrip::api::openapi::UNDERLYING_PATTERN), "{path}");
    }
    let (status, problem) = get(&server, "/v1/underlyings/%25%C2%9Dq/history/tenors.svg").await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(named(&problem, "parameter"), vec!["underlying".to_string()]);
}

#[tokio::test]
async fn a_cursor_of_the_documented_form_is_a_page_and_any_other_a_400() {
    let doc = document();
    let pattern = parameter_schema(&doc, "/v1/underlyings/{underlying}/history", "cursor")["pattern"].clone();
    assert_eq!(pattern, json!("^n?[0-9a-f]{1,15}-[0-9a-f]{1,15}$"));
    let server = server_with_snapshot().await;
    let history = "/v1/underlyings/KESTREL50/history";
    let (status, page) = get(&server, &format!("{history}?cursor=0-0")).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(page["items"].as_array().map(Vec::len), Some(1), "a cursor at 1970 comes before the snapshot");
    for after_all in ["fffffffffffffff-fffffffffffffff", "nfffffffffffffff-0"] {
        let (status, page) = get(&server, &format!("{history}?cursor={after_all}")).await;
        assert_eq!(status, StatusCode::OK, "{after_all}");
        let expected = if after_all.starts_with('n') { 1 } else { 0 };
        assert_eq!(page["items"].as_array().map(Vec::len), Some(expected), "{after_all}");
    }
    for garbage in ["", "MzkK", "1-2-3", "A-1"] {
        let (status, problem) = get(&server, &format!("{history}?cursor={garbage}")).await;
        assert_eq!(status, StatusCode::BAD_REQUEST, "{garbage:?}");
        assert_eq!(problem["status"], json!(400));
        assert_eq!(named(&problem, "parameter"), vec!["cursor".to_string()], "{garbage:?}");
    }
}

#[tokio::test]
async fn fit_nu_must_be_positive_as_the_document_says() {
    let doc = document();
    assert_eq!(doc["components"]["schemas"]["FitDoc"]["properties"]["nu"]["exclusiveMinimum"], json!(0));
    let server = start_sqlite(open_settings()).await;
    let mut snapshot = demo_snapshot();
    snapshot["fit"] = json!({"model": "heston", "nu": 0});
    let mut swaps = logstrip::api::examples::swaps_example();
    swaps["fit"] = json!({"nu": 0});
    for (path, body) in [("/v1/analyze", snapshot.clone()), ("/v1/snapshots", snapshot), ("/v1/fits", swaps)] {
        let (status, problem) = post(&server, path, body).await;
        assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{path}");
        assert_eq!(named(&problem, "pointer"), vec!["/fit/nu".to_string()], "{path}");
    }
}

#[tokio::test]
async fn fixed_parameters_carry_the_solver_bounds_in_the_document() {
    // The schema's bounds are the solver's own (schemathesis warned that they were
    // missing): a value on a bound is accepted, one just beyond it is a 422 naming it.
    use logstrip::analytics::calibrate::ParamName;
    let doc = document();
    let properties = &doc["components"]["schemas"]["FixDoc"]["properties"];
    let server = start_sqlite(open_settings()).await;
    for name in [ParamName::Hurst, ParamName::RhoNu, ParamName::MeanReversion] {
        let (lo, hi) = name.bounds();
        let schema = &properties[name.as_str()];
        assert_eq!(schema["minimum"].as_f64(), Some(lo), "{}", name.as_str());
        assert_eq!(schema["maximum"].as_f64(), Some(hi), "{}", name.as_str());
        for (value, accepted) in [(lo, true), (hi, true), (hi + 0.01, false), (lo - 0.01, false)] {
            let mut swaps = logstrip::api::examples::swaps_example();
            swaps["fit"] = json!({"fix": {name.as_str(): value}});
            let (status, problem) = post(&server, "/v1/fits", swaps).await;
            if accepted {
                assert_eq!(status, StatusCode::OK, "{} = {value}: {problem}", name.as_str());
            } else {
                assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{} = {value}", name.as_str());
                assert_eq!(named(&problem, "pointer"), vec![format!("/fit/fix/{}", name.as_str())]);
            }
        }
    }
}

#[tokio::test]
async fn closes_are_positive_numbers_without_gaps() {
    let doc = document();
    let closes = &doc["components"]["schemas"]["ClosesDoc"]["properties"]["closes"];
    assert_eq!(closes["items"]["type"], json!("number"), "items are not nullable");
    assert_eq!((closes["items"]["exclusiveMinimum"].clone(), closes["minItems"].clone()), (json!(0), json!(2)));
    let server = start_sqlite(open_settings()).await;
    let (status, problem) = post(&server, "/v1/realized", json!({"closes": [null, 4150.2, 4172.9]})).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(named(&problem, "pointer"), vec!["/closes/0".to_string()]);
    // A ratio of closes beyond floating point was a 200 with null figures.
    let (status, problem) = post(&server, "/v1/realized", json!({"closes": [1e-189, 1.4e308]})).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{problem}");
    assert_eq!(named(&problem, "pointer"), vec!["/closes".to_string()]);
}

#[tokio::test]
async fn a_valuation_takes_exactly_one_of_snapshot_and_snapshot_id() {
    let doc = document();
    let rules = &doc["components"]["schemas"]["ValuationRequest"]["allOf"];
    assert_eq!(rules[0]["oneOf"][0]["required"], json!(["snapshot"]));
    assert_eq!(rules[0]["oneOf"][1]["required"], json!(["snapshot_id"]));
    assert_eq!(rules[1]["not"]["required"], json!(["since_snapshot", "since_snapshot_id"]));
    let server = server_with_snapshot().await;
    let positions = logstrip::api::examples::valuation_example()["positions"].clone();
    let both = json!({"snapshot": demo_snapshot(), "snapshot_id": 1, "positions": positions});
    let (status, problem) = post(&server, "/v1/valuations", both).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(named(&problem, "pointer"), vec!["/snapshot_id".to_string()]);
    // JSON Schema's integer admits 99.0; an id that names nothing is a 404 naming the field.
    let missing = json!({"snapshot_id": 99.0, "positions": positions});
    let (status, problem) = post(&server, "/v1/valuations", missing).await;
    assert_eq!(status, StatusCode::NOT_FOUND, "{problem}");
    assert!(problem["detail"].as_str().is_some_and(|d| d.starts_with("snapshot_id:")), "{problem}");
    let fraction = json!({"snapshot_id": 1.5, "positions": positions});
    let (status, problem) = post(&server, "/v1/valuations", fraction).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{problem}");
}
