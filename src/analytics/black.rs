//! Black-model prices (J. Financial Economics 3 (1976), "The pricing of commodity
//! contracts") of unit-forward options in total-variance form, and their inversion.
//!
//! Prices here are undiscounted and divided by the forward (MATH.md section 1):
//! with log-moneyness `k = ln(K/F)` and total implied variance `w = vol^2 tau`,
//! `c(k) = N(d1) - e^k N(d2)` and `p(k) = e^k N(-d2) - N(-d1)`,
//! `d1 = -k/sqrt(w) + sqrt(w)/2`, `d2 = d1 - sqrt(w)`.

use super::numerics::erfcx::erfcx_nonnegative;
use super::numerics::exp::exp;
use super::tolerances::IMPLIED_VOL_REL_TOL;
use std::f64::consts::{FRAC_1_SQRT_2, PI};

/// Standard normal cumulative distribution, through `erfc` so the lower tail keeps
/// full relative accuracy.
pub fn norm_cdf(x: f64) -> f64 {
    0.5 * libm::erfc(-x * FRAC_1_SQRT_2)
}

/// Standard normal density.
pub fn norm_pdf(x: f64) -> f64 {
    (-0.5 * x * x).exp() / (2.0 * PI).sqrt()
}

/// Price of the out-of-the-money option at log-moneyness `k` (the put for `k < 0`,
/// the call for `k >= 0`), undiscounted and in units of the forward, for total
/// implied variance `w` (variance x years). Zero for `w <= 0` (intrinsic value).
pub fn otm_price(k: f64, w: f64) -> f64 {
    let call = mirrored_call(k, w);
    if k < 0.0 {
        call * k.exp()
    } else {
        call
    }
}

/// The call price at log-moneyness `|k|` (unit forward, total variance `w`): the
/// out-of-the-money price for `k >= 0`, and `e^-k` times it for `k < 0`, by the
/// symmetry `p(k) = e^k c(-k)`. Zero for `w <= 0` or a NaN argument.
///
/// One exponential serves both terms. With `a = |k| / (sqrt(2 w))`,
/// `b = sqrt(w / 8)`, `d1 = -sqrt(2) (a - b)` and `d2 = -sqrt(2) (a + b)`, and
/// `e^k exp(-(a + b)^2) = exp(-(a - b)^2)`, so
/// `c = (erfc(a - b) - exp(-(a - b)^2) erfcx(a + b)) / 2` with the scaled
/// complementary error function `erfcx` ([`crate::analytics::numerics::erfcx`]).
/// Accuracy against mpmath: tests/reference_identities.rs.
pub fn mirrored_call(k: f64, w: f64) -> f64 {
    if w.is_nan() || w <= 0.0 {
        return 0.0;
    }
    let (near, far) = erfc_arguments(k, w);
    call_from_arguments(near, far, exp_neg_square(near))
}

/// Calls worked out together: [`mirrored_call`] of each `(k[i], w[i])` into `out[i]`,
/// the same arithmetic to the bit, in stages over blocks of points. The points are
/// independent, so a stage's square roots, divisions, exponentials and polynomials
/// overlap across points instead of each waiting on the previous step of its own chain
/// (one call is a chain of about 120 cycles of latency).
pub fn mirrored_calls(k: &[f64], w: &[f64], out: &mut [f64]) {
    const BLOCK: usize = 8;
    for ((k, w), out) in k.chunks(BLOCK).zip(w.chunks(BLOCK)).zip(out.chunks_mut(BLOCK)) {
        let n = k.len().min(w.len()).min(out.len());
        let mut near = [0.0; BLOCK];
        let mut far = [0.0; BLOCK];
        let mut gauss = [0.0; BLOCK];
        // A point without a price (w <= 0 or NaN) runs through the stages with w = 1
        // and gets 0 at the end, as in the one-point version.
        let valid = |w: f64| !(w.is_nan() || w <= 0.0);
        for i in 0..n {
            (near[i], far[i]) = erfc_arguments(k[i], if valid(w[i]) { w[i] } else { 1.0 });
        }
        for i in 0..n {
            gauss[i] = exp_neg_square(near[i]);
        }
        for i in 0..n {
            out[i] = if valid(w[i]) { call_from_arguments(near[i], far[i], gauss[i]) } else { 0.0 };
        }
    }
}

/// `(a - b, a + b)` of [`mirrored_call`]: the arguments of the two `erfc`s.
#[inline(always)]
fn erfc_arguments(k: f64, w: f64) -> (f64, f64) {
    let s = w.sqrt();
    let a = k.abs() / s * FRAC_1_SQRT_2;
    let b = s * (0.5 * FRAC_1_SQRT_2);
    (a - b, a + b)
}

/// The call of [`mirrored_call`] from its `erfc` arguments and `exp(-near^2)`.
#[inline(always)]
fn call_from_arguments(near: f64, far: f64, gauss: f64) -> f64 {
    let call = if near >= 0.0 {
        0.5 * gauss * (erfcx_nonnegative(near) - erfcx_nonnegative(far))
    } else {
        // erfc(near) = 2 - erfc(-near) for the at- and in-the-money side of d1.
        1.0 - 0.5 * gauss * (erfcx_nonnegative(-near) + erfcx_nonnegative(far))
    };
    call.max(0.0)
}

/// `exp(-x^2)` with `x^2` split exactly into a double and its rounding error
/// (the exact split of Numer. Math. 18 (1971), "A floating-point technique for
/// extending the available precision"), so that the exponential does not
/// amplify the rounding of the square (`x^2` up to about 40 in the wings, where
/// it would cost 40 ulps).
#[inline(always)]
fn exp_neg_square(x: f64) -> f64 {
    const SPLITTER: f64 = 134_217_729.0; // 2^27 + 1
    let scaled = SPLITTER * x;
    let high = scaled - (scaled - x);
    let low = x - high;
    let square = x * x;
    let error = ((high * high - square) + 2.0 * high * low) + low * low;
    exp(-square) * (1.0 - error)
}

/// Sensitivity of [`otm_price`] to `s = sqrt(w)`: the density at `d1` (the same
/// for the call and the put, by put-call parity).
pub fn otm_price_vega(k: f64, s: f64) -> f64 {
    if s <= 0.0 {
        return 0.0;
    }
    norm_pdf(-k / s + 0.5 * s)
}

/// Why a price could not be turned into an implied volatility.
#[derive(Debug, Clone, PartialEq)]
pub enum InversionError {
    /// The price is at or below intrinsic value (zero for the out-of-the-money option).
    BelowIntrinsic,
    /// The price is at or above the no-arbitrage upper bound (the forward for a
    /// call, the strike for a put, both in units of the forward).
    AboveUpperBound,
    /// A non-finite price or log-moneyness.
    NotFinite,
}

impl std::fmt::Display for InversionError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::BelowIntrinsic => write!(f, "price is not above intrinsic value"),
            Self::AboveUpperBound => write!(f, "price is not below its no-arbitrage upper bound"),
            Self::NotFinite => write!(f, "price or strike is not a finite number"),
        }
    }
}

/// Total implied variance of an out-of-the-money option price (undiscounted, unit
/// forward; the put for `k < 0`, the call for `k >= 0`).
///
/// Newton's method on `ln price` as a function of `s = sqrt(w)`, safeguarded by a
/// bisection bracket, so it converges from any start, deep in the wings as well
/// (working in log price keeps the Newton step well scaled where prices are tiny).
///
/// # Errors
/// [`InversionError`] when the price lies outside the open no-arbitrage interval.
pub fn implied_total_variance(k: f64, otm: f64) -> Result<f64, InversionError> {
    if !k.is_finite() || !otm.is_finite() {
        return Err(InversionError::NotFinite);
    }
    if otm <= 0.0 {
        return Err(InversionError::BelowIntrinsic);
    }
    let upper = if k >= 0.0 { 1.0 } else { k.exp() };
    if otm >= upper {
        return Err(InversionError::AboveUpperBound);
    }
    let target = otm.ln();
    let price_at = |s: f64| otm_price(k, s * s);
    // Bracket [lo, hi] with price(lo) < target < price(hi).
    let mut lo = 0.0_f64;
    let mut hi = 1.0_f64;
    while price_at(hi) <= otm {
        lo = hi;
        hi *= 2.0;
        if hi > 1e3 {
            return Err(InversionError::AboveUpperBound);
        }
    }
    let mut s = (2.0 * k.abs()).sqrt().clamp(0.5 * (lo + hi).min(0.2), hi);
    if s <= lo {
        s = 0.5 * (lo + hi);
    }
    for _ in 0..200 {
        let price = price_at(s);
        if price > otm {
            hi = s;
        } else {
            lo = s;
        }
        let vega = otm_price_vega(k, s);
        let mut next = if price > 0.0 && vega > 0.0 { s - (price.ln() - target) * price / vega } else { f64::NAN };
        if !(next > lo && next < hi) {
            next = 0.5 * (lo + hi);
        }
        if (next - s).abs() <= IMPLIED_VOL_REL_TOL * s || hi - lo <= IMPLIED_VOL_REL_TOL * hi {
            return Ok(next * next);
        }
        s = next;
    }
    Ok(s * s)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn calls_worked_out_together_equal_the_one_point_call_bit_for_bit() {
        // Identity of two evaluation orders of the same arithmetic: no tolerance. The
        // points cross zero, both branches of d1, the erfcx tail (arguments beyond 8),
        // and prices without a value (w <= 0, NaN); 37 points, so the last block is short.
        let mut k = Vec::new();
        let mut w = Vec::new();
        for i in 0..37 {
            k.push(-3.0 + 0.17 * i as f64);
            w.push(match i % 9 {
                0 => 0.0,
                4 => f64::NAN,
                7 => -0.01,
                j => 1e-4 * (j as f64).powi(3),
            });
        }
        let mut together = vec![f64::NAN; k.len()];
        mirrored_calls(&k, &w, &mut together);
        for i in 0..k.len() {
            assert_eq!(together[i].to_bits(), mirrored_call(k[i], w[i]).to_bits(), "k {} w {}", k[i], w[i]);
        }
    }

    #[test]
    fn inversion_round_trips_across_moneyness() {
        // Identity check: price a known total variance, invert, compare (tolerance:
        // the inversion's own convergence criterion times a safety factor of 100).
        for &w in &[1e-4, 0.004, 0.04, 0.3, 2.0] {
            for &k in &[-3.0, -1.0, -0.2, 0.0, 0.1, 0.7, 2.5] {
                let price = otm_price(k, w);
                if price < 1e-280 {
                    continue;
                }
                let back = implied_total_variance(k, price).expect("price inside bounds");
                let rel = (back - w).abs() / w;
                assert!(rel < 1e-9, "k={k} w={w}: got {back}, rel err {rel:e}, tol 1e-9");
            }
        }
    }

    #[test]
    fn inversion_rejects_prices_outside_bounds() {
        assert_eq!(implied_total_variance(0.1, 0.0), Err(InversionError::BelowIntrinsic));
        assert_eq!(implied_total_variance(0.1, 1.0), Err(InversionError::AboveUpperBound));
        assert_eq!(implied_total_variance(-0.1, 0.95), Err(InversionError::AboveUpperBound));
        assert_eq!(implied_total_variance(f64::NAN, 0.1), Err(InversionError::NotFinite));
    }
}
