//! `a = 1`: `E_{1,b}` on the negative axis as positive Poisson-weighted sums (Kummer's
//! transformation of `1F1`), free of the cancellation of the power series.

use crate::analytics::numerics::gamma::rgamma;

/// Relative size of the last Poisson-weighted term kept in the `a = 1` sums.
const KUMMER_TAIL_TOL: f64 = 1e-18;

/// `E_{1,b}(-x) = e^{-x} 1F1(b-1; b; x) / Gamma(b) = (1/Gamma(b)) sum_k P_k(x) (b-1)/(b-1+k)`
/// with `P_k(x) = e^{-x} x^k / k!` the Poisson weights, for `b > 1`, `x > 0`: all terms are
/// positive, so there is no cancellation.
pub(super) fn kummer_alpha_one(b: f64, x: f64) -> f64 {
    let bm1 = b - 1.0;
    poisson_sum(x, |k| bm1 / (bm1 + k)) * rgamma(b)
}

/// `dE_{1,b}/dz` at `z = -x` for `b > 1`: differentiating the sum above (`dP_k/dx = P_{k-1} -
/// P_k`) and summing by parts gives `(1/Gamma(b)) sum_k P_k(x) (b-1) / ((b-1+k)(b+k))`,
/// again all positive.
pub(super) fn kummer_alpha_one_deriv(b: f64, x: f64) -> f64 {
    let bm1 = b - 1.0;
    poisson_sum(x, |k| bm1 / ((bm1 + k) * (b + k))) * rgamma(b)
}

/// `sum_k P_k(x) weight(k)` for a positive, non-increasing weight, summed outward from the
/// mode of the Poisson weights until the terms fall below `KUMMER_TAIL_TOL` of the sum.
fn poisson_sum<W: Fn(f64) -> f64>(x: f64, weight: W) -> f64 {
    let mode = x.floor();
    let ln_pm = mode * x.ln() - x - libm::lgamma(mode + 1.0);
    let pm = ln_pm.exp();
    let mut sum = pm * weight(mode);
    // upward (bounded: the weights P_k fall off like a Gaussian of width sqrt(x))
    let mut p = pm;
    let mut k = mode;
    let limit = mode + 100.0 + 40.0 * x.sqrt();
    while k < limit {
        p *= x / (k + 1.0);
        k += 1.0;
        let t = p * weight(k);
        sum += t;
        if t <= KUMMER_TAIL_TOL * sum {
            break;
        }
    }
    // downward
    let mut p = pm;
    let mut k = mode;
    while k >= 1.0 {
        p *= k / x;
        k -= 1.0;
        let t = p * weight(k);
        sum += t;
        if t <= KUMMER_TAIL_TOL * sum {
            break;
        }
    }
    sum
}
