//! The out-of-the-money Black price and `erfcx` against mpmath
//! (tests/fixtures/black/generate.py, 60 digits).

use logstrip::analytics::black::{mirrored_call, otm_price};
use logstrip::analytics::numerics::erfcx::erfcx;
use logstrip::analytics::tolerances::{BLACK_PRICE_REL_TOL_PER_CONDITION, ERFCX_REL_TOL};

#[derive(serde::Deserialize)]
struct Fixture {
    rows: Vec<(f64, f64, f64, f64)>,
    erfcx: Vec<(f64, f64)>,
}

fn fixture() -> Fixture {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/black/prices.json");
    serde_json::from_str(&std::fs::read_to_string(path).expect("fixture present")).expect("fixture parses")
}

/// Every grid point of k in [-15, 15] and w in [1e-5, 9] with a price above 1e-300,
/// within the stated tolerance per unit of the point's condition.
#[test]
fn otm_price_matches_mpmath_across_the_wings() {
    let rows = fixture().rows;
    assert!(rows.len() > 2_000);
    for (k, w, price, condition) in rows {
        let rel = (otm_price(k, w) / price - 1.0).abs();
        let tol = BLACK_PRICE_REL_TOL_PER_CONDITION * condition;
        assert!(rel <= tol, "k={k} w={w}: rel err {rel:e} > tol {tol:e} (condition {condition:e})");
        // The call at |k| is the put in units of the strike on the put side.
        let mirrored = if k < 0.0 { price * (-k).exp() } else { price };
        let rel = (mirrored_call(k, w) / mirrored - 1.0).abs();
        assert!(rel <= tol + 4.0 * f64::EPSILON, "k={k} w={w}: mirrored call rel err {rel:e} > {tol:e}");
    }
}

#[test]
fn erfcx_matches_mpmath() {
    for (x, value) in fixture().erfcx {
        let rel = (erfcx(x) / value - 1.0).abs();
        assert!(rel <= ERFCX_REL_TOL, "erfcx({x}): rel err {rel:e} > {ERFCX_REL_TOL:e}");
    }
}

/// Limits from the definition: erfcx(0) = 1, erfcx(x) ~ 1/(x sqrt(pi)) for large x,
/// erfcx(-x) = 2 exp(x^2) - erfcx(x); no NaN or panic at the edges.
#[test]
fn erfcx_edges() {
    assert!((erfcx(0.0) - 1.0).abs() <= f64::EPSILON);
    let x = 1e10;
    assert!((erfcx(x) * x * std::f64::consts::PI.sqrt() - 1.0).abs() <= ERFCX_REL_TOL);
    assert!(erfcx(f64::INFINITY).abs() <= f64::MIN_POSITIVE);
    assert!(erfcx(f64::NAN).is_nan());
    let reflected = 2.0 * 1.5_f64.powi(2).exp() - erfcx(1.5);
    assert!((erfcx(-1.5) / reflected - 1.0).abs() <= ERFCX_REL_TOL);
    assert_eq!(otm_price(f64::NAN, 0.04).to_bits(), 0.0_f64.to_bits());
}
