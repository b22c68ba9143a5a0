//! The `logstrip` binary end to end: exit codes, JSON output, one line per input problem.

use std::io::Write;
use std::process::{Command, Output, Stdio};

fn logstrip(args: &[&str], stdin: Option<&str>) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary starts");
    if let Some(text) = stdin {
        child.stdin.take().expect("stdin").write_all(text.as_bytes()).expect("write stdin");
    } else {
        drop(child.stdin.take());
    }
    child.wait_with_output().expect("binary finishes")
}

#[test]
fn analyze_demo_snapshot() {
    let out = logstrip(&["analyze", "--input", "demo-data/kestrel50-snapshot.json"], None);
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON on stdout");
    let curve = doc["curve"].as_array().expect("curve");
    assert_eq!(curve.len(), 35);
    let taus: Vec<f64> = curve.iter().map(|c| c["tau"].as_f64().expect("tau")).collect();
    assert!(taus.windows(2).all(|w| w[0] < w[1]), "curve sorted by tau");
    for c in curve {
        for field in
            ["variance_swap", "variance_swap_vol", "gamma_swap", "gamma_swap_vol", "leverage_swap", "forward_variance"]
        {
            assert!(c[field].is_number(), "{field} missing in {c}");
        }
        let (vs, gs, ls) = (c["variance_swap"].as_f64(), c["gamma_swap"].as_f64(), c["leverage_swap"].as_f64());
        let (vs, gs, ls) = (vs.expect("vs"), gs.expect("gs"), ls.expect("ls"));
        // leverage = gamma - variance to rounding (integrated separately; 1e-12 relative asked).
        assert!((gs - vs - ls).abs() < 1e-11 * vs, "LS {ls} vs GS-VS {}", gs - vs);
        for field in ["points", "wing_share", "smile_rmse_vol", "butterfly_ok", "calendar_ok", "warnings"] {
            assert!(!c["quality"][field].is_null(), "quality.{field} missing");
        }
    }
    let fit = &doc["fit"];
    assert_eq!(fit["model"], "rough_heston");
    for field in ["hurst", "rho_nu", "mean_reversion"] {
        assert!(fit["params"][field].is_number(), "params.{field}");
    }
    assert!(["converged", "at_bound", "max_iterations", "failed"].contains(&fit["status"].as_str().expect("status")));
    assert_eq!(fit["model_leverage_swap"].as_array().expect("model LS").len(), 35);
    // The demo carries one off-market quote; it is reported, not silently dropped.
    let warned = curve.iter().any(|c| {
        c["quality"]["warnings"]
            .as_array()
            .expect("warnings")
            .iter()
            .any(|w| w.as_str().unwrap_or("").contains("off-market"))
    });
    assert!(warned, "the off-market demo quote was not reported");
}

#[test]
fn fit_demo_swaps() {
    let out = logstrip(&["fit", "--input", "demo-data/kestrel50-swaps.json"], None);
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(doc["curve"].as_array().expect("curve").len(), 5);
    assert!(doc["fit"]["convexity"].as_array().is_some(), "nu given: convexity expected");
}

#[test]
fn bad_input_exits_2_with_one_line_per_problem() {
    let text = r#"{"underlying":"KESTREL50","as_of":"2026-11-30T15:30:00Z","slices":[
        {"tau":0.5,"forward":100,"points":[{"strike":90,"vol":0.2},{"strike":100,"vol":0.2},{"strike":110,"vol":0.2}]},
        {"tau":-1,"forward":100,"points":[{"strike":90,"vol":0.2},{"strike":100,"vol":0.2},{"strike":110,"vol":0.2}]},
        {"tau":1,"forward":100,"points":[{"strike":90,"vol":0.2},{"strike":100,"vol":0.2}]},
        {"tau":2,"forward":100,"points":[{"strike":90,"vol":0.2},{"strike":100,"vol":0.2},{"strike":95,"vol":0.2},{"strike":120,"vol":0.2},{"strike":130,"vol":0.2},{"strike":140,"vol":0.2},{"strike":150,"vol":0.2},{"strike":160,"vol":-0.2}]},
        {"tau":0.5,"forward":100,"points":[{"strike":90,"vol":0.2},{"strike":100,"vol":0.2},{"strike":110,"vol":0.2}]}
    ]}"#;
    let out = logstrip(&["analyze", "--input", "-"], Some(text));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    let lines: Vec<&str> = stderr.lines().collect();
    for expected in [
        "slices[1].tau: must be positive, got -1",
        "slices[2].points: needs at least 3 usable quotes, got 2",
        "slices[3].points[2].strike: strikes must be increasing, 95 follows 100",
        "slices[3].points[7].vol: must be positive, got -0.2",
        "slices[4].tau: same expiry as slices[0]",
    ] {
        assert!(lines.contains(&expected), "missing line {expected:?} in:\n{stderr}");
    }
    assert_eq!(lines.len(), 5, "{stderr}");
}

#[test]
fn vols_typed_in_percent_exit_2_saying_vols_are_decimals() {
    let text = r#"{"underlying":"KESTREL50","as_of":"2026-11-30T15:30:00Z","slices":[
        {"tau":0.5,"forward":100,"points":[{"strike":90,"vol":22},{"strike":100,"vol":20},{"strike":110,"vol":19}]}]}"#;
    let out = logstrip(&["analyze", "--input", "-"], Some(text));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(
        stderr
            .lines()
            .next()
            .is_some_and(|l| l.starts_with("slices[0].points[0].vol: 22 is a vol of 2200%: vols are decimals")),
        "{stderr}"
    );
    assert_eq!(stderr.lines().count(), 3, "{stderr}");
}

#[test]
fn malformed_and_misspelt_input_name_the_problem() {
    let out = logstrip(&["analyze", "--input", "-"], Some("{\"underlying\": \"X\", "));
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("EOF"), "{}", String::from_utf8_lossy(&out.stderr));

    let out = logstrip(&["analyze", "--input", "-"], Some("[\"KESTREL50\", \"2026-11-30T15:30:00Z\"]"));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.starts_with("(document): must be a JSON object"), "{stderr}");

    let typo = r#"{"underlying":"X","as_of":"2026-11-30T15:30:00Z","slices":[{"tau":1,"forwrd":100,"points":[]}]}"#;
    let out = logstrip(&["analyze", "--input", "-"], Some(typo));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.starts_with("slices[0].forwrd: unknown field"), "{stderr}");

    let wrong_type = r#"{"underlying":"X","as_of":"2026-11-30T15:30:00Z","slices":[{"tau":1,"forward":100,"points":[{"strike":1,"vol":"high"}]}]}"#;
    let out = logstrip(&["analyze", "--input", "-"], Some(wrong_type));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.starts_with("slices[0].points[0].vol: invalid type"), "{stderr}");
}

#[test]
fn missing_file_exits_1() {
    let out = logstrip(&["analyze", "--input", "no/such/file.json"], None);
    assert_eq!(out.status.code(), Some(1));
}

#[test]
fn bench_prints_timings() {
    let out = logstrip(&["bench", "--input", "demo-data/kestrel50-snapshot.json", "--runs", "2"], None);
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(doc["runs"], 2);
    let snapshot = &doc["snapshots"][0];
    for key in ["analyze_us", "curve_us", "fit_us"] {
        for stat in ["median", "min", "max"] {
            assert!(snapshot[key][stat].as_f64().is_some_and(|v| v > 0.0), "{key}.{stat}");
        }
    }
    assert_eq!(doc["slowest_fit"]["file"], "demo-data/kestrel50-snapshot.json");
}

/// A slice quoted as discounted call/put mids without a forward: the forward comes
/// from put-call parity and the vols from Black inversion; flat 25% vol in, a flat
/// 25% variance swap out (tolerances: the inversion's 1e-14 and the integration's
/// 1e-12, with margin).
#[test]
fn price_quotes_without_forward_analyse_through_the_binary() {
    use logstrip::analytics::black::otm_price;
    let (forward, discount, tau, vol) = (4260.0_f64, 0.985_f64, 0.5_f64, 0.25_f64);
    let prices: Vec<serde_json::Value> = (0..21)
        .map(|i| {
            let strike = 3400.0 + 85.0 * i as f64;
            let otm = otm_price((strike / forward).ln(), vol * vol * tau) * discount * forward;
            let parity = discount * (forward - strike);
            let (call, put) = if strike < forward { (otm + parity, otm) } else { (otm, otm - parity) };
            serde_json::json!({"strike": strike, "call": call, "put": put})
        })
        .collect();
    let snapshot = serde_json::json!({
        "underlying": "KESTREL50", "as_of": "2026-11-30T15:30:00Z",
        "slices": [{"tau": tau, "discount": discount, "prices": prices}],
        "smile": "monotone", "fit": {"model": "none"}
    });
    let out = logstrip(&["analyze", "--input", "-"], Some(&snapshot.to_string()));
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    let c = &doc["curve"][0];
    let f = c["forward"].as_f64().expect("forward");
    assert!((f - forward).abs() < 1e-8 * forward, "implied forward {f}");
    let vs = c["variance_swap"].as_f64().expect("vs");
    assert!((vs / (vol * vol) - 1.0).abs() < 1e-9, "VS {vs}");
    assert!(doc.get("fit").is_none(), "model none: no fit");
}

#[test]
fn value_the_demo_book() {
    let out = logstrip(
        &["value", "--book", "demo-data/kestrel50-book.json", "--snapshot", "demo-data/kestrel50-snapshot.json"],
        None,
    );
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    let positions = doc["positions"].as_array().expect("positions");
    assert_eq!(positions.len(), 5);
    let total: f64 = positions.iter().filter_map(|p| p["value"].as_f64()).sum();
    let book = doc["totals"]["book"]["value"].as_f64().expect("book value");
    assert!((total - book).abs() <= 1e-9 * book.abs().max(1.0), "{total} vs {book}");
    let matured = positions.iter().find(|p| p["id"] == "VS-2025-118").expect("matured position");
    assert_eq!(matured["status"], "matured");
    // Hand-computed: N_var (RV - K^2) = 2,500 (429 - 400) = 72,500 in vol points, unpaid
    // so undiscounted, and not part of the value total.
    assert!((matured["settlement"].as_f64().expect("settlement") - 72500.0).abs() < 1e-6, "{matured}");
    assert!(matured.get("value").is_none());
    let settled = doc["totals"]["book"]["settlement"].as_f64().expect("settlement total");
    assert!((settled - 72500.0).abs() < 1e-6);
}

#[test]
fn value_with_since_explains_the_change_of_the_demo_day() {
    let out = logstrip(
        &[
            "value",
            "--book",
            "demo-data/kestrel50-book.json",
            "--snapshot",
            "demo-data/day/kestrel50-2026-11-30T1530.json",
            "--since",
            "demo-data/day/kestrel50-2026-11-30T0930.json",
        ],
        None,
    );
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    let book = &doc["explain"]["book"];
    let change = book["change"].as_f64().expect("change");
    let parts: f64 = ["realized_accrual", "time_decay", "spot", "vega", "discounting", "unexplained"]
        .iter()
        .map(|f| book[f].as_f64().expect("part"))
        .sum();
    assert!((parts - change).abs() <= 1e-9 * change.abs().max(1.0), "{parts} vs {change}");
    assert_eq!(doc["explain"]["since_as_of"], "2026-11-30T09:30:00Z");
}

#[test]
fn realized_from_a_csv_of_closes_and_gaps_named_by_line() {
    let out = logstrip(&["realized", "--closes", "demo-data/kestrel50-closes.csv"], None);
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(doc["returns"], 10);
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("gappy.csv");
    std::fs::write(&path, "date,close\n2026-11-02,100\n2026-11-03,\n2026-11-04,101\n").expect("write");
    let out = logstrip(&["realized", "--closes", path.to_str().expect("utf-8")], None);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("line 3, column close: missing close"));
}

#[test]
fn analyze_a_csv_snapshot_with_header_values_from_flags() {
    let dir = tempfile::tempdir().expect("temp dir");
    let path = dir.path().join("quotes.csv");
    let bare: String = logstrip::api::examples::CSV_SNAPSHOT_EXAMPLE
        .lines()
        .map(|l| l.splitn(3, ',').nth(2).unwrap_or("").to_string() + "\n")
        .collect();
    std::fs::write(&path, &bare).expect("write");
    let file = path.to_str().expect("utf-8");
    let out = logstrip(&["analyze", "--input", file, "--underlying", "HERON", "--as-of", "2026-11-30T15:30:00Z"], None);
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    let doc: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(doc["underlying"], "HERON");
    let out = logstrip(&["analyze", "--input", file], None);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("line 1, column underlying"));
}

#[test]
fn a_fixed_rho_nu_beyond_nu_exits_2_naming_the_field() {
    // rho = rho_nu / nu is a correlation: |rho_nu| > nu cannot be met.
    let text = r#"{"underlying":"KESTREL50","as_of":"2026-11-30T15:30:00Z",
        "fit":{"model":"rough_heston","fix":{"rho_nu":-0.6},"nu":0.3},
        "slices":[{"tau":0.5,"forward":100,"points":[{"strike":90,"vol":0.22},{"strike":100,"vol":0.2},{"strike":110,"vol":0.19}]}]}"#;
    let out = logstrip(&["analyze", "--input", "-"], Some(text));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.lines().any(|l| l.starts_with("fit.fix.rho_nu: ") && l.contains("outside [-1, 1]")), "{stderr}");
}

/// A field the document lacks is named in the path, without the parser's position.
#[test]
fn a_missing_field_is_named_in_the_path() {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/kestrel50-snapshot.json"))
        .expect("demo snapshot");
    let demo: serde_json::Value = serde_json::from_str(&text).expect("demo snapshot parses");
    let mut no_as_of = demo.clone();
    no_as_of.as_object_mut().expect("object").remove("as_of");
    let mut no_strike = demo;
    no_strike["slices"][2]["points"][5].as_object_mut().expect("object").remove("strike");
    for (doc, expected) in [(no_as_of, "as_of: is required"), (no_strike, "slices[2].points[5].strike: is required")] {
        let out = logstrip(&["analyze", "--input", "-"], Some(&doc.to_string()));
        assert_eq!(out.status.code(), Some(2));
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(stderr.trim(), expected, "{stderr}");
    }
}

/// CSV problems in our words: a ragged row, and a file without an underlying or a
/// valuation time naming the flags that supply them.
#[test]
fn csv_problems_name_the_row_and_the_flags() {
    let ragged = "as_of,expiry,strike,vol,forward\n2026-11-30T15:30:00Z,2027-03-19T16:00:00Z,4000,0.21,4210\n2026-11-30T15:30:00Z,2027-03-19T16:00:00Z,4200,0.20\n";
    let out = logstrip(&["analyze", "--input", "-", "--format", "csv"], Some(ragged));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(stderr.trim(), "line 3: the row has 4 fields where the header has 5", "{stderr}");

    let headless = "expiry,strike,vol,forward\n2027-03-19T16:00:00Z,4000,0.21,4210\n";
    let out = logstrip(&["analyze", "--input", "-", "--format", "csv"], Some(headless));
    assert_eq!(out.status.code(), Some(2));
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert!(stderr.contains("--underlying") && stderr.contains("?underlying="), "{stderr}");
    assert!(stderr.contains("--as-of") && stderr.contains("?as_of="), "{stderr}");
}

/// `analyze | head`: the reader closing the pipe early is not an error.
#[test]
fn a_closed_pipe_is_a_quiet_exit() {
    let mut child = Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .args(["analyze", "--input", "demo-data/kestrel50-snapshot.json", "--pretty"])
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary starts");
    // Close the read end before the analysis has written anything.
    drop(child.stdout.take());
    let out = child.wait_with_output().expect("binary finishes");
    assert!(out.status.success(), "status {:?}, stderr {}", out.status, String::from_utf8_lossy(&out.stderr));
    assert!(out.stderr.is_empty(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
}

/// `bench` reads a CSV snapshot like `analyze` does, with the same flags.
#[test]
fn bench_reads_csv_snapshots() {
    let csv = "expiry,strike,vol,forward\n\
               2027-03-19T16:00:00Z,3600,0.26,4210\n2027-03-19T16:00:00Z,3900,0.23,4210\n\
               2027-03-19T16:00:00Z,4200,0.205,4210\n2027-03-19T16:00:00Z,4500,0.19,4210\n\
               2027-03-19T16:00:00Z,4800,0.185,4210\n2027-03-19T16:00:00Z,5100,0.185,4210\n\
               2027-06-18T16:00:00Z,3600,0.25,4230\n2027-06-18T16:00:00Z,3900,0.225,4230\n\
               2027-06-18T16:00:00Z,4200,0.205,4230\n2027-06-18T16:00:00Z,4500,0.192,4230\n\
               2027-06-18T16:00:00Z,4800,0.186,4230\n2027-06-18T16:00:00Z,5100,0.185,4230\n\
               2027-12-17T16:00:00Z,3600,0.245,4260\n2027-12-17T16:00:00Z,3900,0.225,4260\n\
               2027-12-17T16:00:00Z,4200,0.207,4260\n2027-12-17T16:00:00Z,4500,0.195,4260\n\
               2027-12-17T16:00:00Z,4800,0.19,4260\n2027-12-17T16:00:00Z,5100,0.188,4260\n";
    let dir = std::env::temp_dir().join(format!("logstrip-bench-csv-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let path = dir.join("heron.csv");
    std::fs::write(&path, csv).expect("write csv");
    let path_text = path.to_string_lossy().to_string();
    let flags = ["--underlying", "HERON", "--as-of", "2026-11-30T15:30:00Z"];
    let analyzed = logstrip(&[&["analyze", "--input", &path_text][..], &flags[..]].concat(), None);
    assert!(analyzed.status.success(), "analyze: {}", String::from_utf8_lossy(&analyzed.stderr));
    let out = logstrip(&[&["bench", "--input", &path_text, "--runs", "2"][..], &flags[..]].concat(), None);
    let _ = std::fs::remove_dir_all(&dir);
    assert!(out.status.success(), "bench: {}", String::from_utf8_lossy(&out.stderr));
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).expect("bench prints JSON");
    assert_eq!(report["snapshots"].as_array().expect("snapshots").len(), 1, "{report}");
}

/// `demo` finds its data from any folder (here the system's temporary folder).
#[test]
fn demo_finds_its_data_from_another_folder() {
    let dir = std::env::temp_dir().join(format!("logstrip-demo-cwd-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temp dir");
    let database = format!("sqlite://{}", dir.join("demo.db").display());
    let out = Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .args(["demo", "--no-serve", "--database", &database])
        .current_dir(&dir)
        .output()
        .expect("binary runs");
    let _ = std::fs::remove_dir_all(&dir);
    assert!(out.status.success(), "stderr: {}", String::from_utf8_lossy(&out.stderr));
    assert!(String::from_utf8_lossy(&out.stdout).contains("Loaded 38 demo snapshots"));
}
