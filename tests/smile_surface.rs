//! Smiles fitted across expiries: a slice quoted on one side only borrows its
//! missing wing from its neighbours instead of making one up.

use logstrip::analytics::analysis::{analyze, AnalyzeOptions};
use logstrip::analytics::slice::{Slice, VolQuote};
use logstrip::analytics::smile::svi::SviParams;
use logstrip::analytics::smile::SmileCurve;

/// An invented SVI surface whose wing slopes grow smoothly with expiry.
fn truth(tau: f64) -> SviParams {
    SviParams { a: 0.02 * tau, b: 0.12 * tau.sqrt(), rho: -0.6, m: 0.02, sigma: 0.2 * tau.sqrt() }
}

fn slice(tau: f64, k_from: f64, k_to: f64) -> Slice {
    let p = truth(tau);
    let points: Vec<VolQuote> = (0..25)
        .map(|i| {
            let k = k_from + (k_to - k_from) * i as f64 / 24.0;
            VolQuote { strike: 100.0 * k.exp(), vol: (p.total_variance(k) / tau).sqrt(), bid: None, ask: None }
        })
        .collect();
    Slice::from_vols(tau, 100.0, 1.0, &points).expect("valid slice")
}

#[test]
fn a_slice_quoted_on_calls_only_takes_its_put_wing_from_the_neighbours() {
    let taus = [0.1, 0.25, 0.5, 1.0, 2.0];
    let slices: Vec<Slice> = taus
        .iter()
        .map(|&tau| {
            let sd = (truth(tau).total_variance(0.0)).sqrt();
            if (tau - 0.5).abs() < 1e-12 {
                slice(tau, 0.0, 3.0 * sd)
            } else {
                slice(tau, -3.0 * sd, 3.0 * sd)
            }
        })
        .collect();
    let analysis = analyze(&slices, &AnalyzeOptions::default()).expect("analysis");
    let s = analysis.slices.iter().find(|s| (s.tau - 0.5).abs() < 1e-12).expect("slice at 0.5");
    assert!(matches!(s.smile.curve, SmileCurve::SviSpline(_)), "the default smile is SVI plus a residual spline");
    let (true_left, _) = truth(0.5).wing_slopes();
    let (fitted_left, _) = s.smile.curve.wing_slopes();
    // Tolerance 25%: the wing comes from a smooth fit across the other expiries and a
    // prior, not from quotes (a rule of thumb for "not made up", no source).
    assert!(
        (fitted_left / true_left - 1.0).abs() < 0.25,
        "left wing slope {fitted_left} against the surface's {true_left}"
    );
}
