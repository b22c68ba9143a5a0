//! Per-quote fitted vols and residuals in the analysis (`curve[].quote_fit`): two
//! arrays aligned with the quotes, the residual being quote minus fit, rounded to
//! `QUOTE_FIT_DECIMALS`; a flat smile is fitted by itself (closed form: the flat
//! total variance `sigma^2 tau` is an SVI with `b = 0`), so its residuals vanish.

use logstrip::wire::analyze_text;
use logstrip::wire::output::{analysis_doc, QUOTE_FIT_DECIMALS};
use serde_json::{json, Value};

/// Rounding of the stored numbers: half a unit in the last kept decimal.
fn rounding() -> f64 {
    0.5 * 10f64.powi(-QUOTE_FIT_DECIMALS)
}

fn analysed(text: &str) -> Value {
    let (snapshot, analysis) = analyze_text(text).expect("analysed");
    serde_json::to_value(analysis_doc(&snapshot, &analysis)).expect("JSON")
}

fn numbers(v: &Value) -> Vec<f64> {
    v.as_array().expect("array").iter().map(|x| x.as_f64().expect("number")).collect()
}

#[test]
fn a_flat_smile_has_zero_residuals() {
    let points: Vec<Value> =
        (0..15).map(|i| json!({"strike": 70.0 + 4.0 * i as f64, "vol": 0.2, "bid": 0.195, "ask": 0.205})).collect();
    let doc = json!({"underlying": "ORIOLE", "as_of": "2026-11-30T12:00:00Z",
        "slices": [{"tau": 0.5, "forward": 100.0, "points": points}]});
    let out = analysed(&doc.to_string());
    let fit = &out["curve"][0]["quote_fit"];
    let (fitted, residual) = (numbers(&fit["fitted_vol"]), numbers(&fit["residual"]));
    assert_eq!((fitted.len(), residual.len()), (15, 15));
    // 1e-5 in vol: the stored rounding plus a fit that stops within 1e-6 of exact.
    for (f, r) in fitted.iter().zip(&residual) {
        assert!((f - 0.2).abs() <= 1e-5 && r.abs() <= 1e-5, "fitted {f}, residual {r}: expected 0.2 and 0");
    }
    assert!((out["curve"][0]["quality"]["median_half_spread"].as_f64().expect("median") - 0.005).abs() <= rounding());
}

#[test]
fn residuals_are_quote_minus_fit_for_every_quote_and_match_the_flagged_quotes() {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/day/kestrel50-2026-11-30T1220.json");
    let text = std::fs::read_to_string(path).expect("demo day snapshot");
    let input: Value = serde_json::from_str(&text).expect("JSON");
    let out = analysed(&text);
    let mut flagged_seen = 0;
    for point in out["curve"].as_array().expect("curve") {
        let slice = input["slices"]
            .as_array()
            .expect("slices")
            .iter()
            .find(|s| s["expiry"] == point["expiry"])
            .expect("the expiry's input slice");
        let quotes = slice["points"].as_array().expect("points");
        let fitted = numbers(&point["quote_fit"]["fitted_vol"]);
        let residual = numbers(&point["quote_fit"]["residual"]);
        assert_eq!(fitted.len(), quotes.len());
        assert_eq!(residual.len(), quotes.len());
        assert_eq!(point["quality"]["points"].as_u64(), Some(quotes.len() as u64));
        for ((q, f), r) in quotes.iter().zip(&fitted).zip(&residual) {
            let vol = q["vol"].as_f64().expect("vol");
            assert!((vol - f - r).abs() <= 2.0 * rounding(), "quote {vol}, fitted {f}, residual {r}");
        }
        for flag in point["quality"]["flagged_quotes"].as_array().expect("flagged") {
            let strike = flag["strike"].as_f64().expect("strike");
            let at = quotes.iter().position(|q| q["strike"].as_f64() == Some(strike)).expect("flagged strike quoted");
            let exact = flag["fitted_vol"].as_f64().expect("fitted_vol");
            assert!((fitted[at] - exact).abs() <= rounding(), "strike {strike}: {} vs {exact}", fitted[at]);
            flagged_seen += 1;
        }
    }
    // demo-data/day/README.md: 12:20 carries one quote moved off the market.
    assert!(flagged_seen >= 1, "the planted off-market quote is flagged");
}
