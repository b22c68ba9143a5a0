//! The overview page in headless Chromium (Debian package `chromium`, installed by
//! `.ci/run` when missing): with snapshots loaded, the page renders the term-structure
//! and parameter-history charts as inline SVG with drawn paths, shows the fit and the
//! quality warnings, and logs no script errors. A screenshot is written to
//! `target/overview.png` for people to look at.
//!
//! Without Chromium the test says it skipped, unless `LOGSTRIP_REQUIRE_BROWSER=1`
//! (set by `.ci/run`), when a missing browser fails it.

mod common;

use common::*;
use std::path::PathBuf;
use std::process::Command;
use std::time::Duration;

fn chromium() -> Option<PathBuf> {
    ["/usr/bin/chromium", "/usr/bin/chromium-browser", "/usr/bin/google-chrome"]
        .iter()
        .map(PathBuf::from)
        .find(|p| p.exists())
}

/// Runs headless Chromium on `url` with the flags the machine requires, a fresh
/// profile, and extra arguments; returns (stdout, stderr).
fn run_chromium(browser: &PathBuf, url: &str, extra: &[&str]) -> (String, String) {
    let profile = tempfile::tempdir().expect("profile dir");
    let out = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--no-first-run",
            "--enable-logging=stderr",
            "--v=0",
            "--window-size=1280,1700",
            "--virtual-time-budget=8000",
            "--run-all-compositor-stages-before-draw",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .args(extra)
        .arg(url)
        .output()
        .expect("chromium runs");
    (String::from_utf8_lossy(&out.stdout).into_owned(), String::from_utf8_lossy(&out.stderr).into_owned())
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn overview_page_renders_charts_without_script_errors() {
    let Some(browser) = chromium() else {
        assert!(
            std::env::var("LOGSTRIP_REQUIRE_BROWSER").as_deref() != Ok("1"),
            "Chromium is required here (LOGSTRIP_REQUIRE_BROWSER=1) but not installed"
        );
        eprintln!("overview_page_renders_charts_without_script_errors: skipped: chromium is not installed");
        return;
    };
    let server = start_sqlite(open_settings()).await;
    for minutes in [40, 30, 20] {
        let response = post_json(&server, "/v1/snapshots", demo_snapshot_at(minutes).to_string()).await;
        assert_eq!(response.status(), reqwest::StatusCode::CREATED);
    }
    // `?static=1`: drawn once, without the long poll that would keep the headless
    // browser's virtual clock from ever running out.
    let url = server.url("/?static=1");
    let browser_dom = browser.clone();
    let url_dom = url.clone();
    let (dom, log) = tokio::time::timeout(
        Duration::from_secs(120),
        tokio::task::spawn_blocking(move || run_chromium(&browser_dom, &url_dom, &["--dump-dom"])),
    )
    .await
    .expect("chromium finishes within 120 s")
    .expect("join");

    assert!(dom.contains("data-underlying=\"KESTREL50\""), "the underlying has a card:\n{dom}");
    let term = dom.split("class=\"chart term\"").nth(1).expect("term chart container");
    assert!(term.contains("<svg") && term.contains("<polyline"), "term-structure chart drawn with paths");
    assert!(term.contains("gamma − variance (vol points)") && term.contains(">expiry<"), "labelled axes");
    let param = dom.split("class=\"chart param\"").nth(1).expect("history chart container");
    assert!(param.contains("<svg") && param.contains("<polyline"), "parameter history drawn with paths");
    assert!(dom.contains("rough_heston") && dom.contains("hurst"), "fit parameters shown");
    assert!(dom.contains("data quality"), "quality section shown");
    assert!(dom.contains("levels by expiry") && dom.contains("± 2 se"), "levels with standard errors shown");
    assert!(dom.matches("<td class=\"num\">± ").count() >= 30, "a standard error on every expiry of the demo day");
    assert!(dom.contains("flagged quotes"), "flagged quotes section shown");
    // The page's clock is UTC in ISO 8601 like every other time on it ("updated 2026-12-05T18:40:12Z").
    let status = dom.split("id=\"status\"").nth(1).unwrap_or("");
    let status = status.split('<').next().unwrap_or("").trim();
    let clock = status.strip_prefix(">updated ").unwrap_or("");
    assert!(chrono::DateTime::parse_from_rfc3339(clock).is_ok() && clock.ends_with('Z'), "status in UTC: {status}");
    page_numbers_are_the_reports(&server, &dom).await;
    for marker in ["Uncaught", "SyntaxError", "TypeError", "ReferenceError", ":ERROR:CONSOLE"] {
        assert!(!log.contains(marker), "script error in the browser log ({marker}):\n{log}");
    }

    let shot = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target").join("overview.png");
    let shot_arg = format!("--screenshot={}", shot.display());
    let (_, _) = tokio::task::spawn_blocking(move || run_chromium(&browser, &url, &[&shot_arg])).await.expect("join");
    let png = std::fs::read(&shot).expect("screenshot written");
    assert!(png.starts_with(b"\x89PNG") && png.len() > 20_000, "a real screenshot ({} bytes)", png.len());
}

/// The side panel's figures are the stored analysis's, rounded for reading: each
/// expiry's variance-swap vol, two standard errors, at-the-money vol and 25-delta skew
/// in vol points to 2 decimals, each
/// fit parameter to 4 decimals (or 3 significant digits in exponent form below 1e-3),
/// and no number carries float noise (7 or more decimals, `-0.0014000000000000054`).
async fn page_numbers_are_the_reports(server: &TestServer, dom: &str) {
    let latest: serde_json::Value = server
        .client
        .get(server.url("/v1/underlyings/KESTREL50/latest"))
        .send()
        .await
        .expect("latest")
        .json()
        .await
        .expect("JSON");
    let side =
        dom.split("class=\"side\"").nth(1).expect("side panel").split("class=\"smile-view\"").next().unwrap_or("");
    let curve = latest["curve"].as_array().expect("curve");
    assert!(curve.len() >= 10, "the demo day has its expiries");
    for point in curve {
        let vol = point["variance_swap_vol"].as_f64().expect("variance_swap_vol");
        let se = point["variance_swap_se"].as_f64().expect("variance_swap_se");
        let atm = point["atm_vol"].as_f64().expect("atm_vol");
        let skew = point["skew_25_delta"].as_f64().expect("skew_25_delta");
        // Two se of the vol in vol points: d(sqrt v) = dv / (2 sqrt v), so 2 se / (2 vol).
        let row = format!(
            "<td class=\"num\">{:.2}</td><td class=\"num\">{:.2}</td><td class=\"num\">{:.2}</td><td class=\"num\">± {:.2}</td>",
            100.0 * atm,
            100.0 * skew,
            100.0 * vol,
            100.0 * se / vol,
        );
        assert!(side.contains(&row), "the page shows {row} for tau {}:\n{side}", point["tau"]);
    }
    let params = latest["fit"]["params"].as_object().expect("fit params");
    assert!(!params.is_empty());
    for (name, value) in params {
        let value = value.as_f64().expect("a number");
        let shown = if value != 0.0 && (value.abs() < 1e-3 || value.abs() >= 1e4) {
            format!("{value:.2e}")
        } else {
            format!("{value:.4}")
        };
        let words = match name.as_str() {
            "hurst" => "Hurst exponent H",
            "rho_nu" => "spot-vol correlation × vol of vol (ρν)",
            "mean_reversion" => "mean reversion κ",
            other => other,
        };
        let row = format!("<th>{words}</th><td>{shown}</td>");
        assert!(side.contains(&row), "the page shows {row}:\n{side}");
    }
    let longest_decimals = side
        .split(|c: char| !(c.is_ascii_digit() || c == '.'))
        .filter_map(|token| token.split_once('.').map(|(_, decimals)| decimals.len()))
        .max()
        .unwrap_or(0);
    assert!(longest_decimals <= 6, "a number with {longest_decimals} decimals on the page:\n{side}");
}
