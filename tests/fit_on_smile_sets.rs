//! The leverage-swap fit on smiles priced outside the project: the snapshots of
//! `tests/fixtures/smile_sets/{tuning,holdout,fresh}/` (QuantLib 1.44 Heston and rough
//! Heston engines; `generate.py` records versions and seeds), analysed end to end
//! with the default smile and a rough Heston fit, against the parameters that made
//! them (each `*.truth.json`'s `model`: Heston `kappa` is the mean reversion, `rho
//! sigma` is `rho_nu`, and the Hurst exponent is 1/2; rough Heston's `hurst`, `rho
//! sigma` and no mean reversion).
//!
//! Tolerances are the fit issue's targets for (H, rho nu, lambda): Heston-like smiles,
//! clean, with 0.2-0.3 vol pt of quote noise and with one broken expiry, 0.03 / 0.015 /
//! 0.15; rough Heston 0.005 / 0.015 / 0.03.

use serde_json::Value;

const SEED_SETS: [&str; 4] = ["tuning", "holdout", "fresh", "blind"];

/// Heston-like sets and rough Heston sets with their tolerances on (H, rho nu, lambda).
const HESTON_SETS: [&str; 5] =
    ["01_dense_clean", "02_grid_35x60", "06_noisy_bidask", "07_noisy_mid", "11_broken_expiry"];
const HESTON_TOL: [f64; 3] = [0.03, 0.015, 0.15];
const ROUGH_SETS: [&str; 1] = ["09_rough_heston"];
const ROUGH_TOL: [f64; 3] = [0.005, 0.015, 0.03];

fn read(path: &str) -> Value {
    let text = std::fs::read_to_string(path).expect("fixture readable");
    serde_json::from_str(&text).expect("fixture is JSON")
}

/// The fit document of `set` in `seed_set` (rough Heston, all parameters free) and the
/// truth file.
fn fit_of(seed_set: &str, set: &str) -> (Value, Value) {
    let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/smile_sets");
    let mut doc = read(&format!("{dir}/{seed_set}/{set}.json"));
    doc["fit"] = serde_json::json!({ "model": "rough_heston" });
    let truth = read(&format!("{dir}/{seed_set}/{set}.truth.json"));
    let (input, analysis) = logstrip::wire::analyze_text(&doc.to_string()).expect("the snapshot is analysed");
    let out = serde_json::to_value(logstrip::wire::output::analysis_doc(&input, &analysis)).expect("output serialises");
    (out["fit"].clone(), truth)
}

fn truth_params(truth: &Value) -> [f64; 3] {
    let model = &truth["model"];
    let number = |name: &str| model[name].as_f64().expect("truth model parameters are numbers");
    let rho_nu = number("rho") * number("sigma");
    if model["kind"] == "heston" {
        [0.5, rho_nu, number("kappa")]
    } else {
        assert_eq!(model["kind"], "rough_heston", "truth model kind");
        [number("hurst"), rho_nu, number("kappa")]
    }
}

fn check(seed_set: &str, set: &str, tol: [f64; 3], failures: &mut Vec<String>) {
    let (fit, truth) = fit_of(seed_set, set);
    let want = truth_params(&truth);
    let got = ["hurst", "rho_nu", "mean_reversion"].map(|p| fit["params"][p].as_f64().unwrap_or(f64::NAN));
    println!(
        "{seed_set}/{set}: {} ({}), H {:.4} rho_nu {:.4} lambda {:.3} (truth {:.2} {:.4} {:.2}), down-weighted {}",
        fit["status"],
        fit["selected_model"],
        got[0],
        got[1],
        got[2],
        want[0],
        want[1],
        want[2],
        fit["down_weighted_expiries"]
    );
    for (i, name) in ["hurst", "rho_nu", "mean_reversion"].iter().enumerate() {
        if !((got[i] - want[i]).abs() <= tol[i]) {
            failures.push(format!("{seed_set}/{set}: {name} {} vs truth {} (tolerance {})", got[i], want[i], tol[i]));
        }
    }
    let status = fit["status"].as_str().unwrap_or("");
    let held = fit["active_bounds"].as_array().is_some_and(|b| b.iter().any(|n| n != "hurst"));
    if status != if held { "at_bound" } else { "converged" } {
        failures.push(format!("{seed_set}/{set}: status {status} with active bounds {}", fit["active_bounds"]));
    }
    if got[0] >= 0.5 && fit["selected_model"] != "heston" {
        failures.push(format!("{seed_set}/{set}: H = 1/2 but selected_model {}", fit["selected_model"]));
    }
    if let Some(broken) = truth["broken"].as_array().filter(|b| !b.is_empty()) {
        let taus: Vec<f64> =
            truth["slices"].as_array().expect("slices").iter().map(|s| s["tau"].as_f64().unwrap_or(0.0)).collect();
        let listed: Vec<f64> = fit["down_weighted_expiries"]
            .as_array()
            .expect("down_weighted_expiries")
            .iter()
            .map(|d| d["tau"].as_f64().unwrap_or(f64::NAN))
            .collect();
        for b in broken {
            let tau = taus[usize::try_from(b.as_u64().expect("index")).expect("fits")];
            // 1e-9 years: the output's tau is the snapshot's, the truth file's the same
            // number written by the generator.
            if !listed.iter().any(|t| (t - tau).abs() < 1e-9) {
                failures.push(format!("{seed_set}/{set}: broken expiry at tau {tau} not down-weighted ({listed:?})"));
            }
        }
    }
}

/// Every seed set's `sets`, checked against `tol`; fails with all misses listed.
fn check_all(sets: &[&str], tol: [f64; 3]) {
    let mut failures = Vec::new();
    for seed_set in SEED_SETS {
        for set in sets {
            check(seed_set, set, tol, &mut failures);
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn fit_recovers_heston_parameters_from_generated_smiles() {
    check_all(&HESTON_SETS, HESTON_TOL);
}

#[test]
fn fit_recovers_rough_heston_parameters_from_generated_smiles() {
    check_all(&ROUGH_SETS, ROUGH_TOL);
}
