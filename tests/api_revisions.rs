//! Corrections as revisions, end to end through a real server: three versions of one
//! `as_of` and a repeat. The newest revision is what `latest`, the history (JSON and
//! CSV), the charts and the list of underlyings show; `revisions=all` and the ids
//! still give the older ones; ids do not skip. On SQLite always, on PostgreSQL when
//! `LOGSTRIP_TEST_POSTGRES_URL` is set.

mod common;

use common::*;
use logstrip::store::AnyStore;
use reqwest::StatusCode;
use serde_json::{json, Value};

/// The demo snapshot with every quoted vol (and its bid and ask) scaled: a correction
/// of the same underlying and `as_of` with other content and another fit.
fn corrected(factor: f64) -> Value {
    let mut doc = demo_snapshot();
    for slice in doc["slices"].as_array_mut().expect("slices") {
        for point in slice["points"].as_array_mut().expect("points") {
            for key in ["vol", "bid", "ask"] {
                if let Some(x) = point.get(key).and_then(Value::as_f64) {
                    point[key] = json!(x * factor);
                }
            }
        }
    }
    doc
}

async fn get(server: &TestServer, path: &str) -> reqwest::Response {
    server.client.get(server.url(path)).send().await.expect("request")
}

/// Posts a snapshot; returns the status and the body.
async fn post(server: &TestServer, body: String) -> (StatusCode, Value) {
    let response = post_json(server, "/v1/snapshots", body).await;
    (response.status(), response.json().await.expect("JSON"))
}

fn ids(page: &Value) -> Vec<i64> {
    page["items"].as_array().expect("items").iter().map(|i| i["id"].as_i64().expect("id")).collect()
}

/// The CSV history at `path`: (snapshot_id, revision, superseded_by) of each snapshot,
/// in the order they come, and the number of rows.
async fn csv_snapshots(server: &TestServer, path: &str) -> (Vec<(String, String, String)>, usize) {
    let response = get(server, path).await;
    assert_eq!(response.status(), StatusCode::OK);
    let text = response.text().await.expect("CSV");
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let header = reader.headers().expect("header").clone();
    let column = |name: &str| header.iter().position(|h| h == name).expect("a column of that name");
    let (id, revision, superseded_by) = (column("snapshot_id"), column("revision"), column("superseded_by"));
    let rows: Vec<csv::StringRecord> = reader.records().map(|r| r.expect("row")).collect();
    let mut snapshots: Vec<(String, String, String)> = Vec::new();
    for row in &rows {
        let key = (row[id].to_string(), row[revision].to_string(), row[superseded_by].to_string());
        if snapshots.last() != Some(&key) {
            snapshots.push(key);
        }
    }
    (snapshots, rows.len())
}

async fn corrections_are_revisions(server: &TestServer) {
    let earlier = post(server, demo_snapshot_at(60).to_string()).await;
    assert_eq!(earlier.0, StatusCode::CREATED);
    let earlier_id = earlier.1["id"].as_i64().expect("id");

    // Three versions of one as_of.
    let mut versions = Vec::new();
    for (n, factor) in [1.0, 1.02, 0.97].into_iter().enumerate() {
        let (status, body) = post(server, corrected(factor).to_string()).await;
        assert_eq!(status, StatusCode::CREATED, "version {n}: {body}");
        versions.push(body);
    }
    let id = |n: usize| versions[n]["id"].as_i64().expect("id");
    assert_eq!((id(0), id(1), id(2)), (earlier_id + 1, earlier_id + 2, earlier_id + 3));
    assert_eq!(versions[0]["revision"], 1);
    assert!(versions[0].get("supersedes").is_none());
    for n in 1..3 {
        assert_eq!(versions[n]["revision"], n + 1);
        assert_eq!(versions[n]["supersedes"], id(n - 1), "the response says which revision it replaced");
        assert!(versions[n].get("superseded_by").is_none());
    }
    assert_ne!(versions[1]["fit"]["params"]["hurst"], versions[2]["fit"]["params"]["hurst"], "the fits differ");

    // A repeat of the second version (other key order): the same revision, no new row,
    // and it says it has been superseded.
    let (status, repeat) = post(server, reordered_text(&corrected(1.02))).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!((repeat["id"].as_i64(), repeat["revision"].as_i64()), (Some(id(1)), Some(2)));
    assert_eq!(repeat["superseded_by"], id(2));
    assert_eq!(repeat["stored_at"], versions[1]["stored_at"]);

    // The next new snapshot takes the next id: the repeat used none up.
    let (status, after) = post(server, demo_snapshot_at(30).to_string()).await;
    assert_eq!(status, StatusCode::CREATED);
    assert_eq!(after["id"], id(2) + 1, "ids do not skip on a duplicate post");
    let after_id = id(2) + 1;

    // latest: the newest revision of the latest as_of.
    let latest = get(server, "/v1/underlyings/KESTREL50/latest").await;
    assert_eq!(latest.headers()["etag"], format!("\"{}\"", id(2)).as_str());
    let latest: Value = latest.json().await.expect("JSON");
    assert_eq!((latest["id"].as_i64(), latest["revision"].as_i64()), (Some(id(2)), Some(3)));
    assert_eq!(latest["fit"], versions[2]["fit"]);

    // Older revisions stay readable by id, and say what replaced them.
    let first = server.get_json(&format!("/v1/snapshots/{}?include=input", id(0))).await;
    assert_eq!((first["revision"].as_i64(), first["superseded_by"].as_i64()), (Some(1), Some(id(1))));
    assert_eq!(first["input"], corrected(1.0));

    // History: one item per as_of by default, every revision with revisions=all.
    let history = server.get_json("/v1/underlyings/KESTREL50/history").await;
    assert_eq!(ids(&history), vec![earlier_id, after_id, id(2)]);
    let items = history["items"].as_array().expect("items");
    assert_eq!(items.iter().map(|i| i["revision"].as_i64().expect("revision")).collect::<Vec<_>>(), vec![1, 1, 3]);
    assert!(items.iter().all(|i| i.get("superseded_by").is_none()));
    assert_eq!(items[2]["fit"]["hurst"], versions[2]["fit"]["params"]["hurst"]);
    let current = server.get_json("/v1/underlyings/KESTREL50/history?revisions=current").await;
    assert_eq!(ids(&current), ids(&history));
    let all = server.get_json("/v1/underlyings/KESTREL50/history?revisions=all").await;
    assert_eq!(ids(&all), vec![earlier_id, after_id, id(0), id(1), id(2)]);
    let standing: Vec<(i64, Option<i64>)> = all["items"]
        .as_array()
        .expect("items")
        .iter()
        .map(|i| (i["revision"].as_i64().expect("revision"), i["superseded_by"].as_i64()))
        .collect();
    assert_eq!(standing, vec![(1, None), (1, None), (1, Some(id(1))), (2, Some(id(2))), (3, None)]);

    // Paging every revision keeps the choice in the next link.
    let page = get(server, "/v1/underlyings/KESTREL50/history?revisions=all&limit=3").await;
    let link = page.headers()["link"].to_str().expect("link").to_string();
    assert!(link.contains("revisions=all"), "{link}");
    let page: Value = page.json().await.expect("JSON");
    let cursor = page["next_cursor"].as_str().expect("cursor");
    let rest =
        server.get_json(&format!("/v1/underlyings/KESTREL50/history?revisions=all&limit=3&cursor={cursor}")).await;
    assert_eq!(ids(&rest), vec![id(1), id(2)]);

    // CSV: the same choice, one row per snapshot and expiry.
    let expiries = versions[2]["curve"].as_array().expect("curve").len();
    let (snapshots, rows) = csv_snapshots(server, "/v1/underlyings/KESTREL50/history?format=csv").await;
    let text = |x: i64| x.to_string();
    assert_eq!(
        snapshots,
        vec![
            (text(earlier_id), "1".into(), String::new()),
            (text(after_id), "1".into(), String::new()),
            (text(id(2)), "3".into(), String::new()),
        ]
    );
    assert_eq!(rows, 3 * expiries);
    let (snapshots, rows) = csv_snapshots(server, "/v1/underlyings/KESTREL50/history?format=csv&revisions=all").await;
    assert_eq!(
        snapshots.iter().map(|(i, r, s)| (i.as_str(), r.as_str(), s.as_str())).collect::<Vec<_>>(),
        vec![
            (text(earlier_id).as_str(), "1", ""),
            (text(after_id).as_str(), "1", ""),
            (text(id(0)).as_str(), "1", text(id(1)).as_str()),
            (text(id(1)).as_str(), "2", text(id(2)).as_str()),
            (text(id(2)).as_str(), "3", ""),
        ]
    );
    assert_eq!(rows, 5 * expiries);

    // Charts: one point per as_of in the parameter history; the latest chart draws the
    // newest revision.
    let chart = get(server, "/v1/underlyings/KESTREL50/history/chart.svg?param=hurst").await;
    assert_eq!(chart.status(), StatusCode::OK);
    let svg = chart.text().await.expect("SVG");
    assert!(svg.contains("(3 snapshots)"), "title counts valuation times");
    assert_eq!(svg.matches("<circle").count(), 3, "one point per as_of");
    let chart = get(server, "/v1/underlyings/KESTREL50/latest/chart.svg").await;
    assert_eq!(chart.headers()["etag"], format!("\"{}\"", id(2)).as_str());
    assert!(chart.text().await.expect("SVG").contains(&format!("(snapshot {})", id(2))));

    // The list of underlyings counts valuation times and the superseded revisions.
    let list = server.get_json("/v1/underlyings").await;
    assert_eq!(list["underlyings"][0]["snapshots"], 3);
    assert_eq!(list["underlyings"][0]["superseded"], 2);

    let bad = get(server, "/v1/underlyings/KESTREL50/history?revisions=newest").await;
    assert_eq!(bad.status(), StatusCode::BAD_REQUEST);
    let bad: Value = bad.json().await.expect("problem");
    assert_eq!(bad["errors"][0]["parameter"], "revisions");
}

#[tokio::test]
async fn corrections_are_revisions_on_sqlite() {
    let mut server = start_sqlite(open_settings()).await;
    corrections_are_revisions(&server).await;
    server.shutdown().await;
}

#[tokio::test]
async fn corrections_are_revisions_on_postgres() {
    let Some(admin) = postgres_url("corrections_are_revisions_on_postgres") else { return };
    let db = TempDatabase::create(&admin).await;
    let store = AnyStore::open(&db.url).await.expect("open");
    let mut server = start_with_store(store, open_settings(), None).await;
    corrections_are_revisions(&server).await;
    server.shutdown().await;
    db.drop_now().await;
}
