//! Replication against outside references: Heston smiles priced by QuantLib's
//! `AnalyticHestonEngine` (Heston 1993, RFS 6(2)) must reproduce the Heston closed
//! forms of the variance and gamma swaps (MATH.md section 5), and rough Heston smiles
//! priced by QuantLib's `AnalyticRoughHestonEngine` must reproduce the rough Heston
//! leverage formula (El Euch & Rosenbaum 2019, Math. Finance 29(1)).
//! Fixtures and the scripts that generated them (with versions) are in
//! `tests/fixtures/heston/` and `tests/fixtures/rough_heston/`.

use logstrip::analytics::analysis::{analyze, Analysis};
use logstrip::analytics::models::leverage::{LeverageCurve, LeverageParams};
use logstrip::analytics::numerics::quadrature::{integrate, QuadratureTolerance};
use logstrip::analytics::special::mittag_leffler::mittag_leffler;
use serde_json::Value;

fn fixture(path: &str) -> Value {
    let full = format!("{}/tests/fixtures/{path}", env!("CARGO_MANIFEST_DIR"));
    serde_json::from_str(&std::fs::read_to_string(&full).expect("fixture present")).expect("fixture is JSON")
}

fn case<'a>(doc: &'a Value, name: &str) -> &'a Value {
    doc["cases"].as_array().expect("cases").iter().find(|c| c["name"] == name).expect("case present")
}

/// Runs a fixture snapshot through the JSON front door with the given smile method.
fn analyse(case: &Value, smile: &str) -> Analysis {
    let mut snapshot = case["snapshot"].clone();
    snapshot["smile"] = Value::from(smile);
    snapshot["fit"] = serde_json::json!({"model": "none"});
    let parsed = logstrip::wire::parse_snapshot(&snapshot.to_string()).expect("fixture snapshot is valid");
    analyze(&parsed.slices, &parsed.options).expect("analysis")
}

struct Tolerances {
    vs_rel: f64,
    gs_rel: f64,
    ls_abs: f64,
}

fn check_against_expected(case: &Value, analysis: &Analysis, tol: Tolerances) {
    let expected = case["expected"].as_array().expect("expected");
    assert_eq!(expected.len(), analysis.slices.len());
    let mut report = Vec::new();
    let mut failed = false;
    for (e, s) in expected.iter().zip(&analysis.slices) {
        let tau = e["tau"].as_f64().expect("tau");
        assert!((tau - s.tau).abs() < 1e-9, "expiry order differs: {tau} vs {}", s.tau);
        let (vs, gs, ls) = (
            e["variance_swap"].as_f64().expect("vs"),
            e["gamma_swap"].as_f64().expect("gs"),
            e["leverage_swap"].as_f64().expect("ls"),
        );
        let l = s.replication.levels;
        let (vs_err, gs_err, ls_err) =
            ((l.variance / vs - 1.0).abs(), (l.gamma / gs - 1.0).abs(), (l.leverage - ls).abs());
        failed |= vs_err > tol.vs_rel || gs_err > tol.gs_rel || ls_err > tol.ls_abs;
        report.push(format!(
            "tau {tau:.4}: VS {:.10} vs {vs:.10} (rel {vs_err:.1e}), GS rel {gs_err:.1e}, LS {:.3e} vs {ls:.3e} (abs {ls_err:.1e}), wing share {:.2e}",
            l.variance, l.leverage, s.replication.wing_share
        ));
    }
    let text = report.join("\n");
    println!("{}\n{text}", case["name"]);
    assert!(
        !failed,
        "{}: tolerances VS {:e} rel, GS {:e} rel, LS {:e} abs exceeded:\n{text}",
        case["name"], tol.vs_rel, tol.gs_rel, tol.ls_abs
    );
}

/// 81 strikes over +-6 standard deviations, noise-free: VS and GS within 1e-5
/// relative, LS within 1e-6 absolute (the tolerances).
#[test]
fn heston_dense_6sd_matches_closed_forms() {
    let doc = fixture("heston/smiles.json");
    let c = case(&doc, "dense_6sd");
    check_against_expected(c, &analyse(c, "monotone"), Tolerances { vs_rel: 1e-5, gs_rel: 1e-5, ls_abs: 1e-6 });
}

/// 80 strikes over +-4 standard deviations: the wings carry 1-3% of VS.
/// VS within 2e-4 relative, GS within 1e-4, LS within 8e-6 (the tolerances).
#[test]
fn heston_dense_4sd_matches_closed_forms() {
    let doc = fixture("heston/smiles.json");
    let c = case(&doc, "dense_4sd");
    check_against_expected(c, &analyse(c, "monotone"), Tolerances { vs_rel: 2e-4, gs_rel: 1e-4, ls_abs: 8e-6 });
}

/// 15 strikes over +-1.5 standard deviations with +-0.5 vol point noise and a one
/// vol point bid/ask: the default smoothing SVI fit gets VS and GS within 3% and LS
/// within 3e-3 (the tolerances).
#[test]
fn heston_sparse_noisy_matches_closed_forms_with_svi() {
    let doc = fixture("heston/smiles.json");
    let c = case(&doc, "sparse_noisy");
    check_against_expected(c, &analyse(c, "svi"), Tolerances { vs_rel: 0.03, gs_rel: 0.03, ls_abs: 3e-3 });
}

/// The model side of the same check: the leverage formula at a = 1, integrated
/// against Heston's exponential forward-variance curve, equals the closed-form
/// `GS - VS` of MATH.md section 5 (both published formulas; tolerance 1e-10 from
/// the quadrature's 1e-12 relative target).
#[test]
fn heston_leverage_formula_matches_closed_form() {
    let doc = fixture("heston/smiles.json");
    let m = &doc["model"];
    let (v0, kappa, theta, sigma, rho) = (
        m["v0"].as_f64().expect("v0"),
        m["kappa"].as_f64().expect("kappa"),
        m["theta"].as_f64().expect("theta"),
        m["sigma"].as_f64().expect("sigma"),
        m["rho"].as_f64().expect("rho"),
    );
    let c = rho * sigma;
    let mu = kappa - c;
    for e in case(&doc, "dense_6sd")["expected"].as_array().expect("expected") {
        let t = e["tau"].as_f64().expect("tau");
        // L(T) = Int_0^T xi(s) c (T-s) E_{1,2}(-mu (T-s)) ds, xi(s) = theta + (v0 - theta) e^{-kappa s}.
        let tol = QuadratureTolerance { relative: 1e-13, absolute: 1e-300, max_evaluations: 100_000 };
        let q = integrate(
            |s| {
                let u = t - s;
                let xi = theta + (v0 - theta) * (-kappa * s).exp();
                [xi * c * u * mittag_leffler(1.0, 2.0, -mu * u).expect("E_{1,2}")]
            },
            &[0.0, t],
            tol,
        );
        let ls_model = q.value[0] / t;
        let ls_closed = e["leverage_swap"].as_f64().expect("ls");
        assert!(
            (ls_model - ls_closed).abs() < 1e-10,
            "tau {t}: formula {ls_model:e}, closed form {ls_closed:e}, tol 1e-10"
        );
    }
}

/// Rough Heston smiles from QuantLib 1.44's `AnalyticRoughHestonEngine` (lambda =
/// its kappa, nu = its sigma, flat forward variance v0): replicated VS equals v0 and
/// replicated LS equals `v0 Phi(T) / T` from our leverage formula, to about 1e-5
/// (what the engine's own discretisation allows, per the issue).
#[test]
fn rough_heston_smiles_reproduce_the_leverage_formula() {
    // Without mean reversion (QuantLib needs kappa > 0: 1e-10) and with lambda = 0.5.
    for file in ["rough_heston/smiles.json", "rough_heston/smiles_kappa0.5.json"] {
        rough_heston_file_reproduces_the_leverage_formula(&fixture(file));
    }
}

fn rough_heston_file_reproduces_the_leverage_formula(doc: &Value) {
    for c in doc["cases"].as_array().expect("cases") {
        let m = if c["model"].is_object() { &c["model"] } else { &doc["model"] };
        assert!(m["theta"] == m["v0"], "the check assumes a flat forward variance curve (theta = v0)");
        let v0 = m["v0"].as_f64().expect("v0");
        let params = LeverageParams {
            hurst: m["hurst"].as_f64().expect("hurst"),
            rho_nu: m["rho"].as_f64().expect("rho") * m["sigma"].as_f64().expect("sigma"),
            mean_reversion: m["kappa"].as_f64().expect("kappa"),
        };
        let analysis = analyse(c, "monotone");
        for (e, s) in c["expected"].as_array().expect("expected").iter().zip(&analysis.slices) {
            let t = s.tau;
            let curve = LeverageCurve::new(&[t], &[v0]).expect("curve");
            let model_ls = curve.total_leverage(&params).expect("model")[0] / t;
            let expected_ls = e["leverage_swap"].as_f64().expect("ls");
            let l = s.replication.levels;
            println!(
                "{} tau {t}: replicated LS {:.4e}, formula {model_ls:.4e}, mpmath {expected_ls:.4e}, VS {:.6}",
                c["name"], l.leverage, l.variance
            );
            // Our formula against the fixture's mpmath evaluation of the same formula.
            assert!((model_ls - expected_ls).abs() < 1e-12, "formula {model_ls:e} vs mpmath {expected_ls:e}");
            // Replication of QuantLib's smiles against the formula (engine noise ~1e-5).
            assert!(
                (l.leverage - model_ls).abs() < 1e-5,
                "tau {t}: replicated {:e} vs formula {model_ls:e}",
                l.leverage
            );
            assert!((l.variance - v0).abs() < 1e-5, "tau {t}: VS {} vs v0 {v0}", l.variance);
        }
    }
}

/// The sparse case is one noise draw; the smoothing fit must hold across draws.
/// Forty draws of uniform +-0.5 vol point noise (a fixed-seed generator, so the
/// test is deterministic) on the noise-free QuantLib vols at the sparse strikes:
/// per expiry, half the draws within 2% on the variance swap, 90% within 3.5% and
/// none beyond 5%. These bounds are ours (the issue sets 3% for one draw); measured
/// when this test was written: worst draw 4.3%, worst p90 3.1%, worst median 1.8%.
#[test]
fn heston_sparse_fit_holds_across_noise_draws() {
    let doc = fixture("heston/smiles.json");
    let dense = case(&doc, "dense_6sd");
    let sparse = case(&doc, "sparse_noisy");
    // Noise-free vols at the sparse strikes: the dense QuantLib smile interpolated
    // linearly in vol (dense spacing 0.15 sd; interpolation error ~1e-5 in vol).
    let mut clean = sparse["snapshot"].clone();
    for (s, d) in clean["slices"]
        .as_array_mut()
        .expect("slices")
        .iter_mut()
        .zip(dense["snapshot"]["slices"].as_array().expect("slices"))
    {
        let nodes: Vec<(f64, f64)> = d["points"]
            .as_array()
            .expect("points")
            .iter()
            .map(|p| (p["strike"].as_f64().expect("strike"), p["vol"].as_f64().expect("vol")))
            .collect();
        for p in s["points"].as_array_mut().expect("points") {
            let k = p["strike"].as_f64().expect("strike");
            let i = nodes.windows(2).position(|w| w[0].0 <= k && k <= w[1].0).expect("inside dense range");
            let ((k0, v0), (k1, v1)) = (nodes[i], nodes[i + 1]);
            let v = v0 + (v1 - v0) * (k.ln() - k0.ln()) / (k1.ln() - k0.ln());
            p["vol"] = v.into();
        }
    }
    let mut state: u64 = 0x5eed_2026;
    let mut uniform = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let draws = 40;
    let expected = sparse["expected"].as_array().expect("expected");
    let mut errors = vec![Vec::new(); expected.len()];
    for _ in 0..draws {
        let mut snap = clean.clone();
        for s in snap["slices"].as_array_mut().expect("slices") {
            for p in s["points"].as_array_mut().expect("points") {
                let v = p["vol"].as_f64().expect("vol") + (uniform() - 0.5) * 0.01;
                p["vol"] = v.into();
                p["bid"] = (v - 0.005).into();
                p["ask"] = (v + 0.005).into();
            }
        }
        let analysis = analyse(&serde_json::json!({ "snapshot": snap }), "svi");
        for (j, (s, e)) in analysis.slices.iter().zip(expected).enumerate() {
            errors[j].push((s.replication.levels.variance / e["variance_swap"].as_f64().expect("vs") - 1.0).abs());
        }
    }
    for (j, mut e) in errors.into_iter().enumerate() {
        e.sort_by(f64::total_cmp);
        let (median, p90, worst) = (e[draws / 2], e[(draws * 9) / 10 - 1], e[draws - 1]);
        println!("expiry {j}: median {median:.4}, p90 {p90:.4}, worst {worst:.4}");
        assert!(
            median <= 0.02 && p90 <= 0.035 && worst <= 0.05,
            "expiry {j}: median {median:.4} (tol 0.02), p90 {p90:.4} (tol 0.035), worst {worst:.4} (tol 0.05)"
        );
    }
}
