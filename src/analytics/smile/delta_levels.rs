//! The smile read the way a desk quotes it: the at-the-money vol and the 25-delta skew.
//!
//! Definitions (stated because desks differ): at the money is the forward (`k = 0`);
//! deltas are forward Black deltas, undiscounted and without premium adjustment, the
//! call's `N(d1)` and the put's `N(d1) - 1`, with `d1 = -k / s + s / 2`, `k = ln(K/F)`
//! and `s = sqrt(w(k))` the smile's own total vol at that strike. The 25-delta skew is
//! the 25-delta put's vol minus the 25-delta call's (positive for the usual equity
//! smile). Each strike solves `d1(k) = d*` by Newton's method on the smile, started
//! from the flat smile's strike at the at-the-money vol.

use super::SmileCurve;

/// `N^-1(0.75)`, the `d1` of the 25-delta put (`N(d1) = 0.75`); the 25-delta call's is
/// its negative. Value from scipy 1.17.1, `scipy.stats.norm.ppf(0.75)`.
pub const D1_OF_25_DELTA_PUT: f64 = 0.674_489_750_196_081_7;

/// Newton steps allowed per strike (from the flat-smile start, smiles of the generated
/// sets and the demo day take three to five).
const MAX_NEWTON_STEPS: usize = 30;

/// Newton stops when the step in log-moneyness is below this (about a hundred
/// roundings of a log-moneyness near 0.1; the vol there moves by far less).
const STRIKE_TOL: f64 = 1e-13;

/// At-the-money vol and 25-delta skew of one expiry (vols as decimals).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DeltaLevels {
    /// Implied vol at the forward.
    pub atm_vol: f64,
    /// 25-delta put vol minus 25-delta call vol.
    pub skew_25_delta: f64,
    /// Log-moneyness of the 25-delta put and call.
    pub strikes_25_delta: (f64, f64),
}

/// The at-the-money vol and 25-delta skew of `curve` at expiry `tau` (years); `None`
/// when the smile has no positive total variance at the money or a strike is not found
/// (a smile whose `d1` does not fall through the target).
pub fn delta_levels(curve: &SmileCurve, tau: f64) -> Option<DeltaLevels> {
    let w_atm = curve.total_variance(0.0);
    if !(tau > 0.0 && w_atm > 0.0 && w_atm.is_finite()) {
        return None;
    }
    let put = strike_at_d1(curve, D1_OF_25_DELTA_PUT, w_atm)?;
    let call = strike_at_d1(curve, -D1_OF_25_DELTA_PUT, w_atm)?;
    let vol = |k: f64| (curve.total_variance(k) / tau).sqrt();
    Some(DeltaLevels {
        atm_vol: (w_atm / tau).sqrt(),
        skew_25_delta: vol(put) - vol(call),
        strikes_25_delta: (put, call),
    })
}

/// The log-moneyness where `d1(k) = target`, by Newton's method from the flat smile's
/// root at total variance `w_start`, each step halved while it would leave `d1`
/// further from the target.
fn strike_at_d1(curve: &SmileCurve, target: f64, w_start: f64) -> Option<f64> {
    let s0 = w_start.sqrt();
    let mut k = s0 * (s0 / 2.0 - target);
    let miss = |k: f64| {
        let p = curve.point(k);
        let s = p.w.sqrt();
        // d1 and its slope: d d1/dk = -1/s + w' (k / (2 s^3) + 1 / (4 s)).
        let d1 = -k / s + s / 2.0;
        let slope = -1.0 / s + p.dw * (k / (2.0 * s * s * s) + 1.0 / (4.0 * s));
        (d1 - target, slope)
    };
    let (mut f, mut slope) = miss(k);
    for _ in 0..MAX_NEWTON_STEPS {
        if !(f.is_finite() && slope.is_finite() && slope < 0.0) {
            return None;
        }
        let mut step = -f / slope;
        let mut next = miss(k + step);
        let mut halvings = 0;
        while !(next.0.abs() < f.abs()) && halvings < 40 {
            step *= 0.5;
            next = miss(k + step);
            halvings += 1;
        }
        k += step;
        (f, slope) = next;
        if step.abs() < STRIKE_TOL || f == 0.0 {
            return Some(k);
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytics::smile::svi::SviParams;

    fn close(what: &str, got: f64, want: f64, tol: f64) {
        assert!((got - want).abs() <= tol, "{what}: computed {got:e}, expected {want:e} (tolerance {tol:e})");
    }

    /// A flat smile: the 25-delta strikes in closed form (Black, `d1 = -k/s + s/2`),
    /// `k = s (s/2 -+ d*)`, and no skew.
    #[test]
    fn a_flat_smile_has_the_closed_form_strikes_and_no_skew() {
        let (vol, tau) = (0.2, 0.5);
        let w = vol * vol * tau;
        let flat = SmileCurve::Svi(SviParams { a: w, b: 0.0, rho: 0.0, m: 0.0, sigma: 0.1 });
        let got = delta_levels(&flat, tau).expect("levels");
        let s = w.sqrt();
        // 1e-15: a few roundings of numbers near 0.2.
        close("atm vol", got.atm_vol, vol, 1e-15);
        close("skew", got.skew_25_delta, 0.0, 1e-15);
        close("put strike", got.strikes_25_delta.0, s * (s / 2.0 - D1_OF_25_DELTA_PUT), 1e-14);
        close("call strike", got.strikes_25_delta.1, s * (s / 2.0 + D1_OF_25_DELTA_PUT), 1e-14);
    }

    /// A skewed raw-SVI smile against scipy's root finder
    /// (tests/fixtures/delta_skew/generate.py: brentq to 1e-15 on `N(d1) - 0.25` and
    /// `N(d1) - 0.75`). Tolerances: strikes to 1e-12 (both roots are good to about
    /// 1e-15; `N^-1(0.75)` carries 1e-16), vols to 1e-12.
    #[test]
    fn a_skewed_smile_matches_the_reference_roots() {
        let svi = SviParams { a: 0.01, b: 0.12, rho: -0.6, m: 0.02, sigma: 0.15 };
        let got = delta_levels(&SmileCurve::Svi(svi), 0.75).expect("levels");
        close("atm vol", got.atm_vol, 0.19865982697568177, 1e-14);
        close("put strike", got.strikes_25_delta.0, -0.12030700418518687, 1e-12);
        close("call strike", got.strikes_25_delta.1, 0.11768396885422192, 1e-12);
        close("skew", got.skew_25_delta, 0.06372127324175297, 1e-12);
    }

    #[test]
    fn no_variance_at_the_money_gives_none() {
        let dead = SmileCurve::Svi(SviParams { a: 0.0, b: 0.0, rho: 0.0, m: 0.0, sigma: 0.1 });
        assert!(delta_levels(&dead, 0.5).is_none());
        let live = SmileCurve::Svi(SviParams { a: 0.02, b: 0.0, rho: 0.0, m: 0.0, sigma: 0.1 });
        assert!(delta_levels(&live, 0.0).is_none());
    }
}
