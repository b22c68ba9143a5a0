//! Checks the Mittag-Leffler module against mpmath reference values.
//!
//! Source of truth: tests/fixtures/mittag_leffler/values.json, written by generate.py in the
//! same folder (mpmath plain series in adaptive precision; mpmath and Python versions are
//! recorded in the file). Every input there has at most 15 significant digits, so
//! serde_json's decimal-to-double conversion reproduces the exact doubles mpmath used.

mod mittag_leffler_fixture;

use logstrip::analytics::special::mittag_leffler::{mittag_leffler, MittagLefflerSeries};
use mittag_leffler_fixture::field;

/// The accuracy target for E_{a,b}(z) on a in [0.5, 1], b in [a, a + 2],
/// z in [-200, 2]: 1e-12 relative.
const REL_TOL: f64 = 1e-12;

/// The fixture must cover at least this many points (the issue asks for 60 or more).
const MIN_FIXTURE_VALUES: usize = 60;

struct RefValue {
    alpha: f64,
    beta: f64,
    z: f64,
    value: f64,
}

fn load_fixture() -> (serde_json::Value, Vec<RefValue>) {
    let (json, entries) = mittag_leffler_fixture::read("values.json");
    let values = entries
        .iter()
        .map(|e| RefValue {
            alpha: field(e, "alpha"),
            beta: field(e, "beta"),
            z: field(e, "z"),
            value: field(e, "value"),
        })
        .collect();
    (json, values)
}

fn rel_err(computed: f64, expected: f64) -> f64 {
    ((computed - expected) / expected).abs()
}

#[test]
fn fixture_records_its_source() {
    let (json, values) = load_fixture();
    assert!(values.len() >= MIN_FIXTURE_VALUES, "only {} values", values.len());
    for key in ["source", "python", "mpmath"] {
        assert!(json[key].is_string(), "fixture lacks \"{key}\"");
    }
}

#[test]
fn matches_mpmath_reference_values() {
    let (json, values) = load_fixture();
    let source = json["source"].as_str().unwrap_or("mpmath");
    let mut worst = (0.0_f64, String::new());
    let mut failures = Vec::new();
    for r in &values {
        let one_shot = mittag_leffler(r.alpha, r.beta, r.z).expect("inputs are in the domain");
        let series = MittagLefflerSeries::new(r.alpha, r.beta).expect("inputs are in the domain");
        let fast = series.eval(r.z);
        for (how, got) in [("mittag_leffler", one_shot), ("MittagLefflerSeries::eval", fast)] {
            let err = rel_err(got, r.value);
            let line = format!(
                "{how}: a={} b={} z={}: computed {got:e}, expected {:e} ({source}), \
                 relative error {err:e}, tolerance {REL_TOL:e}",
                r.alpha, r.beta, r.z, r.value
            );
            // NaN errors must count as failures
            if err.is_nan() || err > worst.0 {
                worst = (err, line.clone());
            }
            if err.is_nan() || err > REL_TOL {
                failures.push(line);
            }
        }
    }
    println!("{} reference values; worst case: {}", values.len(), worst.1);
    assert!(failures.is_empty(), "{} failures:\n{}", failures.len(), failures.join("\n"));
}

#[test]
fn derivative_matches_central_differences() {
    // Fourth-order central difference with step h = 1e-3: truncation ~ h^4 |E^(5)| / 30 (at
    // most about 3e-14 |E| here: E varies no faster than e^z) and rounding ~ 1e-16 |E| / h;
    // both stay below 1e-10 of |E'| at these points (measured: at most 2e-11), so 1e-9
    // relative leaves margin while still catching any wrong formula.
    const FD_REL_TOL: f64 = 1e-9;
    let points = [
        (0.6, 1.6, -1.0),    // series
        (0.55, 2.55, 1.5),   // series, positive z
        (0.5, 0.5, -1.7),    // outside the series radius for b = a = 1/2
        (0.75, 2.75, -30.0), // asymptotic expansion
        (0.9, 0.9, -8.0),    // contour / branch-cut integral
        (0.99, 0.99, -20.0), // branch-cut integral (E much smaller than 1/|z|)
        (0.8, 1.8, -5.0),    // contour
        (1.0, 1.5, -10.0),   // a = 1, positive Poisson sums
        (1.0, 1.0, -40.0),   // e^z
        (0.7, 2.7, 3.5),     // contour with the residue at z^(1/a)
    ];
    for (a, b, z) in points {
        let s = MittagLefflerSeries::new(a, b).expect("valid parameters");
        let (value, deriv) = s.eval_with_derivative(z);
        assert!(rel_err(value, s.eval(z)) <= 0.0, "eval_with_derivative value differs from eval at a={a} b={b} z={z}");
        let h = 1e-3;
        let fd = (-s.eval(z + 2.0 * h) + 8.0 * s.eval(z + h) - 8.0 * s.eval(z - h) + s.eval(z - 2.0 * h)) / (12.0 * h);
        let err = rel_err(deriv, fd);
        assert!(
            err <= FD_REL_TOL,
            "dE/dz at a={a} b={b} z={z}: computed {deriv:e}, central difference {fd:e}, \
             relative difference {err:e}, tolerance {FD_REL_TOL:e}"
        );
    }
}

#[test]
fn shared_contour_matches_mpmath_on_the_negative_axis() {
    // Every fixture point with z < 0 and a in [0.5, 1] (mpmath values): the shared-node
    // contour of the leverage model, where its own rounding estimate accepts it (at most
    // 1e-12, the model's acceptance), within the same 1e-12 target. dE/dz from the
    // identity a z E'_{a,b}(z) = E_{a,b-1}(z) - (b - 1) E_{a,b}(z) (exact for all b),
    // wherever the fixture holds both E_{a,b} and E_{a,b-1} at the same z: within
    // 1e-11 relative of the derivative's own scale (E_{a,b-1} + (b-1) E_{a,b}) / (a|z|),
    // since the identity's difference loses what the two terms cancel.
    use logstrip::analytics::special::mittag_leffler::shared_contour::NegativeAxisContour;
    let (_, values) = load_fixture();
    let (mut checked, mut derivatives) = (0, 0);
    let mut failures = Vec::new();
    for r in values.iter().filter(|r| r.z < 0.0 && (0.5..=1.0).contains(&r.alpha)) {
        let Some(contour) = NegativeAxisContour::new(r.alpha, r.beta) else { continue };
        let Some(got) = contour.eval(r.z) else { continue };
        if got.rel_err_estimate > 1e-12 {
            continue;
        }
        checked += 1;
        if rel_err(got.value, r.value) > REL_TOL {
            failures.push(format!("E a={} b={} z={}: {:e} vs {:e}", r.alpha, r.beta, r.z, got.value, r.value));
        }
        let lower = values.iter().find(|l| {
            l.alpha.to_bits() == r.alpha.to_bits()
                && l.z.to_bits() == r.z.to_bits()
                && (l.beta - (r.beta - 1.0)).abs() < 1e-15
        });
        if let Some(lower) = lower {
            derivatives += 1;
            let want = (lower.value - (r.beta - 1.0) * r.value) / (r.alpha * r.z);
            let scale = (lower.value.abs() + (r.beta - 1.0).abs() * r.value.abs()) / (r.alpha * r.z.abs());
            if (got.d_z - want).abs() > 1e-11 * scale {
                failures.push(format!("dE/dz a={} b={} z={}: {:e} vs {:e}", r.alpha, r.beta, r.z, got.d_z, want));
            }
        }
    }
    println!("shared contour: {checked} values and {derivatives} derivatives checked against mpmath");
    assert!(checked >= 40 && derivatives >= 20, "too few points checked: {checked} values, {derivatives} derivatives");
    assert!(failures.is_empty(), "{} failures:\n{}", failures.len(), failures.join("\n"));
}

#[test]
fn matches_mpmath_next_to_the_poles_of_gamma() {
    // a = 1 - 2^-e (e = 30 to 52): every asymptotic coefficient 1/Gamma(b - a k) sits next
    // to a pole. Reference: tests/fixtures/mittag_leffler/near_one_values.json (near_one.py
    // beside it, mpmath). Same 1e-12 target; measured worst 1.1e-14 (a crate gamma of the
    // rounded argument in place of numerics::gamma::rgamma_dd: 1.5e-4 at e = 52, z = -200).
    let (_, values) = mittag_leffler_fixture::read("near_one_values.json");
    assert!(values.len() >= 48, "only {} values", values.len());
    let mut failures = Vec::new();
    for e in &values {
        let exponent = field(e, "e") as i32;
        let alpha = 1.0 - 2.0_f64.powi(-exponent);
        let beta = alpha + field(e, "beta_offset");
        let (z, want) = (field(e, "z"), field(e, "value"));
        let got = mittag_leffler(alpha, beta, z).expect("inputs are in the domain");
        let err = rel_err(got, want);
        if err.is_nan() || err > REL_TOL {
            failures.push(format!(
                "a=1-2^-{exponent} b={beta} z={z}: computed {got:e}, mpmath {want:e}, relative error {err:e}"
            ));
        }
    }
    assert!(failures.is_empty(), "{} failures:\n{}", failures.len(), failures.join("\n"));
}
