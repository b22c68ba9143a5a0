//! Valuation of seasoned swaps against hand-computed cases (MATH.md section 8) on a
//! flat smile, where the log-strip gives VS = GS = vol^2 exactly (Demeterfi, Derman,
//! Kamal & Zou 1999: a flat smile prices variance at its vol squared), so every value
//! is known in closed form:
//! - at inception a swap is worth `N D (VS - K)`;
//! - expired, `N D (RV - K)` with D = 1 once paid;
//! - a +1 vol point bump of a flat smile is again flat, so the vega of a swap maturing
//!   on an expiry is `N D ((vol + 0.01)^2 - vol^2)`;
//! - bucket vegas sum to the parallel vega within 1e-6 relative (the check).

use logstrip::wire::valuation::{value_book, BookDoc};
use logstrip::wire::{analyze_text, InputErrors};
use serde_json::{json, Value};

const VOL: f64 = 0.2;
/// Replication integrates to ~1e-12 relative (REPLICATION_REL_TOL); values built from
/// it are held to 1e-9 relative, a margin for the smile fit of a flat smile.
const VALUE_REL_TOL: f64 = 1e-9;

/// A snapshot of the invented index ORIOLE with a flat 20% smile on three expiries.
fn flat_snapshot() -> String {
    let strikes: Vec<f64> = (0..25).map(|i| 60.0 + 3.5 * i as f64).collect();
    let slice = |expiry: &str, discount: f64| {
        json!({"expiry": expiry, "forward": 100.0, "discount": discount,
               "points": strikes.iter().map(|k| json!({"strike": k, "vol": VOL})).collect::<Vec<_>>()})
    };
    json!({
        "underlying": "ORIOLE", "as_of": "2026-11-30T00:00:00Z", "spot": 100.0,
        "slices": [slice("2027-02-28T00:00:00Z", 0.99), slice("2027-05-30T00:00:00Z", 0.98), slice("2027-11-30T00:00:00Z", 0.96)],
        "fit": {"model": "none"}
    })
    .to_string()
}

fn value(positions: Value) -> Result<Value, InputErrors> {
    let (snapshot, analysis) = analyze_text(&flat_snapshot()).expect("flat snapshot analyses");
    let book: BookDoc = serde_json::from_value(json!({ "positions": positions })).expect("book");
    value_book(&snapshot, &analysis, &book).map(|doc| serde_json::to_value(doc).expect("serialise"))
}

fn assert_close(got: f64, expected: f64, what: &str) {
    assert!(
        (got - expected).abs() <= VALUE_REL_TOL * expected.abs().max(1.0),
        "{what}: got {got}, expected {expected}, tolerance {VALUE_REL_TOL} relative"
    );
}

#[test]
fn a_swap_at_inception_is_worth_n_d_vs_minus_k() {
    let doc = value(json!([
        {"id": "v", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.035, "variance_notional": 1e6},
        {"id": "g", "kind": "gamma", "side": "short", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-11-30T00:00:00Z", "strike_vol": 0.18, "vega_notional": 36000.0},
        {"id": "l", "kind": "leverage", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-02-28T00:00:00Z", "strike": -0.001, "variance_notional": 2e6}
    ]))
    .expect("values");
    let p = &doc["positions"];
    assert_close(p[0]["value"].as_f64().unwrap(), 1e6 * 0.98 * (VOL * VOL - 0.035), "variance swap");
    assert_close(p[0]["implied_level"].as_f64().unwrap(), VOL * VOL, "implied level");
    // Vega notional 36,000 at a strike vol of 0.18: N = 36,000 / (2 * 0.18) = 100,000.
    assert_close(p[1]["variance_notional"].as_f64().unwrap(), 1e5, "vega notional conversion");
    assert_close(p[1]["value"].as_f64().unwrap(), -1e5 * 0.96 * (VOL * VOL - 0.18 * 0.18), "gamma swap");
    // Flat smile: LS = 0, so the long leverage swap is worth N D (0 - K).
    assert_close(p[2]["value"].as_f64().unwrap(), 2e6 * 0.99 * 0.001, "leverage swap");
    let book = doc["totals"]["book"]["value"].as_f64().unwrap();
    let sum: f64 = p.as_array().unwrap().iter().map(|x| x["value"].as_f64().unwrap()).sum();
    assert_close(book, sum, "book total");
    assert!(doc["totals"]["variance"].is_object() && doc["totals"]["leverage"].is_object());
}

#[test]
fn an_expired_swap_is_worth_n_rv_minus_k() {
    let doc = value(json!([
        {"id": "old", "kind": "variance", "side": "long", "start": "2025-11-28T00:00:00Z",
         "maturity": "2026-11-27T00:00:00Z", "strike": 0.04, "variance_notional": 1e6,
         "realized": {"variance": 0.0429}}
    ]))
    .expect("values");
    let p = &doc["positions"][0];
    assert_close(p["value"].as_f64().unwrap(), 1e6 * (0.0429 - 0.04), "expired swap");
    assert!(p.get("implied_level").is_none());
    assert_close(p["parallel_vega"].as_f64().unwrap(), 0.0, "no vega once expired");
}

#[test]
fn a_seasoned_swap_blends_realized_and_implied_by_time() {
    // Started 2026-08-30 (92 days ago), matures 2027-02-28 (90 days ahead): weights
    // 92/182 and 90/182 (ACT/365F cancels), D = 0.99 at that expiry.
    let doc = value(json!([
        {"id": "s", "kind": "variance", "side": "long", "start": "2026-08-30T00:00:00Z",
         "maturity": "2027-02-28T00:00:00Z", "strike": 0.05, "variance_notional": 1e6,
         "realized": {"variance": 0.0625}}
    ]))
    .expect("values");
    let expected = 1e6 * 0.99 * (92.0 / 182.0 * 0.0625 + 90.0 / 182.0 * VOL * VOL - 0.05);
    assert_close(doc["positions"][0]["value"].as_f64().unwrap(), expected, "seasoned swap");
}

#[test]
fn vega_of_a_flat_smile_is_known_and_buckets_sum_to_parallel() {
    let doc = value(json!([
        {"id": "on-expiry", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 1e6},
        {"id": "between", "kind": "gamma", "side": "long", "start": "2026-10-30T00:00:00Z",
         "maturity": "2027-08-30T00:00:00Z", "strike": 0.04, "variance_notional": 1e6,
         "realized": {"variance": 0.03, "gamma_variance": 0.031, "start_spot": 96.0}}
    ]))
    .expect("values");
    let bump = (VOL + 0.01).powi(2) - VOL * VOL;
    let on_expiry = &doc["positions"][0];
    assert_close(on_expiry["parallel_vega"].as_f64().unwrap(), 1e6 * 0.98 * bump, "parallel vega");
    let buckets: Vec<f64> =
        on_expiry["vega_buckets"].as_array().unwrap().iter().map(|b| b["vega"].as_f64().unwrap()).collect();
    assert_close(buckets[1], 1e6 * 0.98 * bump, "vega sits on the maturity's expiry");
    assert!(buckets[0].abs() < 1e-6 && buckets[2].abs() < 1e-6, "{buckets:?}");
    for p in doc["positions"].as_array().unwrap() {
        let sum: f64 = p["vega_buckets"].as_array().unwrap().iter().map(|b| b["vega"].as_f64().unwrap()).sum();
        let parallel = p["parallel_vega"].as_f64().unwrap();
        assert!((sum - parallel).abs() <= 1e-6 * parallel.abs(), "{}: buckets {sum} vs parallel {parallel}", p["id"]);
    }
}

#[test]
fn maturity_beyond_the_last_expiry_and_missing_realized_are_errors_naming_the_field() {
    let err = value(json!([
        {"id": "far", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2028-06-30T00:00:00Z", "strike": 0.04, "variance_notional": 1e6},
        {"id": "seasoned", "kind": "variance", "side": "long", "start": "2026-10-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 1e6},
        {"id": "lev", "kind": "leverage", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike_vol": 0.1, "variance_notional": 1e6}
    ]))
    .expect_err("invalid");
    let text = err.to_string();
    assert!(text.contains("positions[2].strike_vol"), "{text}");
    let err = value(json!([
        {"id": "far", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2028-06-30T00:00:00Z", "strike": 0.04, "variance_notional": 1e6},
        {"id": "seasoned", "kind": "variance", "side": "long", "start": "2026-10-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 1e6}
    ]))
    .expect_err("invalid");
    let text = err.to_string();
    assert!(text.contains("positions[0].maturity: maturity") && text.contains("no extrapolation"), "{text}");
    assert!(text.contains("positions[1].realized"), "{text}");
}

#[test]
fn fixings_give_the_realized_variance_of_their_closes() {
    // Closes 100, 101, 99.5 from start: RV = 252/2 (ln(1.01)^2 + ln(99.5/101)^2).
    let doc = value(json!([
        {"id": "fx", "kind": "variance", "side": "long", "start": "2026-11-28T00:00:00Z",
         "maturity": "2027-02-28T00:00:00Z", "strike": 0.04, "variance_notional": 1e6,
         "fixings": [100.0, 101.0, 99.5]}
    ]))
    .expect("values");
    let rv = 126.0 * ((1.01f64).ln().powi(2) + (99.5f64 / 101.0).ln().powi(2));
    let (past, future) = (2.0 / 92.0, 90.0 / 92.0);
    let expected = 1e6 * 0.99 * (past * rv + future * VOL * VOL - 0.04);
    assert_close(doc["positions"][0]["value"].as_f64().unwrap(), expected, "value from fixings");
}
