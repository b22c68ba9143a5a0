//! Example requests of the invented index KESTREL50: the request bodies shown in the
//! OpenAPI document, and inputs the tests post.

use serde_json::{json, Value};

/// A small valid snapshot of the invented index KESTREL50.
pub fn snapshot_example() -> Value {
    let slice = |expiry: &str, forward: f64, vols: [f64; 5]| {
        let strikes = [3600.0, 3900.0, 4200.0, 4500.0, 4800.0];
        json!({
            "expiry": expiry, "forward": forward, "discount": 0.995,
            "points": strikes.iter().zip(vols).map(|(k, v)| json!({"strike": k, "vol": v})).collect::<Vec<_>>()
        })
    };
    json!({
        "underlying": "KESTREL50",
        "as_of": "2026-11-30T15:30:00Z",
        "spot": 4210.5,
        "slices": [
            slice("2026-12-18T21:00:00Z", 4215.2, [0.32, 0.26, 0.205, 0.17, 0.165]),
            slice("2027-03-19T21:00:00Z", 4240.0, [0.29, 0.25, 0.212, 0.185, 0.172]),
            slice("2027-06-18T21:00:00Z", 4262.0, [0.275, 0.245, 0.215, 0.192, 0.178]),
            slice("2027-12-17T21:00:00Z", 4305.0, [0.262, 0.24, 0.218, 0.2, 0.187])
        ],
        "fit": {"model": "rough_heston"}
    })
}

/// The same kind of snapshot as CSV (two expiries of the invented index KESTREL50).
pub const CSV_SNAPSHOT_EXAMPLE: &str = "underlying,as_of,expiry,strike,vol,forward,discount
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,3600,0.32,4215.2,0.995
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,3900,0.26,4215.2,0.995
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,4200,0.205,4215.2,0.995
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,4500,0.17,4215.2,0.995
KESTREL50,2026-11-30T15:30:00Z,2026-12-18T21:00:00Z,4800,0.165,4215.2,0.995
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,3600,0.275,4262,0.99
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,3900,0.245,4262,0.99
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,4200,0.215,4262,0.99
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,4500,0.192,4262,0.99
KESTREL50,2026-11-30T15:30:00Z,2027-06-18T21:00:00Z,4800,0.178,4262,0.99
";

/// Swap levels of the invented index KESTREL50.
pub fn swaps_example() -> Value {
    json!({
        "underlying": "KESTREL50",
        "as_of": "2026-11-30T15:30:00Z",
        "swaps": [
            {"tau": 0.05, "variance_swap": 0.0406, "gamma_swap": 0.0399},
            {"tau": 0.3, "variance_swap": 0.0441, "gamma_swap": 0.0420},
            {"tau": 1.0, "variance_swap": 0.0484, "gamma_swap": 0.0450},
            {"tau": 2.0, "variance_swap": 0.0510, "gamma_swap": 0.0466}
        ],
        "fit": {"model": "rough_heston"}
    })
}

/// Example request of the valuation endpoint.
pub fn valuation_example() -> Value {
    json!({
        "snapshot": snapshot_example(),
        "holidays": ["2026-12-25", "2027-01-01"],
        "positions": [
            {"id": "VS-0142", "kind": "variance", "start": "2026-09-30T21:00:00Z", "maturity": "2027-06-18T21:00:00Z",
             "strike_vol": 0.21, "vega_notional": 100000.0, "side": "long",
             "realized": {"variance": 0.0392}},
            {"id": "LS-0007", "kind": "leverage", "start": "2026-11-30T15:30:00Z", "maturity": "2027-03-19T21:00:00Z",
             "strike": -0.0015, "variance_notional": 3000.0, "side": "short"}
        ]
    })
}
