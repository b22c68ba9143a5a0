//! Property tests: arbitrary numbers thrown at the public entry points never make
//! them panic; they return a value or an error.

use logstrip::analytics::analysis::{analyze, AnalyzeOptions};
use logstrip::analytics::black::{implied_total_variance, otm_price};
use logstrip::analytics::calibrate::{fit_leverage, FitSpec, LeverageTarget, ModelKind};
use logstrip::analytics::slice::{PriceQuote, Slice, VolQuote};
use logstrip::analytics::smile::SmileMethod;
use logstrip::analytics::special::mittag_leffler::{mittag_leffler, MittagLefflerSeries};
use logstrip::wire::{parse_snapshot, parse_swaps};
use proptest::prelude::*;

/// Any f64, weighted towards awkward values.
fn any_number() -> impl Strategy<Value = f64> {
    prop_oneof![
        4 => -10.0f64..10.0,
        2 => 1e-9f64..1e4,
        1 => Just(0.0),
        1 => Just(f64::NAN),
        1 => Just(f64::INFINITY),
        1 => Just(f64::NEG_INFINITY),
        1 => Just(-0.0),
        1 => any::<f64>(),
    ]
}

fn vol_quotes() -> impl Strategy<Value = Vec<VolQuote>> {
    prop::collection::vec(
        (any_number(), any_number(), prop::option::of(any_number()), prop::option::of(any_number()))
            .prop_map(|(strike, vol, bid, ask)| VolQuote { strike, vol, bid, ask }),
        0..12,
    )
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 300, ..ProptestConfig::default() })]

    #[test]
    fn slices_and_analysis_never_panic(
        tau in any_number(), forward in any_number(), discount in any_number(),
        points in vol_quotes(), monotone in any::<bool>(), fit in any::<bool>(),
    ) {
        if let Ok(slice) = Slice::from_vols(tau, forward, discount, &points) {
            let options = AnalyzeOptions {
                smile: if monotone { SmileMethod::Monotone } else { SmileMethod::Svi },
                fit: fit.then(FitSpec::default),
            };
            let _ = analyze(&[slice], &options);
        }
    }

    #[test]
    fn sorted_positive_quotes_always_analyse(
        tau in 1e-3f64..5.0, vols in prop::collection::vec(0.01f64..2.0, 3..15), monotone in any::<bool>(),
    ) {
        // Valid input must give a result, not an error.
        let points: Vec<VolQuote> = vols.iter().enumerate()
            .map(|(i, &v)| VolQuote { strike: 50.0 + 10.0 * i as f64, vol: v, bid: None, ask: None }).collect();
        let slice = Slice::from_vols(tau, 100.0, 1.0, &points).expect("valid");
        let options = AnalyzeOptions { smile: if monotone { SmileMethod::Monotone } else { SmileMethod::Svi }, fit: None };
        let a = analyze(&[slice], &options).expect("valid input analyses");
        prop_assert!(a.slices[0].replication.levels.variance.is_finite());
    }

    #[test]
    fn price_slices_never_panic(
        tau in any_number(), forward in prop::option::of(any_number()), discount in any_number(),
        prices in prop::collection::vec((any_number(), prop::option::of(any_number()), prop::option::of(any_number())), 0..10),
    ) {
        let quotes: Vec<PriceQuote> = prices.iter().map(|&(strike, call, put)| PriceQuote { strike, call, put }).collect();
        if let Ok(slice) = Slice::from_prices(tau, forward, discount, &quotes) {
            let _ = analyze(&[slice], &AnalyzeOptions::default());
        }
    }

    #[test]
    fn fits_never_panic(
        rows in prop::collection::vec((any_number(), any_number(), any_number()), 0..8),
        heston in any::<bool>(), hurst in prop::option::of(any_number()), nu in prop::option::of(any_number()),
    ) {
        let target = LeverageTarget {
            taus: rows.iter().map(|r| r.0).collect(),
            variance_swap: rows.iter().map(|r| r.1).collect(),
            leverage_swap: rows.iter().map(|r| r.2).collect(),
            uncertainty: None,
        };
        let spec = FitSpec {
            model: Some(if heston { ModelKind::Heston } else { ModelKind::RoughHeston }),
            hurst, nu, ..FitSpec::default()
        };
        let _ = fit_leverage(&target, &spec);
    }

    #[test]
    fn black_and_mittag_leffler_never_panic(k in any_number(), w in any_number(), a in any_number(), b in any_number(), z in any_number()) {
        let _ = otm_price(k, w);
        let _ = implied_total_variance(k, w);
        let _ = mittag_leffler(a, b, z);
        if let Ok(series) = MittagLefflerSeries::new(a, b) {
            let _ = series.eval(z);
            let _ = series.eval_with_derivative(z);
        }
    }

    #[test]
    fn parsers_never_panic(text in ".{0,200}") {
        let _ = parse_snapshot(&text);
        let _ = parse_swaps(&text);
    }

    #[test]
    fn parsers_never_panic_on_json_shaped_input(
        tau in any_number(), strike in any_number(), vol in any_number(), extra in "[a-z_]{0,8}",
    ) {
        let num = |x: f64| if x.is_finite() { format!("{x:e}") } else { "null".to_string() };
        let text = format!(
            r#"{{"underlying":"X","as_of":"2026-01-01T00:00:00Z","slices":[{{"tau":{},"forward":100,"points":[{{"strike":{},"vol":{}}},{{"strike":101,"vol":0.2}},{{"strike":102,"vol":0.2}}]{}}}]}}"#,
            num(tau), num(strike), num(vol),
            if extra.is_empty() { String::new() } else { format!(r#","{extra}":1"#) }
        );
        if let Ok(snapshot) = parse_snapshot(&text) {
            let _ = analyze(&snapshot.slices, &snapshot.options);
        }
    }
}

/// Mutations of a valid document: a byte flipped, dropped or duplicated at random.
fn mutated(base: &'static str) -> impl Strategy<Value = String> {
    prop::collection::vec((0usize..base.len(), 0u8..3, any::<u8>()), 1..6).prop_map(move |edits| {
        let mut bytes = base.as_bytes().to_vec();
        for (at, kind, byte) in edits {
            let at = at.min(bytes.len().saturating_sub(1));
            match kind {
                0 => bytes[at] = byte,
                1 => {
                    bytes.remove(at);
                }
                _ => bytes.insert(at, byte),
            }
        }
        String::from_utf8_lossy(&bytes).into_owned()
    })
}

const CSV_SNAPSHOT: &str = "underlying,as_of,tau,strike,vol,bid,ask,forward
HERON,2026-11-30T15:30:00Z,0.5,80,0.26,0.25,0.27,100
HERON,2026-11-30T15:30:00Z,0.5,100,0.2,,,100
HERON,2026-11-30T15:30:00Z,0.5,120,0.18,,,100
HERON,2026-11-30T15:30:00Z,1.0,80,0.25,,,101
HERON,2026-11-30T15:30:00Z,1.0,100,0.21,,,101
HERON,2026-11-30T15:30:00Z,1.0,120,0.19,,,101
";

const JSON_SNAPSHOT: &str = r#"{"underlying":"HERON","as_of":"2026-11-30T15:30:00Z","slices":[
{"tau":0.5,"forward":100,"points":[{"strike":80,"vol":0.26},{"strike":100,"vol":0.2},{"strike":120,"vol":0.18}]},
{"expiry":"2027-11-30T15:30:00Z","forward":101,"points":[{"strike":80,"vol":0.25},{"strike":100,"vol":0.21},{"strike":120,"vol":0.19}]}],
"fit":{"model":"heston","fix":{"mean_reversion":1.0}}}"#;

proptest! {
    #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]

    /// The snapshot parsers (JSON and CSV) and the analysis behind them return a value
    /// or an error for any text, arbitrary or a mutation of a valid document.
    #[test]
    fn snapshot_parsers_never_panic_on_any_text(
        noise in ".{0,300}",
        json in mutated(JSON_SNAPSHOT),
        csv in mutated(CSV_SNAPSHOT),
    ) {
        use logstrip::wire::csv_input::{parse_closes_csv, parse_snapshot_csv, CsvHeader};
        for text in [&noise, &json, &csv] {
            let _ = logstrip::wire::analyze_text(text);
            let _ = parse_snapshot_csv(text, &CsvHeader::default());
            let _ = parse_closes_csv(text);
            let _ = parse_swaps(text);
        }
        if let Ok(snapshot) = parse_snapshot_csv(&csv, &CsvHeader::default()) {
            let _ = logstrip::wire::analyze_valid(snapshot);
        }
    }
}
