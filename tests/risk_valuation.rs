//! Valuation of swap books at desk conventions (MATH.md section 8): hand-computed cases
//! on a flat smile, where the log-strip gives VS = GS = vol^2 exactly (Demeterfi,
//! Derman, Kamal & Zou 1999: a flat smile prices variance at its vol squared), the
//! lifecycle of a position, returns counted by observation days, caps refused, and the
//! P&L explanation between two snapshots.

use logstrip::wire::valuation::{value_book, BookDoc};
use logstrip::wire::{analyze_text, InputErrors};
use serde_json::{json, Value};

const VOL: f64 = 0.2;
/// Replication integrates a flat smile to ~1e-13 relative (REPLICATION_REL_TOL);
/// values built from it are held to 1e-9 relative, a margin for the smile fit.
const VALUE_REL_TOL: f64 = 1e-9;

/// A snapshot of the invented index ORIOLE with a flat smile on three expiries, vols
/// shifted by `shift` and valued at `as_of`.
fn flat_snapshot_at(vol: f64, as_of: &str) -> String {
    let strikes: Vec<f64> = (0..25).map(|i| 60.0 + 3.5 * i as f64).collect();
    let slice = |expiry: &str, discount: f64| {
        json!({"expiry": expiry, "forward": 100.0, "discount": discount,
               "points": strikes.iter().map(|k| json!({"strike": k, "vol": vol})).collect::<Vec<_>>()})
    };
    json!({
        "underlying": "ORIOLE", "as_of": as_of, "spot": 100.0,
        "slices": [slice("2027-02-28T00:00:00Z", 0.99), slice("2027-05-30T00:00:00Z", 0.98), slice("2027-11-30T00:00:00Z", 0.96)],
        "fit": {"model": "none"}
    })
    .to_string()
}

fn value_on(snapshot: &str, book: Value, since: Option<&str>) -> Result<Value, InputErrors> {
    let (snapshot, analysis) = analyze_text(snapshot).expect("snapshot analyses");
    let earlier = since.map(|s| analyze_text(s).expect("earlier snapshot analyses"));
    let book: BookDoc = serde_json::from_value(book).expect("book");
    value_book(&snapshot, &analysis, &book, earlier.as_ref().map(|(s, a)| (s, a)))
        .map(|doc| serde_json::to_value(doc).expect("serialise"))
}

fn value(positions: Value) -> Result<Value, InputErrors> {
    value_on(&flat_snapshot_at(VOL, "2026-11-30T00:00:00Z"), json!({ "positions": positions }), None)
}

fn assert_close(got: f64, expected: f64, what: &str) {
    assert!(
        (got - expected).abs() <= VALUE_REL_TOL * expected.abs().max(1.0),
        "{what}: got {got}, expected {expected}, tolerance {VALUE_REL_TOL} relative"
    );
}

fn num(v: &Value) -> f64 {
    v.as_f64().expect("a number")
}

fn count(v: &Value) -> u64 {
    v.as_u64().expect("a count")
}

#[test]
fn the_desk_worked_example_vega_notional_100k_at_26_against_25_89() {
    // Worked by hand (desk convention, common practice, no source): K = 26 vol points,
    // vega notional 100,000 per vol point, so N_var = 100,000 / (2 * 26) = 1,923.0769 per
    // vol point squared; against a flat 25.89 vol the swap is worth
    // N_var (25.89^2 - 26^2) D = 1,923.0769 * (670.2921 - 676) * 0.96 = -10,537.66.
    let snapshot = flat_snapshot_at(0.2589, "2026-11-30T00:00:00Z");
    let book = json!({"positions": [
        {"id": "VS-1", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-11-30T00:00:00Z", "strike_vol": 0.26, "vega_notional": 100000.0}]});
    let doc = value_on(&snapshot, book, None).expect("values");
    let p = &doc["positions"][0];
    assert_close(num(&p["variance_notional"]), 100000.0 / 52.0, "variance notional per vol point squared");
    assert_close(num(&p["vega_notional"]), 100000.0, "vega notional round trip");
    assert_close(num(&p["value"]), 1923.076923076923 * (670.2921 - 676.0) * 0.96, "value");
    assert!((num(&p["value"]) - -10537.66).abs() < 0.01, "value to the cent of the hand sum: {}", p["value"]);
    // Symmetric vega of a flat smile: N_var D ((25.89 + 1)^2 - (25.89 - 1)^2) / 2
    // = N_var D 2 * 25.89 = N_vega D (sigma / K).
    assert_close(num(&p["parallel_vega"]), 100000.0 * 0.96 * 25.89 / 26.0, "parallel vega");
    // Starts at the valuation time: accruing, no return observed yet.
    assert_eq!((p["status"].as_str(), count(&p["observed_returns"])), (Some("accruing"), 0));
    assert_eq!(doc["conventions"]["variance_notional_unit"], "currency per vol point squared");
}

#[test]
fn a_swap_at_inception_is_worth_n_d_vs_minus_k_in_vol_points() {
    let doc = value(json!([
        {"id": "v", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.035, "variance_notional": 100.0},
        {"id": "g", "kind": "gamma", "side": "short", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-11-30T00:00:00Z", "strike_vol": 0.18, "vega_notional": 3600.0},
        {"id": "l", "kind": "leverage", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-02-28T00:00:00Z", "strike": -0.001, "variance_notional": 200.0}
    ]))
    .expect("values");
    let p = &doc["positions"];
    // 100 per vol point squared: 100 * 0.98 * (400 - 350).
    assert_close(num(&p[0]["value"]), 100.0 * 0.98 * (400.0 - 350.0), "variance swap");
    assert_close(num(&p[0]["implied_level"]), VOL * VOL, "implied level");
    // Vega notional 3,600 at 18 vol points: N_var = 3,600 / 36 = 100.
    assert_close(num(&p[1]["variance_notional"]), 100.0, "vega notional conversion");
    assert_close(num(&p[1]["value"]), -100.0 * 0.96 * (400.0 - 324.0), "gamma swap");
    // Flat smile: LS = 0, so the long leverage swap is worth N D (0 - K), K = -10 points^2.
    assert_close(num(&p[2]["value"]), 200.0 * 0.99 * 10.0, "leverage swap");
    let book = num(&doc["totals"]["book"]["value"]);
    let sum: f64 = p.as_array().unwrap().iter().map(|x| num(&x["value"])).sum();
    assert_close(book, sum, "book total");
}

#[test]
fn a_seasoned_swap_weighs_realized_by_returns_observed_not_calendar_time() {
    // Started Fri 28 Aug 2026, valued Mon 30 Nov 2026, matures Sun 28 Feb 2027 (on an
    // expiry). Weekdays after 28 Aug and before 30 Nov: 13 weeks = 65 returns observed;
    // through Fri 26 Feb 2027: 65 + 65 = 130 expected (hand count). With the holidays
    // 25 Dec 2026 and 1 Jan 2027 (Fridays) 128 are expected.
    let position = json!({"id": "s", "kind": "variance", "side": "long", "start": "2026-08-28T00:00:00Z",
        "maturity": "2027-02-28T00:00:00Z", "strike": 0.05, "variance_notional": 100.0,
        "realized": {"variance": 0.0625}});
    let snapshot = flat_snapshot_at(VOL, "2026-11-30T00:00:00Z");
    for (holidays, expected) in [(json!([]), 130u64), (json!(["2026-12-25", "2027-01-01"]), 128u64)] {
        let doc = value_on(&snapshot, json!({"holidays": holidays, "positions": [position]}), None).expect("values");
        let p = &doc["positions"][0];
        assert_eq!((count(&p["observed_returns"]), count(&p["expected_returns"])), (65, expected));
        let past = 65.0 / expected as f64;
        let value = 100.0 * 1e4 * 0.99 * (past * 0.0625 + (1.0 - past) * VOL * VOL - 0.05);
        assert_close(num(&p["value"]), value, "seasoned swap");
        assert_eq!(p["status"], "accruing");
    }
    // Returns given explicitly override the count from dates.
    let mut given = position.clone();
    given["realized"]["returns"] = json!(70);
    let doc = value(json!([given])).expect("values");
    assert_eq!(count(&doc["positions"][0]["observed_returns"]), 70);
}

#[test]
fn lifecycle_matured_maturing_today_and_not_started() {
    let doc = value(json!([
        // Matured on Fri 27 Nov: settled at N (RV - K), undiscounted, no vega.
        {"id": "matured", "kind": "variance", "side": "long", "start": "2025-11-28T00:00:00Z",
         "maturity": "2026-11-27T00:00:00Z", "strike": 0.04, "variance_notional": 100.0,
         "realized": {"variance": 0.0429}},
        // Matured without realized data: no settlement, said so.
        {"id": "matured-unknown", "kind": "variance", "side": "short", "start": "2025-11-28T00:00:00Z",
         "maturity": "2026-11-27T00:00:00Z", "strike": 0.04, "variance_notional": 100.0},
        // Matures at 21:00 today: one return left of 20 (after Mon 2 Nov: Tue 3 to Fri 6,
        // three full weeks, Mon 30 Nov).
        {"id": "today", "kind": "variance", "side": "long", "start": "2026-11-02T00:00:00Z",
         "maturity": "2026-11-30T21:00:00Z", "strike": 0.04, "variance_notional": 100.0,
         "realized": {"variance": 0.05}},
        // Starts next month.
        {"id": "later", "kind": "variance", "side": "long", "start": "2026-12-31T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0}
    ]))
    .expect("values");
    let p = &doc["positions"];
    assert_eq!(p[0]["status"], "matured");
    assert_close(num(&p[0]["settlement"]), 100.0 * (429.0 - 400.0), "settlement");
    assert!(p[0].get("value").is_none() && num(&p[0]["parallel_vega"]) == 0.0);
    assert_eq!(p[1]["status"], "matured");
    assert!(p[1].get("settlement").is_none() && p[1]["note"].as_str().unwrap().contains("realized"));
    assert_eq!(p[2]["status"], "matures_today");
    assert_eq!((count(&p[2]["observed_returns"]), count(&p[2]["expected_returns"])), (19, 20));
    // The last return is implied at the first expiry's level (flat: vol^2); the discount
    // over 21 hours is log-linear from 1 to 0.99 at 90 days.
    let d = num(&p[2]["discount"]);
    let expected = 100.0 * 1e4 * d * (19.0 / 20.0 * 0.05 + 1.0 / 20.0 * VOL * VOL - 0.04);
    assert_close(num(&p[2]["value"]), expected, "maturing today");
    assert!(num(&p[2]["parallel_vega"]) > 0.0 && d < 1.0 && d > 0.9999);
    assert_eq!(p[3]["status"], "not_started");
    assert_eq!(count(&p[3]["observed_returns"]), 0);
    assert_close(num(&doc["totals"]["book"]["settlement"]), 2900.0, "settlements total apart from value");
    let values: f64 = [&p[2], &p[3]].iter().map(|x| num(&x["value"])).sum();
    assert_close(num(&doc["totals"]["book"]["value"]), values, "value total without matured positions");
}

#[test]
fn caps_percent_holidays_and_inconsistent_counts_are_refused_naming_the_field() {
    let err = value(json!([
        {"id": "capped", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike_vol": 0.2, "vega_notional": 1e5, "cap_multiple": 2.5}
    ]))
    .expect_err("invalid");
    let text = err.to_string();
    assert!(text.contains("positions[0].cap_multiple") && text.contains("not valued yet"), "{text}");
    let err = value(json!([
        {"id": "too-many", "kind": "variance", "side": "long", "start": "2026-11-23T00:00:00Z",
         "maturity": "2026-12-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0,
         "fixings": [100.0, 101.0, 100.0, 101.0, 100.0, 101.0, 100.0, 101.0, 100.0, 101.0, 100.0, 101.0,
                     100.0, 101.0, 100.0, 101.0, 100.0, 101.0, 100.0, 101.0, 100.0, 101.0, 100.0, 101.0,
                     100.0, 101.0, 100.0, 101.0, 100.0]}
    ]))
    .expect_err("invalid");
    let text = err.to_string();
    assert!(
        text.contains("positions[0].fixings") && text.contains("28 returns observed, but the swap has 27"),
        "{text}"
    );
    let err = value_on(
        &flat_snapshot_at(VOL, "2026-11-30T00:00:00Z"),
        json!({"holidays": ["2026-12-32"], "positions": [
            {"id": "v", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
             "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0}]}),
        None,
    )
    .expect_err("invalid");
    assert!(err.to_string().contains("holidays[0]"), "{err}");
}

#[test]
fn maturity_beyond_the_last_expiry_and_missing_realized_are_errors_naming_the_field() {
    let err = value(json!([
        {"id": "far", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2028-06-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0},
        {"id": "seasoned", "kind": "variance", "side": "long", "start": "2026-10-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0},
        {"id": "lev", "kind": "leverage", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike_vol": 0.1, "variance_notional": 100.0}
    ]))
    .expect_err("invalid");
    assert!(err.to_string().contains("positions[2].strike_vol"), "{err}");
    let err = value(json!([
        {"id": "far", "kind": "variance", "side": "long", "start": "2026-11-30T00:00:00Z",
         "maturity": "2028-06-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0},
        {"id": "seasoned", "kind": "variance", "side": "long", "start": "2026-10-30T00:00:00Z",
         "maturity": "2027-05-30T00:00:00Z", "strike": 0.04, "variance_notional": 100.0}
    ]))
    .expect_err("invalid");
    let text = err.to_string();
    assert!(text.contains("positions[0].maturity: maturity") && text.contains("no extrapolation"), "{text}");
    assert!(text.contains("positions[1].realized"), "{text}");
}

#[test]
fn fixings_give_the_realized_variance_and_the_returns_observed() {
    // Closes 100, 101, 99.5 from Thu 26 Nov: 2 returns, RV = 252/2 (ln(1.01)^2 +
    // ln(99.5/101)^2); 66 returns expected through Fri 26 Feb 2027 (hand count: Fri 27
    // Nov, then 13 full weeks).
    let doc = value(json!([
        {"id": "fx", "kind": "variance", "side": "long", "start": "2026-11-26T00:00:00Z",
         "maturity": "2027-02-28T00:00:00Z", "strike": 0.04, "variance_notional": 100.0,
         "fixings": [100.0, 101.0, 99.5]}
    ]))
    .expect("values");
    let rv = 126.0 * ((1.01f64).ln().powi(2) + (99.5f64 / 101.0).ln().powi(2));
    let p = &doc["positions"][0];
    assert_eq!((count(&p["observed_returns"]), count(&p["expected_returns"])), (2, 66));
    let expected = 1e6 * 0.99 * (2.0 / 66.0 * rv + 64.0 / 66.0 * VOL * VOL - 0.04);
    assert_close(num(&p["value"]), expected, "value from fixings");
}

/// The demo snapshot with every vol (and bid and ask) shifted by `shift` and its times
/// moved by `days`.
fn demo_shifted(shift: f64, days: i64) -> String {
    let path = format!("{}/demo-data/kestrel50-snapshot.json", env!("CARGO_MANIFEST_DIR"));
    let mut doc: Value = serde_json::from_str(&std::fs::read_to_string(path).expect("demo snapshot shape"))
        .expect("demo snapshot shape");
    let as_of = chrono::DateTime::parse_from_rfc3339(doc["as_of"].as_str().expect("demo snapshot shape"))
        .expect("demo snapshot shape");
    doc["as_of"] = json!((as_of + chrono::Duration::days(days)).to_rfc3339());
    let slices = doc["slices"].as_array_mut().expect("demo snapshot shape");
    // The first expiry is a week out: with the clock moved on it stays in the future.
    for slice in slices.iter_mut() {
        for point in slice["points"].as_array_mut().expect("demo snapshot shape") {
            for field in ["vol", "bid", "ask"] {
                if let Some(v) = point[field].as_f64() {
                    point[field] = json!(v + shift);
                }
            }
        }
    }
    doc["fit"] = json!({"model": "none"});
    doc.to_string()
}

#[test]
fn parallel_vega_of_a_fresh_fair_swap_is_n_vega_d_on_the_demo_snapshot() {
    // MATH.md section 8: for a fresh fair swap the parallel vega is about
    // N_vega D (sigma_fair / K) = N_vega D; within 1% (the bar). Vega is per
    // point of swap vol, so on an expiry it is exact; a maturity between expiries
    // (here 2027-11-30, between 2027-10-30 and 2027-12-22) spreads it over two.
    let snapshot = demo_shifted(0.0, 0);
    let probe = json!({"positions": [{"id": "p", "kind": "variance", "side": "long", "start": "2026-11-30T15:30:00Z",
        "maturity": "2027-11-30T15:30:00Z", "strike_vol": 0.25, "vega_notional": 100000.0}]});
    let fair = num(&value_on(&snapshot, probe, None).expect("values")["positions"][0]["implied_level"]).sqrt();
    let book = json!({"positions": [{"id": "fair", "kind": "variance", "side": "long", "start": "2026-11-30T15:30:00Z",
        "maturity": "2027-11-30T15:30:00Z", "strike_vol": fair, "vega_notional": 100000.0}]});
    let doc = value_on(&snapshot, book, None).expect("values");
    let p = &doc["positions"][0];
    let expected = 100000.0 * num(&p["discount"]);
    let vega = num(&p["parallel_vega"]);
    assert!(num(&p["value"]).abs() < 1e-6 * expected, "fair swap is worth nothing: {}", p["value"]);
    assert!((vega / expected - 1.0).abs() < 0.01, "parallel vega {vega} against N_vega D = {expected}");
}

#[test]
fn explain_a_day_and_a_one_vol_point_move_leaves_under_two_percent() {
    // Earlier: the demo snapshot. Later: one day on (Tue 1 Dec), every vol up one point.
    // A seasoned variance swap with fixings through Mon 30 Nov (returns Tue 24 to Mon
    // 30 Nov: 5), a fresh one, and a seasoned gamma swap.
    let earlier = demo_shifted(0.0, 0);
    let later = demo_shifted(0.01, 1);
    let fixings = json!([4100.0, 4120.5, 4095.2, 4150.8, 4170.1, 4210.5]);
    let book = json!({"positions": [
        {"id": "seasoned", "kind": "variance", "side": "long", "start": "2026-11-23T15:30:00Z",
         "maturity": "2027-06-02T15:30:00Z", "strike_vol": 0.24, "vega_notional": 100000.0, "fixings": fixings},
        {"id": "fresh", "kind": "variance", "side": "short", "start": "2026-11-30T15:30:00Z",
         "maturity": "2027-12-22T15:30:00Z", "strike_vol": 0.255, "vega_notional": 250000.0},
        {"id": "gamma", "kind": "gamma", "side": "long", "start": "2026-11-23T15:30:00Z",
         "maturity": "2027-03-12T15:30:00Z", "strike_vol": 0.23, "vega_notional": 50000.0, "fixings": fixings}
    ]});
    let doc = value_on(&later, book, Some(&earlier)).expect("explains");
    let explain = &doc["explain"];
    for p in explain["positions"].as_array().unwrap() {
        let change = num(&p["change"]);
        let parts = ["realized_accrual", "time_decay", "spot", "vega", "discounting", "unexplained"];
        let sum: f64 = parts.iter().map(|f| num(&p[f])).sum();
        assert!((sum - change).abs() <= 1e-9 * change.abs(), "{}: parts {sum} against change {change}", p["id"]);
        assert!(
            num(&p["unexplained"]).abs() < 0.02 * change.abs(),
            "{}: rest {} of {change}",
            p["id"],
            p["unexplained"]
        );
        // A one-point parallel move: vega is most of the change.
        assert!(num(&p["vega"]).abs() > 0.5 * change.abs(), "{p}");
        let moves = p["vega_by_expiry"].as_array().unwrap();
        let by_expiry: f64 = moves.iter().map(|m| num(&m["pnl"])).sum();
        assert!((by_expiry - num(&p["vega"])).abs() <= 1e-9 * by_expiry.abs());
        // A one-point parallel move of skewed smiles moves the variance-swap vols by about
        // a point, more at long expiries (the skew term of DDKZ 1999's
        // VS ~ s0^2 (1 + 3 tau b^2)), less at the shortest, where a day of decay counts.
        let moved = moves.iter().filter_map(|m| m["variance_swap_vol_change"].as_f64()).collect::<Vec<_>>();
        assert!(moved.len() == moves.len() && moved.iter().all(|d| *d > 0.5 && *d < 1.5), "{moved:?}");
    }
    // The seasoned swap observed one more return (Mon 30 Nov's close: its sixth fixing).
    let seasoned = &explain["positions"][0];
    assert!(num(&seasoned["realized_accrual"]).abs() > 0.0);
    let fresh = &explain["positions"][1];
    assert!(num(&fresh["realized_accrual"]).abs() < 1e-9, "fresh swap accrues nothing before its first return");
    // Same time, vols up a point: all vega, nothing left.
    let same_time = demo_shifted(0.01, 0);
    let book = json!({"positions": [{"id": "f", "kind": "variance", "side": "long", "start": "2026-11-30T15:30:00Z",
        "maturity": "2027-12-22T15:30:00Z", "strike_vol": 0.255, "vega_notional": 250000.0}]});
    let doc = value_on(&same_time, book, Some(&earlier)).expect("explains");
    let p = &doc["explain"]["positions"][0];
    assert!((num(&p["vega"]) - num(&p["change"])).abs() < 1e-8 * num(&p["change"]).abs(), "{p}");
    assert!(num(&p["unexplained"]).abs() < 1e-8 * num(&p["change"]).abs(), "{p}");
}
