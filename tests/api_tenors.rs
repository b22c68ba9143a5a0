//! The standard tenors through the service: each history row carries the tenor figures
//! of its snapshot with the changes since the previous snapshot and since the first of
//! its UTC day (also across pages), the tenor CSV, the tenor chart through time with a
//! link on every point, and any stored snapshot by id (its chart and the page).

mod common;

use common::*;
use serde_json::Value;

/// A snapshot of the invented demo day (demo-data/day) at `time` (`HHMM`), moved to
/// `as_of` when given.
fn day_snapshot(time: &str, as_of: Option<&str>) -> Value {
    let path = format!("{}/demo-data/day/kestrel50-2026-11-30T{time}.json", env!("CARGO_MANIFEST_DIR"));
    let mut doc: Value = serde_json::from_str(&std::fs::read_to_string(path).expect("demo day file")).expect("JSON");
    if let Some(as_of) = as_of {
        doc["as_of"] = Value::from(as_of);
    }
    doc
}

async fn get_text(server: &TestServer, path: &str) -> (reqwest::StatusCode, String, String) {
    let response = server.client.get(server.url(path)).send().await.expect("request");
    let status = response.status();
    let media = response.headers().get("content-type").and_then(|v| v.to_str().ok()).unwrap_or("").to_string();
    (status, media, response.text().await.expect("body"))
}

/// Posts the four snapshots of the tests: one the evening before, then 09:30, 09:40
/// and 09:50 of the demo day. Returns their ids in time order.
async fn post_four(server: &TestServer) -> Vec<i64> {
    let docs = [
        day_snapshot("1540", Some("2026-11-29T15:40:00Z")),
        day_snapshot("0930", None),
        day_snapshot("0940", None),
        day_snapshot("0950", None),
    ];
    let mut ids = Vec::new();
    for doc in docs {
        let response = post_json(server, "/v1/snapshots", doc.to_string()).await;
        assert_eq!(response.status(), reqwest::StatusCode::CREATED);
        let body: Value = response.json().await.expect("JSON");
        ids.push(body["id"].as_i64().expect("id"));
    }
    ids
}

/// The variance-swap vol at `tau` from a stored curve, by the closed form of total
/// variance linear in `tau` between the bracketing expiries (MATH.md section 4),
/// written out here independently of the service.
fn variance_swap_vol_by_hand(curve: &[Value], tau: f64) -> f64 {
    let point = |p: &Value| (p["tau"].as_f64().expect("tau"), p["variance_swap"].as_f64().expect("vs"));
    let after = curve.iter().map(point).position(|(t, _)| t >= tau).expect("tenor within the expiries");
    let (t1, v1) = point(&curve[after]);
    let (t0, w0) = if after == 0 {
        (0.0, 0.0)
    } else {
        let (t0, v0) = point(&curve[after - 1]);
        (t0, t0 * v0)
    };
    let total = w0 + (t1 * v1 - w0) * (tau - t0) / (t1 - t0);
    (total / tau).sqrt()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn history_rows_carry_tenors_with_changes_since_previous_and_first_of_day() {
    let server = start_sqlite(open_settings()).await;
    let ids = post_four(&server).await;
    let history = server.get_json("/v1/underlyings/KESTREL50/history").await;
    let items = history["items"].as_array().expect("items");
    assert_eq!(items.len(), 4);
    for (item, id) in items.iter().zip(&ids) {
        assert_eq!(item["id"].as_i64(), Some(*id));
        let tenors = item["tenors"].as_array().expect("tenors");
        let names: Vec<&str> = tenors.iter().map(|t| t["tenor"].as_str().expect("name")).collect();
        assert_eq!(names, ["1M", "3M", "6M", "1Y", "2Y"]);
        // The history's figures are the stored analysis's (read back from JSON text,
        // which serde_json parses to within an ulp or two, hence the tolerance).
        let stored = server.get_json(&format!("/v1/snapshots/{id}")).await;
        let curve = stored["curve"].as_array().expect("curve");
        for (tenor, reported) in tenors.iter().zip(stored["tenors"].as_array().expect("analysis tenors")) {
            for field in ["variance_swap_vol", "atm_vol", "skew_25_delta", "forward_vol", "leverage_swap"] {
                let (got, want) = (tenor[field].as_f64().expect("figure"), reported[field].as_f64().expect("figure"));
                assert!((got - want).abs() < 1e-15, "{field} of {}: {got} vs {want}", tenor["tenor"]);
            }
            // And the closed form of linear total variance (tolerance: a few roundings).
            let tau = tenor["tau"].as_f64().expect("tau");
            let by_hand = variance_swap_vol_by_hand(curve, tau);
            let got = tenor["variance_swap_vol"].as_f64().expect("vol");
            assert!((got - by_hand).abs() < 1e-13, "{}: {got} vs {by_hand}", tenor["tenor"]);
            assert_eq!(tenor["basis"], "interpolated", "the demo day spans one week to three years");
        }
    }
    // References: the evening before has no previous and is its own first of the day;
    // 09:30 opens the next day; 09:40 and 09:50 measure from 09:30 and their predecessor.
    let refs: Vec<(Option<i64>, Option<i64>)> =
        items.iter().map(|i| (i["previous_id"].as_i64(), i["first_of_day_id"].as_i64())).collect();
    assert_eq!(
        refs,
        vec![
            (None, Some(ids[0])),
            (Some(ids[0]), Some(ids[1])),
            (Some(ids[1]), Some(ids[1])),
            (Some(ids[2]), Some(ids[1]))
        ]
    );
    let figure = |i: usize, k: usize, field: &str| items[i]["tenors"][k][field].as_f64().expect("figure");
    for k in 0..5 {
        for field in ["variance_swap_vol", "atm_vol", "skew_25_delta", "leverage_swap"] {
            let since_previous = items[3]["tenors"][k]["change_since_previous"][field].as_f64().expect("change");
            let expected = figure(3, k, field) - figure(2, k, field);
            assert!((since_previous - expected).abs() < 1e-15, "{field}: {since_previous} vs {expected}");
            let since_open = items[3]["tenors"][k]["change_since_first_of_day"][field].as_f64().expect("change");
            let expected = figure(3, k, field) - figure(1, k, field);
            assert!((since_open - expected).abs() < 1e-15, "{field}: {since_open} vs {expected}");
            assert_eq!(items[1]["tenors"][k]["change_since_first_of_day"][field].as_f64(), Some(0.0));
        }
        assert!(items[0]["tenors"][k].get("change_since_previous").is_none(), "nothing before the first");
    }
    // One row a page: the references come from the store, with the same changes.
    let mut cursor = String::new();
    for (position, item) in items.iter().enumerate() {
        let page = server.get_json(&format!("/v1/underlyings/KESTREL50/history?limit=1{cursor}")).await;
        let row = &page["items"][0];
        assert_eq!(row["id"], item["id"]);
        assert_eq!(
            (&row["previous_id"], &row["first_of_day_id"], &row["tenors"]),
            (&item["previous_id"], &item["first_of_day_id"], &item["tenors"]),
            "row {position} alone on its page"
        );
        cursor = page["next_cursor"].as_str().map(|c| format!("&cursor={c}")).unwrap_or_default();
    }
    // A window starting mid-day still measures from the day's first snapshot.
    let window = server.get_json("/v1/underlyings/KESTREL50/history?from=2026-11-30T09:45:00Z").await;
    assert_eq!(window["items"][0]["first_of_day_id"].as_i64(), Some(ids[1]));
    assert_eq!(window["items"][0]["previous_id"].as_i64(), Some(ids[2]));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn tenor_csv_has_one_row_per_snapshot_and_tenor_in_vol_points() {
    let server = start_sqlite(open_settings()).await;
    let ids = post_four(&server).await;
    let history = server.get_json("/v1/underlyings/KESTREL50/history").await;
    let (status, media, text) = get_text(&server, "/v1/underlyings/KESTREL50/history?format=csv&rows=tenors").await;
    assert_eq!(status, reqwest::StatusCode::OK);
    assert!(media.starts_with("text/csv"), "{media}");
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let header: Vec<String> = reader.headers().expect("header").iter().map(String::from).collect();
    assert_eq!(header, logstrip::api::tenor_history::TENOR_CSV_HEADER.to_vec());
    let column = |name: &str| header.iter().position(|h| h == name).expect("column");
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("record")).collect();
    assert_eq!(rows.len(), 4 * 5, "five tenors per snapshot");
    for (n, row) in rows.iter().enumerate() {
        let (i, k) = (n / 5, n % 5);
        let tenor = &history["items"][i]["tenors"][k];
        assert_eq!(row[column("snapshot_id")].parse::<i64>().ok(), Some(ids[i]));
        assert_eq!(&row[column("tenor")], tenor["tenor"].as_str().expect("name"));
        for field in ["variance_swap_vol", "atm_vol", "skew_25_delta", "forward_vol", "gamma_minus_variance_vol"] {
            let shown = &row[column(&format!("{field}_pts"))];
            let expected = format!("{:.3}", 100.0 * tenor[field].as_f64().expect("figure"));
            let expected = if expected == "-0.000" { "0.000".to_string() } else { expected };
            assert_eq!(shown, expected, "{field}");
            let decimals = shown.split_once('.').map_or(0, |(_, d)| d.len());
            assert_eq!(decimals, 3, "vol points to 3 decimals: {shown}");
        }
        let change = &row[column("variance_swap_vol_pts_change_since_first_of_day")];
        if i == 2 {
            let expected = 100.0 * tenor["change_since_first_of_day"]["variance_swap_vol"].as_f64().expect("change");
            let shown: f64 = change.parse().expect("a number");
            assert!((shown - expected).abs() <= 0.0005 + 1e-12, "{shown} vs {expected}");
        }
        assert_eq!(row[column("previous_id")].is_empty(), i == 0);
    }
    let (status, media, text) = get_text(&server, "/v1/underlyings/KESTREL50/history?format=csv&rows=strikes").await;
    assert_eq!(status, reqwest::StatusCode::BAD_REQUEST);
    assert!(media.starts_with("application/problem+json") && text.contains("rows"), "{text}");
}

/// Whether `svg` is well-formed XML as far as elements go: every tag closed in order
/// (self-closing, comments, declarations and text skipped), with one `<svg>` root.
fn well_formed_svg(svg: &str) -> bool {
    let mut open: Vec<String> = Vec::new();
    let mut rest = svg.trim();
    if !rest.starts_with("<svg") {
        return false;
    }
    while let Some(start) = rest.find('<') {
        let Some(end) = rest[start..].find('>') else { return false };
        let tag = &rest[start + 1..start + end];
        rest = &rest[start + end + 1..];
        if tag.starts_with('?') || tag.starts_with('!') || tag.ends_with('/') {
            continue;
        }
        let name: String = tag.trim_start_matches('/').chars().take_while(|c| !c.is_whitespace()).collect();
        if tag.starts_with('/') {
            if open.pop().as_deref() != Some(name.as_str()) {
                return false;
            }
        } else {
            open.push(name);
        }
    }
    open.is_empty() && rest.trim().is_empty()
}

#[test]
fn the_well_formedness_check_finds_broken_svg() {
    assert!(well_formed_svg("<svg a=\"1\"><g><a href=\"/\"><circle/></a></g><text>x</text></svg>\n"));
    assert!(!well_formed_svg("<svg><g></svg>"));
    assert!(!well_formed_svg("<svg><a></g></svg>"));
    assert!(!well_formed_svg("<div></div>"));
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn tenor_chart_and_snapshot_chart_link_points_to_their_snapshots() {
    let server = start_sqlite(open_settings()).await;
    let ids = post_four(&server).await;
    let (status, media, svg) = get_text(&server, "/v1/underlyings/KESTREL50/history/tenors.svg?tenors=1M,1Y").await;
    assert_eq!(status, reqwest::StatusCode::OK);
    assert_eq!(media, "image/svg+xml");
    assert!(well_formed_svg(&svg), "well-formed SVG:\n{svg}");
    assert!(svg.contains("variance swap vol (vol points)") && svg.contains(">1M</text>") && svg.contains(">1Y</text>"));
    for id in &ids {
        let link = format!("<a href=\"/?snapshot={id}\">");
        assert_eq!(svg.matches(&link).count(), 2, "a linked point per tenor for snapshot {id}");
    }
    // A day's range, another figure.
    let (status, _, day) = get_text(
        &server,
        "/v1/underlyings/KESTREL50/history/tenors.svg?figure=skew_25_delta&from=2026-11-30T00:00:00Z&to=2026-12-01T00:00:00Z",
    )
    .await;
    assert_eq!(status, reqwest::StatusCode::OK);
    assert!(well_formed_svg(&day) && day.contains("25-delta skew"));
    assert_eq!(day.matches("<a href=").count(), 3 * 5, "three snapshots on the day, five tenors");
    assert!(!day.contains(&format!("snapshot={}\"", ids[0])), "the evening before is outside the range");
    for (query, parameter) in [("figure=vega", "figure"), ("tenors=5Y", "tenors"), ("from=yesterday", "from")] {
        let (status, media, text) =
            get_text(&server, &format!("/v1/underlyings/KESTREL50/history/tenors.svg?{query}")).await;
        assert_eq!(status, reqwest::StatusCode::BAD_REQUEST, "{query}");
        assert!(media.starts_with("application/problem+json") && text.contains(parameter), "{text}");
    }
    let (status, _, _) = get_text(&server, "/v1/underlyings/NOBODY/history/tenors.svg").await;
    assert_eq!(status, reqwest::StatusCode::NOT_FOUND);
    // The fit-parameter chart links its points too.
    let (status, _, hurst) = get_text(&server, "/v1/underlyings/KESTREL50/history/chart.svg?param=hurst").await;
    assert_eq!(status, reqwest::StatusCode::OK);
    assert!(well_formed_svg(&hurst));
    assert!(ids.iter().all(|id| hurst.contains(&format!("<a href=\"/?snapshot={id}\">"))), "{hurst}");
    // Any stored snapshot's term-structure chart, by id.
    let (status, media, chart) = get_text(&server, &format!("/v1/snapshots/{}/chart.svg", ids[1])).await;
    assert_eq!((status, media.as_str()), (reqwest::StatusCode::OK, "image/svg+xml"));
    assert!(chart.contains(&format!("(snapshot {})", ids[1])) && chart.contains("2026-11-30T09:30:00Z"));
    assert!(chart.contains("<polyline"));
    for missing in ["999999", "abc"] {
        let (status, media, _) = get_text(&server, &format!("/v1/snapshots/{missing}/chart.svg")).await;
        assert_eq!(status, reqwest::StatusCode::NOT_FOUND, "{missing}");
        assert!(media.starts_with("application/problem+json"));
    }
    // The overview page is one page: a snapshot id is read by its script.
    let (status, _, page) = get_text(&server, &format!("/?snapshot={}", ids[1])).await;
    assert_eq!(status, reqwest::StatusCode::OK);
    assert!(page.contains("SNAPSHOT_ID") && page.contains("/chart.svg"));
}

/// Changes are measured from current revisions: after a correction of 09:30, the 09:40
/// row measures from the correction, and the superseded 09:30 row (listed with
/// `revisions=all`) measures its day from the correction too.
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn changes_are_measured_from_current_revisions() {
    let server = start_sqlite(open_settings()).await;
    let mut ids = Vec::new();
    let mut corrected = day_snapshot("0930", None);
    corrected["spot"] = Value::from(corrected["spot"].as_f64().expect("spot") + 0.5);
    for doc in [day_snapshot("0930", None), day_snapshot("0940", None), corrected] {
        let response = post_json(&server, "/v1/snapshots", doc.to_string()).await;
        assert_eq!(response.status(), reqwest::StatusCode::CREATED);
        ids.push(response.json::<Value>().await.expect("JSON")["id"].as_i64().expect("id"));
    }
    let (first, later, correction) = (ids[0], ids[1], ids[2]);
    let current = server.get_json("/v1/underlyings/KESTREL50/history").await;
    let refs = |page: &Value| -> Vec<(i64, Option<i64>, Option<i64>)> {
        page["items"]
            .as_array()
            .expect("items")
            .iter()
            .map(|i| (i["id"].as_i64().expect("id"), i["previous_id"].as_i64(), i["first_of_day_id"].as_i64()))
            .collect()
    };
    assert_eq!(refs(&current), vec![(correction, None, Some(correction)), (later, Some(correction), Some(correction))]);
    let all = server.get_json("/v1/underlyings/KESTREL50/history?revisions=all").await;
    assert_eq!(
        refs(&all),
        vec![
            (first, None, Some(correction)),
            (correction, None, Some(correction)),
            (later, Some(correction), Some(correction))
        ]
    );
}
