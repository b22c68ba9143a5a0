//! Calibration recovers known parameters from noise-free synthetic leverage curves
//! (the acceptance check). The curves come from the same leverage formula
//! the calibration uses (MATH.md section 5), so this tests the optimiser, not the
//! formula; the formula itself is checked against QuantLib in `reference_heston.rs`.

use logstrip::analytics::calibrate::{fit_leverage, FitSpec, FitStatus, LeverageTarget, ModelKind, ParamName};
use logstrip::analytics::models::leverage::{LeverageCurve, LeverageParams};

/// Parameter accuracy asked by the issue for noise-free curves.
const PARAM_TOL: f64 = 1e-6;

fn synthetic(params: LeverageParams) -> LeverageTarget {
    let taus: Vec<f64> = vec![0.04, 0.08, 0.17, 0.25, 0.5, 0.75, 1.0, 1.5, 2.0, 3.0];
    // An upward-sloping forward-variance curve.
    let xi: Vec<f64> = taus.iter().map(|t| 0.03 + 0.01 * t.sqrt()).collect();
    let curve = LeverageCurve::new(&taus, &xi).expect("valid curve");
    let total = curve.total_leverage(&params).expect("model evaluates");
    let mut vs = Vec::new();
    let mut acc = 0.0;
    let mut prev = 0.0;
    for (t, x) in taus.iter().zip(&xi) {
        acc += x * (t - prev);
        prev = *t;
        vs.push(acc / t);
    }
    LeverageTarget {
        leverage_swap: total.iter().zip(&taus).map(|(l, t)| l / t).collect(),
        taus,
        variance_swap: vs,
        uncertainty: None,
    }
}

fn assert_recovers(truth: LeverageParams, spec: FitSpec) {
    let target = synthetic(truth);
    let fit = fit_leverage(&target, &spec);
    // A parameter that ends on its bound is reported as such, never as plain
    // convergence.
    let expected = if fit.active_bounds.iter().any(|b| *b != ParamName::Hurst) {
        FitStatus::AtBound
    } else {
        FitStatus::Converged
    };
    assert_eq!(fit.status, expected, "{fit:?}");
    let pairs = [
        ("hurst", fit.params.hurst, truth.hurst),
        ("rho_nu", fit.params.rho_nu, truth.rho_nu),
        ("mean_reversion", fit.params.mean_reversion, truth.mean_reversion),
    ];
    for (name, got, want) in pairs {
        assert!(
            (got - want).abs() <= PARAM_TOL,
            "{name}: computed {got}, expected {want}, tolerance {PARAM_TOL:e} (fit: {fit:?})"
        );
    }
}

#[test]
fn recovers_rough_heston_with_mean_reversion() {
    let truth = LeverageParams { hurst: 0.1, rho_nu: -0.45, mean_reversion: 0.8 };
    assert_recovers(truth, FitSpec { model: Some(ModelKind::RoughHeston), ..FitSpec::default() });
}

#[test]
fn recovers_rough_heston_without_mean_reversion() {
    let truth = LeverageParams { hurst: 0.07, rho_nu: -0.3, mean_reversion: 0.0 };
    let spec = FitSpec { model: Some(ModelKind::RoughHeston), mean_reversion: Some(0.0), ..FitSpec::default() };
    assert_recovers(truth, spec);
}

/// Mean reversion free but truly zero: the solution lies on the bound, where the
/// solver must hold it (and report it) instead of stepping out of the box.
#[test]
fn recovers_mean_reversion_on_its_bound() {
    let truth = LeverageParams { hurst: 0.12, rho_nu: -0.4, mean_reversion: 0.0 };
    assert_recovers(truth, FitSpec { model: Some(ModelKind::RoughHeston), ..FitSpec::default() });
    let fit = fit_leverage(&synthetic(truth), &FitSpec::default());
    assert_eq!(fit.active_bounds, vec![ParamName::MeanReversion], "{fit:?}");
    assert_eq!(fit.status, FitStatus::AtBound, "{fit:?}");
    assert!(fit.message.as_deref().is_some_and(|m| m.contains("mean_reversion")), "{fit:?}");
}

#[test]
fn recovers_classical_heston() {
    let truth = LeverageParams { hurst: 0.5, rho_nu: -0.6, mean_reversion: 2.0 };
    assert_recovers(truth, FitSpec { model: Some(ModelKind::Heston), ..FitSpec::default() });
}

#[test]
fn too_few_expiries_is_a_reported_failure_not_an_error() {
    let mut target = synthetic(LeverageParams { hurst: 0.1, rho_nu: -0.4, mean_reversion: 0.5 });
    target.taus.truncate(2);
    target.variance_swap.truncate(2);
    target.leverage_swap.truncate(2);
    let fit = fit_leverage(&target, &FitSpec::default());
    assert_eq!(fit.status, FitStatus::Failed);
    assert!(fit.message.as_deref().unwrap_or("").contains("at least"), "{:?}", fit.message);
}

mod gradient {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

        /// The analytic derivatives in `rho_nu` and `mean_reversion` (and the
        /// backward difference in `hurst`) match central finite differences of the
        /// model itself. Tolerance: central differences with step 1e-5 are good to
        /// ~1e-9 relative here; the Hurst derivative is a 1e-7 backward difference.
        #[test]
        fn gradient_matches_finite_differences(
            hurst in 0.03f64..0.49, rho_nu in -2.0f64..0.3, mean_reversion in 0.0f64..5.0,
        ) {
            let taus = [0.1, 0.4, 1.0, 2.5];
            let xi = [0.04, 0.045, 0.05, 0.055];
            let curve = LeverageCurve::new(&taus, &xi).expect("curve");
            let p = LeverageParams { hurst, rho_nu, mean_reversion };
            let g = curve.total_leverage_with_gradient(&p).expect("gradient");
            let h = 1e-5;
            let bump = |i: usize, s: f64| {
                let mut q = p;
                match i { 0 => q.hurst += s, 1 => q.rho_nu += s, _ => q.mean_reversion += s }
                curve.total_leverage(&q).expect("model")
            };
            for i in 0..3 {
                let (up, down) = (bump(i, h), bump(i, -h));
                for j in 0..taus.len() {
                    let fd = (up[j] - down[j]) / (2.0 * h);
                    let scale = fd.abs().max(g.total[j].abs()).max(1e-8);
                    let tol = if i == 0 { 1e-5 } else { 1e-7 };
                    prop_assert!((g.gradient[j][i] - fd).abs() <= tol * scale,
                        "param {i} expiry {j}: analytic {} vs fd {fd}", g.gradient[j][i]);
                }
            }
        }
    }
}

/// The convexity report against a closed form: for classical Heston (a = 1) with a
/// flat forward variance `theta`, `K(t) = nu (1 - e^{-lambda t}) / lambda` and
/// `Var(Int_0^T v) = theta nu^2 / lambda^2 [T - 2 (1 - e^{-lambda T}) / lambda +
/// (1 - e^{-2 lambda T}) / (2 lambda)]` (integrating MATH.md section 5's formula by
/// hand; the square-root process result). The volatility swap follows Brockhaus &
/// Long (2000): `sqrt(VS) - Var(RV) / (8 VS^1.5)`. Tolerance 1e-10 relative: the
/// quadrature is asked for 1e-12.
#[test]
fn convexity_matches_the_heston_closed_form() {
    let (theta, nu, lambda, rho) = (0.04, 0.5, 1.5, -0.7);
    let taus = vec![0.25, 0.5, 1.0, 2.0];
    let target = LeverageTarget {
        leverage_swap: vec![-0.001; taus.len()],
        variance_swap: vec![theta; taus.len()],
        taus: taus.clone(),
        uncertainty: None,
    };
    let spec = FitSpec {
        model: Some(ModelKind::Heston),
        rho_nu: Some(rho * nu),
        mean_reversion: Some(lambda),
        nu: Some(nu),
        ..FitSpec::default()
    };
    let fit = fit_leverage(&target, &spec);
    let convexity = fit.convexity.expect("nu given: convexity reported");
    assert!((fit.rho.expect("rho") - rho).abs() < 1e-15);
    for (c, &t) in convexity.iter().zip(&taus) {
        let var_total = theta * nu * nu / (lambda * lambda)
            * (t - 2.0 * (1.0 - (-lambda * t).exp()) / lambda + (1.0 - (-2.0 * lambda * t).exp()) / (2.0 * lambda));
        let var_rv = var_total / (t * t);
        let sd = c.realized_variance_stdev;
        assert!((sd * sd / var_rv - 1.0).abs() < 1e-10, "tau {t}: Var(RV) {} vs closed form {var_rv}", sd * sd);
        let vol_swap = theta.sqrt() - var_rv / (8.0 * theta.powf(1.5));
        assert!((c.volatility_swap - vol_swap).abs() < 1e-12, "tau {t}: {} vs {vol_swap}", c.volatility_swap);
    }
}

/// With `nu` given, `rho = rho_nu / nu` must stay a correlation: data asking for
/// `|rho_nu| > nu` end with `rho_nu` on the bound `-nu`, reported as such (identity:
/// the bound is `[-nu, nu]` by the definition of `rho`).
#[test]
fn a_given_nu_keeps_rho_a_correlation() {
    let truth = LeverageParams { hurst: 0.15, rho_nu: -0.6, mean_reversion: 1.0 };
    let spec = FitSpec { model: Some(ModelKind::RoughHeston), nu: Some(0.4), ..FitSpec::default() };
    let fit = fit_leverage(&synthetic(truth), &spec);
    assert_eq!(fit.status, FitStatus::AtBound, "{fit:?}");
    assert!(fit.active_bounds.contains(&ParamName::RhoNu), "{fit:?}");
    assert!((fit.params.rho_nu + 0.4).abs() < 1e-12, "{fit:?}");
    let rho = fit.rho.expect("rho with nu");
    assert!((rho + 1.0).abs() < 1e-12 && fit.message.as_deref().is_some_and(|m| m.contains("rho")), "{fit:?}");
    // A fixed rho_nu beyond nu cannot be met: a failed fit naming the correlation.
    let fixed = FitSpec { rho_nu: Some(-0.6), ..spec };
    let refused = fit_leverage(&synthetic(truth), &fixed);
    assert_eq!(refused.status, FitStatus::Failed);
    assert!(refused.message.as_deref().is_some_and(|m| m.contains("outside [-1, 1]")), "{refused:?}");
}

/// A fit that runs out of its evaluation budget stops with the best point it reached
/// and says so, instead of running on or claiming convergence.
#[test]
fn an_exhausted_budget_is_reported_with_the_best_point() {
    let truth = LeverageParams { hurst: 0.1, rho_nu: -0.45, mean_reversion: 0.8 };
    let target = synthetic(truth);
    let spec = FitSpec { model: Some(ModelKind::RoughHeston), max_evaluations: Some(3), ..FitSpec::default() };
    let fit = fit_leverage(&target, &spec);
    assert_eq!(fit.status, FitStatus::BudgetExhausted, "{fit:?}");
    assert!(fit.message.as_deref().is_some_and(|m| m.contains("evaluation budget")), "{fit:?}");
    assert!(fit.params.hurst.is_finite() && fit.params.rho_nu.is_finite() && fit.leverage_rmse.is_finite());
    // The best point reached is no worse than the start grid's (which the budget does
    // not count) and the full fit is better still.
    let full = fit_leverage(&target, &FitSpec { model: Some(ModelKind::RoughHeston), ..FitSpec::default() });
    assert!(full.leverage_rmse <= fit.leverage_rmse, "{full:?} vs {fit:?}");
    // A time budget of nothing stops before the first solver evaluation.
    let timed = FitSpec { time_budget: Some(std::time::Duration::ZERO), ..spec };
    let fit = fit_leverage(&target, &FitSpec { max_evaluations: None, ..timed });
    assert_eq!(fit.status, FitStatus::BudgetExhausted, "{fit:?}");
    assert!(fit.message.as_deref().is_some_and(|m| m.contains("time budget")), "{fit:?}");
}

/// The same input gives the same fit, bit for bit.
#[test]
fn fits_are_reproducible_bit_for_bit() {
    let target = synthetic(LeverageParams { hurst: 0.2, rho_nu: -0.5, mean_reversion: 1.5 });
    let a = fit_leverage(&target, &FitSpec::default());
    let b = fit_leverage(&target, &FitSpec::default());
    let bits = |f: &logstrip::analytics::calibrate::FitOutcome| {
        [f.params.hurst, f.params.rho_nu, f.params.mean_reversion, f.leverage_rmse].map(f64::to_bits)
    };
    assert_eq!(bits(&a), bits(&b));
    assert_eq!(
        a.model_leverage_swap.iter().map(|x| x.to_bits()).collect::<Vec<_>>(),
        b.model_leverage_swap.iter().map(|x| x.to_bits()).collect::<Vec<_>>()
    );
}
