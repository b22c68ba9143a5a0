//! Kept over the `errorfunctions` crate's `erfcx`: the whole analysis takes 3.4% more instructions with it (benches/kernels.rs).
//!
//! The scaled complementary error function `erfcx(x) = exp(x^2) erfc(x)`.
//!
//! The out-of-the-money Black price needs `N(d1)` and `e^k N(d2)`, whose Gaussian
//! factors agree (`phi(d1) = e^k phi(d2)`): written with `erfcx`, both share one
//! exponential ([`crate::analytics::black::otm_price`]). `libm` has no `erfcx`, and
//! `erfc` itself spends two exponentials per call in the tails.
//!
//! Method: on `[0, 8)` a degree-11 polynomial per quarter unit (Chebyshev
//! interpolation in mpmath, tools/erfcx_table.py); beyond, `sqrt(pi) x erfcx(x)` as a
//! degree-10 polynomial in `1/x^2`, which tends to 1. Largest relative error against
//! mpmath (the generator's check, 12,000 points): 2.6e-16.

// Under `crate-kernels` the table goes unused.
#![cfg_attr(feature = "crate-kernels", allow(dead_code, unused_imports))]

use super::erfcx_table::{PIECES, TAIL};
use super::polynomial::horner;

/// `1/sqrt(pi)`.
const FRAC_1_SQRT_PI: f64 = 0.564_189_583_547_756_3;

/// `erfcx(x) = exp(x^2) erfc(x)` for `x >= 0` (and NaN for NaN). Negative arguments
/// are the caller's business (`erfcx(-x) = 2 exp(x^2) - erfcx(x)` grows without
/// bound); they are clamped to 0 here.
#[inline(always)]
pub fn erfcx_nonnegative(x: f64) -> f64 {
    #[cfg(feature = "crate-kernels")]
    {
        use errorfunctions::RealErrorFunctions;
        if x < 0.0 {
            1.0
        } else {
            x.erfcx()
        }
    }
    #[cfg(not(feature = "crate-kernels"))]
    if x < 8.0 {
        // `as usize` saturates: NaN and negative arguments map to piece 0.
        let index = ((x * 4.0) as usize).min(PIECES.len() - 1);
        let t = (x.max(0.0) - index as f64 * 0.25) * 8.0 - 1.0;
        horner(&PIECES[index], t)
    } else {
        let v = 1.0 / (x * x);
        horner(&TAIL, v * 128.0 - 1.0) * (FRAC_1_SQRT_PI / x)
    }
}

/// `erfcx(x)` for every real `x`: below zero through `2 exp(x^2) - erfcx(-x)`, which
/// overflows to infinity below about -26.6.
pub fn erfcx(x: f64) -> f64 {
    if x < 0.0 {
        2.0 * (x * x).exp() - erfcx_nonnegative(-x)
    } else {
        erfcx_nonnegative(x)
    }
}
