//! `E_{a,b}(-x)` from the Laplace inversion collapsed onto the branch cut: a real
//! integral, by tanh-sinh quadrature, where the contour integral lacks relative accuracy.

use super::BRANCH_CUT_REL_TOL;
use crate::analytics::numerics::gamma::sinpi;
use crate::analytics::numerics::tanh_sinh::tanh_sinh;
use std::f64::consts::PI;

/// `E_{a,b}(-x)` for `0 < a < 1`, `b < 1 + a`, `x > 0` from the inverse Laplace transform
/// collapsed onto the branch cut of `s^{a-b}/(s^a + x)` (no poles on the principal sheet for
/// these arguments), written with `r = rho^a`:
///
/// `E = (1/(a pi)) Int_0^inf G(r) / ((r - r_c)^2 + w^2) dr`,
/// `G(r) = r^{(1-b)/a} exp(-r^{1/a}) [r sin(pi(1-b)) + x sin(pi(b-a))]`,
/// `r_c = -x cos(pi a)`, `w = x sin(pi a)`,
///
/// the representation given in Fract. Calc. Appl. Anal. 5(4) (2002), "Computation of the
/// Mittag-Leffler function and its derivative" (re-derived here and checked against mpmath).
/// For `b` in `[a, 1]` the integrand is positive, so quadrature
/// gives relative accuracy however small `E` is.
///
/// The denominator is a peak of width `w` at `r_c`, narrow when `a` is close to 1. Left of
/// `r_A = r_c - PEAK_WIDTHS w` the integral is taken in `r`; from there on in `psi`, with
/// `r = x sin(psi) / sin(pi a - psi)`, which turns `dr / denominator` into
/// `dpsi / (x sin(pi a))` and removes the peak exactly. Returns the value and an estimate of
/// its absolute error.
///
/// One function of about 100 lines: the three pieces share the integrand, the peak's
/// geometry and the cancellation-free trigonometric factors set up at the top.
pub(super) fn real_integral(a: f64, b: f64, x: f64) -> Option<(f64, f64)> {
    /// Half-widths of the peak kept out of the `r` piece (the `psi` piece then starts at
    /// `psi` about `1/PEAK_WIDTHS` for `a` near 1, clear of the fast variation near 0).
    const PEAK_WIDTHS: f64 = 4.0;
    if !(a > 0.0 && a < 1.0 && x > 0.0 && x.is_finite()) {
        return None;
    }
    let inv_a = 1.0 / a;
    let expo = (1.0 - b) * inv_a;
    let sin_1mb = sinpi(1.0 - b);
    let sin_a = sinpi(a);
    let cos_a = sinpi(0.5 - a);
    // cos(pi a / 2), accurate for a near 1
    let cos_half_a = sinpi(0.5 * (1.0 - a));
    // sin(pi(b-a)) + sin(pi(1-b)) = 2 sin(pi(1-a)/2) cos(pi(2b-a-1)/2), without cancellation
    let sigma = 2.0 * cos_half_a * sinpi(0.5 - (b - 1.0) - 0.5 * (1.0 - a));
    // G(r) with delta = x - r supplied accurately by the caller: the bracket
    // r sin(pi(1-b)) + x sin(pi(b-a)) = x sigma - delta sin(pi(1-b)) cancels near r = x when
    // a and b are both close to 1, and there delta is far more accurate than x - r.
    let g = |r: f64, delta: f64| -> f64 {
        if r <= 0.0 || !r.is_finite() {
            return 0.0;
        }
        let rp = r.powf(inv_a);
        if rp > 745.0 {
            return 0.0;
        }
        r.powf(expo) * (-rp).exp() * (x * sigma - delta * sin_1mb)
    };
    let r_c = -x * cos_a;
    let w = x * sin_a;
    let r_a = r_c - PEAK_WIDTHS * w;
    // x - r_A = x (1 + cos(pi a)) + PEAK_WIDTHS w = 2 x cos^2(pi a/2) + PEAK_WIDTHS w
    let x_minus_r_a = 2.0 * x * cos_half_a * cos_half_a + PEAK_WIDTHS * w;
    let eps_pi = PI * (1.0 - a); // pi - pi a (1 - a is exact)
    let mut total = 0.0;
    let mut err = 0.0;
    let mut add = |piece: Option<(f64, f64)>, scale: f64| -> Option<()> {
        let (v, e) = piece?;
        total += v * scale;
        err += e * scale;
        Some(())
    };
    if r_a > 0.0 {
        // Narrow peak: three pieces.
        // A: r in [0, r_A]; r - r_c = -(PEAK_WIDTHS w + distance to the right end)
        add(
            tanh_sinh(r_a, BRANCH_CUT_REL_TOL, |dl, dr| {
                let d = PEAK_WIDTHS * w + dr;
                g(dl, x_minus_r_a + dr) / (d * d + w * w)
            }),
            1.0 / (a * PI),
        )?;
        // B: psi over the peak, r from r_A to r_C = r_c + PEAK_WIDTHS w. With
        // tan(psi) = r sin(pi a) / (x + r cos(pi a)) written without cancellation:
        let psi_a = (-(cos_a + PEAK_WIDTHS * sin_a)).atan2(sin_a - PEAK_WIDTHS * cos_a);
        let psi_c = (PEAK_WIDTHS * sin_a - cos_a).atan2(sin_a + PEAK_WIDTHS * cos_a);
        add(
            tanh_sinh(psi_c - psi_a, BRANCH_CUT_REL_TOL, |dl, _| {
                let psi = psi_a + dl;
                // sin(pi a - psi) = sin(psi + pi (1 - a)); psi stays clear of 0 and pi here
                let s_right = (psi + eps_pi).sin();
                // x - r = 2 x cos(pi a/2) sin(pi a/2 - psi) / sin(pi a - psi)
                let delta = 2.0 * x * cos_half_a * (0.5 * PI * a - psi).sin() / s_right;
                g(x * psi.sin() / s_right, delta)
            }),
            1.0 / (a * PI * w),
        )?;
        // C: r in [r_C, r_C + TAIL]; (r_C + TAIL)^{1/a} >= r_C^{1/a} + TAIL, so the rest is
        // below e^-TAIL of the integrand at r_C
        const TAIL: f64 = 60.0;
        let r_cc = r_c + PEAK_WIDTHS * w;
        let x_minus_r_cc = 2.0 * x * cos_half_a * cos_half_a - PEAK_WIDTHS * w;
        add(
            tanh_sinh(TAIL, BRANCH_CUT_REL_TOL, |dl, _| {
                let d = PEAK_WIDTHS * w + dl;
                g(r_cc + dl, x_minus_r_cc - dl) / (d * d + w * w)
            }),
            1.0 / (a * PI),
        )?;
    } else {
        // Wide peak: psi over [0, pi a] in one piece.
        add(
            tanh_sinh(PI * a, BRANCH_CUT_REL_TOL, |dl, dr| {
                let psi = dl;
                // sin(pi a - psi): from the distance to the right end where that is small,
                // else as sin(psi + pi (1 - a)), accurate when pi a - psi is close to pi
                let s_right = if dr <= 0.5 * PI { dr.sin() } else { (psi + eps_pi).sin() };
                let delta = 2.0 * x * cos_half_a * (0.5 * PI * a - psi).sin() / s_right;
                g(x * psi.sin() / s_right, delta)
            }),
            1.0 / (a * PI * w),
        )?;
    }
    if total.is_finite() && err.is_finite() {
        Some((total, err))
    } else {
        None
    }
}
