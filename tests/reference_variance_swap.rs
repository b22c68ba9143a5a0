//! Variance swap values against QuantLib 1.44's `VarianceSwap` (fixture and its script in
//! `tests/fixtures/variance_swap/`): fresh and seasoned swaps on a flat smile, desk
//! notionals converted to QuantLib's per-unit-of-decimal-variance notional by `* 1e4`,
//! seasoned swaps as a QuantLib swap over the remaining period with notional scaled by
//! `(N - n)/N` and strike `K_eff` (the script's docstring derives it). The returns
//! observed and expected are counted by QuantLib's `WeekendsOnly` calendar with the
//! case's holidays.

use logstrip::wire::analyze_text;
use logstrip::wire::valuation::{value_book, BookDoc};
use serde_json::{json, Value};

/// The bar for the QuantLib comparison. Both sides take the fair variance of a
/// flat smile to ~1e-13 relative (QuantLib's engine measured at 5e-14 by the script,
/// logstrip's replication at `REPLICATION_REL_TOL`); near-fair swaps amplify that by
/// `sigma^2 / |sigma^2 - K^2|` (about 120 for the fresh case), still far inside.
const VALUE_REL_TOL: f64 = 1e-9;

fn fixture() -> Value {
    let path = format!("{}/tests/fixtures/variance_swap/quantlib_values.json", env!("CARGO_MANIFEST_DIR"));
    serde_json::from_str(&std::fs::read_to_string(path).expect("fixture present")).expect("fixture is JSON")
}

/// The fixture's flat smile as a snapshot: 41 strikes per expiry, +-4 sd around the
/// forward.
fn snapshot(fx: &Value) -> String {
    let vol = fx["vol"].as_f64().expect("fixture shape");
    let slices: Vec<Value> = fx["expiries"]
        .as_array()
        .expect("fixture shape")
        .iter()
        .map(|e| {
            let forward = e["forward"].as_f64().expect("fixture shape");
            let points: Vec<Value> = (0..41)
                .map(|i| json!({"strike": forward * (0.2 * (i as f64 - 20.0) * vol).exp(), "vol": vol}))
                .collect();
            json!({"expiry": e["expiry"], "forward": forward, "discount": e["discount"], "points": points})
        })
        .collect();
    json!({"underlying": fx["underlying"], "as_of": fx["as_of"], "spot": fx["spot"], "slices": slices,
           "fit": {"model": "none"}})
    .to_string()
}

#[test]
fn values_match_quantlib_variance_swaps_fresh_and_seasoned() {
    let fx = fixture();
    let (snap, analysis) = analyze_text(&snapshot(&fx)).expect("flat snapshot analyses");
    for case in fx["cases"].as_array().expect("fixture shape") {
        let book: BookDoc =
            serde_json::from_value(json!({"holidays": case["holidays"], "positions": [case["position"]]}))
                .expect("fixture shape");
        let doc =
            serde_json::to_value(value_book(&snap, &analysis, &book, None).expect("values")).expect("fixture shape");
        let p = &doc["positions"][0];
        let id = &case["position"]["id"];
        assert_eq!(p["observed_returns"], case["observed_returns"], "{id}: returns observed (QuantLib WeekendsOnly)");
        assert_eq!(p["expected_returns"], case["expected_returns"], "{id}: returns expected (QuantLib WeekendsOnly)");
        let (got, expected) =
            (p["value"].as_f64().expect("fixture shape"), case["quantlib"]["npv"].as_f64().expect("fixture shape"));
        assert!(
            (got - expected).abs() <= VALUE_REL_TOL * expected.abs(),
            "{id}: value {got}, QuantLib NPV {expected}, tolerance {VALUE_REL_TOL} relative"
        );
        let notional = case["variance_notional"].as_f64().expect("fixture shape");
        let got_notional = p["variance_notional"].as_f64().expect("fixture shape");
        assert!((got_notional - notional).abs() <= 1e-12 * notional, "{id}: variance notional {got_notional}");
    }
}
