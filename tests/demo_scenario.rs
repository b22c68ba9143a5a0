//! The invented demo day (demo-data/day: 38 snapshots priced by QuantLib's analytic
//! Heston engine with quote noise, bad quotes and one butterfly slice) loaded by
//! `logstrip demo --no-serve`: the fits come close to the model that generated the
//! smiles, and the planted butterfly slice is flagged.

use std::process::Command;

fn logstrip(args: &[&str]) -> (String, String, Option<i32>) {
    let out = Command::new(env!("CARGO_BIN_EXE_logstrip"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .output()
        .expect("binary runs");
    (
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
        out.status.code(),
    )
}

/// The value after `label` on the summary line `label median of the fits X truth Y`.
fn summary_median(report: &str, label: &str) -> f64 {
    let line = report.lines().find(|l| l.trim_start().starts_with(label)).expect("summary line");
    let after = line.split("median of the fits").nth(1).expect("median");
    after.split_whitespace().next().expect("value").parse().expect("number")
}

#[test]
fn demo_loads_the_day_and_its_fits_come_close_to_the_truth() {
    let dir = tempfile::tempdir().expect("temp dir");
    let db = format!("sqlite://{}", dir.path().join("demo.db").display());
    let (report, err, code) = logstrip(&["demo", "--no-serve", "--database", &db]);
    assert_eq!(code, Some(0), "{err}");
    assert!(report.contains("Loaded 38 demo snapshots"), "{report}");
    assert_eq!(report.lines().filter(|l| l.trim_start().starts_with("2026-11-30T")).count(), 38);
    // Truth (demo-data/day/truth.json): Heston kappa 2, sigma 0.55, rho -0.7, i.e. rough
    // Heston hurst 0.5, rho_nu -0.385, mean_reversion 2 (MATH.md section 5). Tolerances
    // are what quote noise of a few tenths of a vol point leaves (measured spread of
    // the 37 clean fits: hurst 0.45-0.50, rho_nu -0.355 to -0.394).
    assert!((summary_median(&report, "hurst") - 0.5).abs() < 0.05, "{report}");
    assert!((summary_median(&report, "rho_nu") + 0.385).abs() < 0.03, "{report}");
    assert!((summary_median(&report, "mean_reversion") - 2.0).abs() < 0.3, "{report}");

    // A second run finds everything stored.
    let (again, err, code) = logstrip(&["demo", "--no-serve", "--database", &db]);
    assert_eq!(code, Some(0), "{err}");
    assert!(again.contains("(0 new, 38 already there)"), "{again}");
}

#[test]
fn the_planted_butterfly_slice_is_flagged() {
    let (out, err, code) = logstrip(&["analyze", "--input", "demo-data/day/kestrel50-2026-11-30T1200.json"]);
    assert_eq!(code, Some(0), "{err}");
    let doc: serde_json::Value = serde_json::from_str(&out).expect("JSON");
    let flagged: Vec<&str> = doc["curve"]
        .as_array()
        .expect("curve")
        .iter()
        .filter(|c| c["quality"]["butterfly_ok"] == false)
        .map(|c| c["expiry"].as_str().unwrap_or(""))
        .collect();
    assert_eq!(flagged, vec!["2027-12-17T16:00:00Z"], "exactly the planted slice");
}
