//! `GET /v1/snapshots/{id}/expiries/{index}/smile.svg` through a real server: on the
//! demo day's 12:20 snapshot (one quote moved off the market on purpose,
//! demo-data/day/README.md) every quote of the expiry is drawn, the quotes the stored
//! analysis flags are marked with their reason, and bad paths and parameters are
//! problem+json naming the field.

mod common;

use common::*;
use reqwest::StatusCode;
use serde_json::Value;

async fn problem(response: reqwest::Response, status: StatusCode) -> Value {
    assert_eq!(response.status(), status);
    assert_eq!(response.headers()["content-type"], "application/problem+json");
    let body: Value = response.json().await.expect("problem JSON");
    assert_eq!(body["status"], status.as_u16());
    body
}

/// The `data-strike` values of the elements `<g class="{class}" ...>`.
fn strikes_of(svg: &str, class: &str) -> Vec<f64> {
    svg.split(&format!("<g class=\"{class}\" data-strike=\""))
        .skip(1)
        .filter_map(|rest| rest.split('"').next().and_then(|s| s.parse().ok()))
        .collect()
}

#[tokio::test]
async fn the_smile_of_a_flagged_expiry_marks_every_quote_and_its_flags() {
    let server = start_sqlite(open_settings()).await;
    let input = demo_day_snapshot("1220");
    let created = post_json(&server, "/v1/snapshots", input.to_string()).await;
    assert_eq!(created.status(), StatusCode::CREATED);
    let stored: Value = created.json().await.unwrap();
    let id = stored["id"].as_i64().unwrap();
    let curve = stored["curve"].as_array().unwrap();
    let (index, point) = curve
        .iter()
        .enumerate()
        .find(|(_, p)| !p["quality"]["flagged_quotes"].as_array().unwrap().is_empty())
        .expect("the 12:20 snapshot has a flagged expiry");
    let quotes = input["slices"].as_array().unwrap().iter().find(|s| s["expiry"] == point["expiry"]).unwrap()["points"]
        .as_array()
        .unwrap()
        .len();

    let url = server.url(&format!("/v1/snapshots/{id}/expiries/{index}/smile.svg?width=420"));
    let response = server.client.get(url).send().await.unwrap();
    assert_eq!(response.status(), StatusCode::OK);
    assert_eq!(response.headers()["content-type"], "image/svg+xml");
    let svg = response.text().await.unwrap();
    assert!(svg.starts_with("<svg xmlns=\"http://www.w3.org/2000/svg\"") && svg.ends_with("</svg>"));
    assert!(svg.contains("width=\"420\""), "drawn at the width asked for");
    assert_eq!(svg.matches("<g class=\"quote ").count(), quotes, "one mark per input quote");
    assert_eq!(svg.matches("<g class=\"residual ").count(), quotes, "one residual per input quote");
    assert!(svg.contains("class=\"fit\"") && svg.contains("class=\"wing\""), "the smile and its wings drawn");
    for flag in point["quality"]["flagged_quotes"].as_array().unwrap() {
        let strike = flag["strike"].as_f64().unwrap();
        let class = if flag["reason"] == "left_out" { "quote left-out" } else { "quote suspect" };
        assert!(strikes_of(&svg, class).contains(&strike), "strike {strike} marked as {class}");
        assert!(svg.contains(&format!("strike {strike}: quote")), "strike {strike} listed");
    }
    let marked = strikes_of(&svg, "quote left-out").len() + strikes_of(&svg, "quote suspect").len();
    assert_eq!(marked, point["quality"]["flagged_quotes"].as_array().unwrap().len(), "no other quote marked");
    assert!(!svg.contains("refitted by this version"), "the refit is the stored fit");

    // Every expiry draws; the default width is 880.
    let last = curve.len() - 1;
    let response = server.client.get(server.url(&format!("/v1/snapshots/{id}/expiries/{last}/smile.svg"))).send();
    let svg = response.await.unwrap().text().await.unwrap();
    assert!(svg.contains("width=\"880\""));

    let get = |path: String| server.client.get(server.url(&path)).send();
    problem(get(format!("/v1/snapshots/{}/expiries/0/smile.svg", id + 100)).await.unwrap(), StatusCode::NOT_FOUND)
        .await;
    problem(get("/v1/snapshots/abc/expiries/0/smile.svg".into()).await.unwrap(), StatusCode::NOT_FOUND).await;
    let beyond = problem(
        get(format!("/v1/snapshots/{id}/expiries/{}/smile.svg", curve.len())).await.unwrap(),
        StatusCode::NOT_FOUND,
    )
    .await;
    assert!(beyond["detail"].as_str().unwrap().contains(&format!("{} expiries", curve.len())), "{beyond}");
    for bad in ["x", "-1", "1.5"] {
        let body = problem(
            get(format!("/v1/snapshots/{id}/expiries/{bad}/smile.svg")).await.unwrap(),
            StatusCode::UNPROCESSABLE_ENTITY,
        )
        .await;
        assert!(body.to_string().contains("index"), "names the index: {body}");
    }
    for bad in ["10", "abc", "2401"] {
        let body = problem(
            get(format!("/v1/snapshots/{id}/expiries/0/smile.svg?width={bad}")).await.unwrap(),
            StatusCode::BAD_REQUEST,
        )
        .await;
        assert_eq!(body["errors"][0]["parameter"], "width", "{body}");
    }
}
