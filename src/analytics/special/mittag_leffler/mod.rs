//! Two-parameter Mittag-Leffler function `E_{a,b}(z) = sum_k z^k / Gamma(a k + b)` for real
//! `a` in (0, 1], real `b` and real `z`, in double precision: better than 1e-12 relative (the
//! target; measured worst 1.2e-14) for `a` in [0.5, 1], `b` in [a, a + 2], `z` in [-200, 2].
//!
//! `E_{a,b}` is dimensionless; in the rough Heston formulas of shared/MATH.md section 5 it is
//! evaluated at `z = -mu t^a`, so `z` carries no unit either.
//!
//! # Methods
//!
//! The plain power series loses everything to cancellation below about `z = -5`
//! (shared/MATH.md section 6), so the evaluation is split by region:
//!
//! * **series** for small `|z|`, used only where the cancellation it suffers is measured to be
//!   small: [`MittagLefflerSeries::new`] computes, for its fixed `(a, b)`, the largest radius
//!   (at most [`SERIES_RADIUS_MAX`]) on each side of zero at which
//!   `sum |terms| / |sum| <= SERIES_COND_MAX`;
//! * **asymptotic expansion** `E_{a,b}(z) = -sum_{k>=1} z^{-k} / Gamma(b - a k)` for negative `z`,
//!   accepted only once a bound on the terms (see [`ASYMPTOTIC_REL_TOL`]) shows that the
//!   neglected part is below double precision; this automatically needs much larger `|z|` as
//!   `a -> 1`, where the expansion is only good for much larger `|z|`;
//! * for `a = 1` and `b >= 1` exactly, negative `z`: `E_{1,b}(-x) = e^{-x} 1F1(b-1; b; x) /
//!   Gamma(b)` (from `1F1(c; d; y) = e^y 1F1(d - c; d; -y)`), a sum of positive terms (`E_{1,1}(z) = e^z`), and
//!   likewise for the derivative;
//! * everything else: inversion of the Laplace transform `s^{a-b} / (s^a - z)` of
//!   `t^{b-1} E_{a,b}(z t^a)` on the optimal parabolic contour of Garrappa (2015), "Numerical
//!   evaluation of two and three parameter Mittag-Leffler functions", SIAM J. Numer. Anal.
//!   53(3), including the residue of the pole at `s = z^{1/a}` for positive `z`;
//! * where that contour integral has too little *relative* accuracy (it is accurate to about
//!   1e-15 of the size of its integrand, which is not enough when `E` is much smaller than
//!   `1/|z|`, e.g. `b` close to `a` with `a` close to 1), the same Laplace inversion collapsed
//!   onto the branch cut, a real integral whose integrand has one sign for `b <= 1`, evaluated
//!   by tanh-sinh quadrature (`real_integral` below).
//!
//! The thresholds were chosen by measuring against mpmath reference values (plain series in
//! arbitrary precision, tests/fixtures/mittag_leffler/generate.py): the 494 fixture values
//! plus a 1538-point development grid (random dyadic `a` in [0.5, 1], `b` in [a, a + 2], `z`
//! in [-200, 2], plus `a` within 2^-10 ... 2^-52 of 1) made with the same script. The measured
//! worst relative errors are noted beside each constant. Where each method takes over, for
//! `b = a, a + 1, a + 2`: the series covers `|z| <= 1` to `2` (never less than 1 in the tested
//! box); the asymptotic expansion is accepted from `|z|` about 6 at `a = 0.5`, 9 to 10 at 0.6,
//! 12 to 14 at 0.7, 16 to 21 at 0.8, 23 to 31 at 0.9 and 31 to 46 at 0.99; the contour or the
//! branch-cut integral fill the gap.

mod alpha_one;
mod branch_cut;
mod contour;
pub mod shared_contour;

use crate::analytics::numerics::double_double::{two_prod, two_sum};
use crate::analytics::numerics::gamma::{rgamma, rgamma_dd};
use crate::analytics::numerics::polynomial::horner2;
use alpha_one::{kummer_alpha_one, kummer_alpha_one_deriv};
use branch_cut::real_integral;
use contour::garrappa;
use std::f64::consts::PI;
use std::fmt;
use std::sync::OnceLock;

// ---------------------------------------------------------------------------------------------
// Tolerances and thresholds
// ---------------------------------------------------------------------------------------------

/// Largest `|z|` at which the precomputed power series is ever used. Covers the calibration's
/// hot path (`|z| < 2`). Beyond it the series needs too many terms to be the fast option.
pub const SERIES_RADIUS_MAX: f64 = 2.0;

/// Largest allowed condition number `sum |c_k z^k| / |sum c_k z^k|` of the series. Rounding in
/// the Horner sum is at most about `(number of terms) * 2^-53 * condition`, and in practice a
/// few units of `2^-53 * condition`. Measured worst error of series values: 1.2e-14 relative
/// (development grid), 8.4e-15 (fixture).
pub const SERIES_COND_MAX: f64 = 64.0;

/// The same limit for the derivative series in [`MittagLefflerSeries::eval_with_derivative`]:
/// larger, so that the derivative series covers all of `|z| <= 2` for `b = a + 2` down to
/// `a = 0.5` (the calibration's `Phi` needs it there; the identity used outside costs ten
/// times more). Measured worst derivative error against mpmath: 1.0e-13 relative.
pub const DERIV_SERIES_COND_MAX: f64 = 512.0;

/// Series terms are dropped once every later term is below this fraction of the smallest
/// `|E|` in the series region (`2^-60`, far below double rounding of the sum).
pub(crate) const SERIES_TAIL_TOL: f64 = 8.673617379884035e-19;

/// Terms are computed in `new()` until they fall below this fraction of the largest term
/// (then no radius up to `SERIES_RADIUS_MAX` needs more: the truncation tolerance
/// `SERIES_TAIL_TOL` is about 1e-18 of the sum, and the sum is at least 1/64 of the sum of
/// absolute terms where the series is used, so 1e-24 of the largest term leaves margin).
pub(crate) const SERIES_BUILD_TOL: f64 = 1e-24;

/// Hard cap on the number of series coefficients (a = 0.5, |z| = 2 needs about 75).
pub(crate) const SERIES_MAX_TERMS: usize = 400;

/// Candidate series radii, as fractions of `SERIES_RADIUS_MAX`, smallest first. Each one gets
/// its own truncation length; the accepted radius on each side is the last candidate for which
/// the condition number stays below `SERIES_COND_MAX`.
const SERIES_RADII: [f64; 12] =
    [1.0 / 128.0, 1.0 / 32.0, 1.0 / 16.0, 1.0 / 8.0, 0.25, 0.375, 0.5, 0.625, 0.75, 0.8125, 0.875, 1.0];

/// The asymptotic expansion is accepted when a bound on the magnitude of the last included
/// term, `|z|^-k Gamma(1 + a k - b) / pi` (which bounds `|z^-k / Gamma(b - a k)|` by the
/// reflection formula and does not vanish by accident at poles of Gamma), is below this
/// fraction of the partial sum. The exponentially small remainder (about `exp(-|z|^{1/a})`)
/// is below the smallest such bound, so this also covers `a` close to 1. Measured worst error
/// of accepted asymptotic values: 1.1e-15 relative (development grid), 8.1e-16 (fixture).
pub const ASYMPTOTIC_REL_TOL: f64 = 1e-16;

/// Maximum number of asymptotic terms tried.
const ASYMPTOTIC_MAX_TERMS: usize = 80;

/// Target accuracy of the contour integral, relative to the size of its integrand; the value
/// used by Garrappa (2015). It cannot be much smaller: the contour must then pass closer to
/// the origin than `ln(target / 2^-52)` allows.
pub(super) const GARRAPPA_EPS: f64 = 1e-15;

/// `ln(2^-52)`, the machine epsilon's logarithm used in Garrappa's parameter choice.
pub(super) const LN_MACHINE_EPS: f64 = -52.0 * std::f64::consts::LN_2;

/// Above this many trapezoid nodes the contour target is relaxed tenfold (Garrappa 2015 uses
/// 200; real arguments never come near it).
pub(super) const GARRAPPA_MAX_NODES: f64 = 400.0;

/// The contour result is used when its estimated relative error (integrand size times
/// `GARRAPPA_EPS`, divided by `|E|`) is below this; otherwise the branch-cut integral is used.
/// Measured: contour values whose estimate is below this have errors up to 1.4e-14 relative
/// for `|z| >= 0.5` (the estimate is not reliable for `|z|` below about 0.1, which the series
/// always covers in the tested range); worst error of values returned from the contour 1.1e-14
/// (development grid), 1.0e-14 (fixture).
pub const GARRAPPA_REL_ACCEPT: f64 = 1e-13;

/// Largest `b - a` (as a fraction of `a`) for which the branch-cut integral is used: beyond
/// `b = 1 + a` it needs an extra term at the origin, and near it its integrand is nearly
/// non-integrable at the origin. `b <= 1 + a/2` keeps the singularity no worse than `r^-1/2`.
pub(super) const REAL_INTEGRAL_MAX_B_EXCESS: f64 = 0.5;

/// Stop refining the branch-cut integral's tanh-sinh sums when two successive levels agree
/// to this fraction of the integral of `|f|`; the error of the finer level is then far
/// smaller (the method's error roughly squares per level). Measured worst error of
/// branch-cut values: 9.2e-15 relative (development grid), 4.3e-15 (fixture).
const BRANCH_CUT_REL_TOL: f64 = 1e-13;

/// The positive Poisson sum for `a = 1` is used up to this `|z|` (beyond it the asymptotic expansion is
/// always accepted unless `b = 1`, which is `exp(z)`). Measured worst error of `a = 1` values:
/// 5.8e-15 relative (development grid), 5.1e-15 (fixture).
pub(super) const KUMMER_MAX_X: f64 = 2000.0;

// ---------------------------------------------------------------------------------------------
// Errors
// ---------------------------------------------------------------------------------------------

/// Why a Mittag-Leffler evaluation was refused.
#[derive(Debug, Clone, PartialEq)]
pub enum MittagLefflerError {
    /// An input was NaN or infinite.
    NonFiniteInput {
        /// Which input: `"alpha"`, `"beta"` or `"z"`.
        name: &'static str,
        /// The value given.
        value: f64,
    },
    /// `alpha` must lie in (0, 1].
    AlphaOutOfRange {
        /// The value given.
        alpha: f64,
    },
}

impl fmt::Display for MittagLefflerError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            MittagLefflerError::NonFiniteInput { name, value } => {
                write!(f, "Mittag-Leffler input {name} must be finite, got {value}")
            }
            MittagLefflerError::AlphaOutOfRange { alpha } => {
                write!(f, "Mittag-Leffler alpha must lie in (0, 1], got {alpha}")
            }
        }
    }
}

impl std::error::Error for MittagLefflerError {}

fn check_finite(name: &'static str, value: f64) -> Result<(), MittagLefflerError> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(MittagLefflerError::NonFiniteInput { name, value })
    }
}

fn check_params(alpha: f64, beta: f64) -> Result<(), MittagLefflerError> {
    check_finite("alpha", alpha)?;
    check_finite("beta", beta)?;
    if alpha > 0.0 && alpha <= 1.0 {
        Ok(())
    } else {
        Err(MittagLefflerError::AlphaOutOfRange { alpha })
    }
}

// ---------------------------------------------------------------------------------------------
// Public API
// ---------------------------------------------------------------------------------------------

/// `E_{alpha,beta}(z) = sum_{k>=0} z^k / Gamma(alpha k + beta)` (dimensionless).
///
/// `alpha` must be in (0, 1]; `beta` and `z` any finite reals. Better than 1e-12 relative
/// (measured worst 1.2e-14) for `alpha` in [0.5, 1], `beta` in [alpha, alpha + 2], `z` in
/// [-200, 2] (checked against mpmath in tests/reference_mittag_leffler.rs); elsewhere the same
/// methods give the best value they can. Very large positive `z` overflows to `+inf`.
///
/// Each call does the set-up work of [`MittagLefflerSeries::new`] (tens of microseconds); for
/// many evaluations with the same `(alpha, beta)` build a [`MittagLefflerSeries`] once.
pub fn mittag_leffler(alpha: f64, beta: f64, z: f64) -> Result<f64, MittagLefflerError> {
    check_params(alpha, beta)?;
    check_finite("z", z)?;
    // the series is never used beyond SERIES_RADIUS_MAX, so skip building it there
    let core = Core::new(alpha, beta, z.abs() <= SERIES_RADIUS_MAX);
    Ok(core.eval(z))
}

/// Evaluator of `E_{alpha,beta}` for one fixed `(alpha, beta)`, for hot loops.
///
/// [`new`](Self::new) precomputes `1/Gamma(alpha k + beta)` for the power series, the
/// truncation length for each range of `|z|`, the radius on each side of zero within which
/// the series is accurate (condition number at most [`SERIES_COND_MAX`]) and the asymptotic
/// coefficients `1/Gamma(beta - alpha k)`. [`eval`](Self::eval) then costs a short Horner sum
/// inside that radius and one of the robust methods (module docs) outside it.
#[derive(Debug, Clone)]
pub struct MittagLefflerSeries {
    core: Core,
    /// Evaluator for `(alpha, beta - 1)`, built on the first derivative request outside the
    /// derivative's series radius.
    lower: OnceLock<Box<Core>>,
}

impl MittagLefflerSeries {
    /// Precompute for `(alpha, beta)`; `alpha` in (0, 1], `beta` finite.
    pub fn new(alpha: f64, beta: f64) -> Result<Self, MittagLefflerError> {
        check_params(alpha, beta)?;
        Ok(Self { core: Core::new(alpha, beta, true), lower: OnceLock::new() })
    }

    /// The `alpha` this evaluator was built for.
    pub fn alpha(&self) -> f64 {
        self.core.alpha
    }

    /// The `beta` this evaluator was built for.
    pub fn beta(&self) -> f64 {
        self.core.beta
    }

    /// Radii `(negative side, positive side)` within which [`eval`](Self::eval) uses the
    /// precomputed series.
    pub fn series_radii(&self) -> (f64, f64) {
        (self.core.radius_neg, self.core.radius_pos)
    }

    /// `E_{alpha,beta}(z)`. Never panics; NaN `z` gives NaN, `z = -inf` gives 0 and
    /// `z = +inf` gives `+inf` (the limits).
    pub fn eval(&self, z: f64) -> f64 {
        self.core.eval(z)
    }

    /// `(E_{alpha,beta}(z), dE/dz)`, with `dE/dz = sum_k k z^{k-1} / Gamma(alpha k + beta)`.
    ///
    /// Inside the derivative's own series radius (chosen like the value's, with the limit
    /// [`DERIV_SERIES_COND_MAX`]) the derivative series is summed. For `alpha = 1`, `beta >= 1`
    /// and negative `z` a positive Poisson-weighted sum is used (see `kummer_alpha_one_deriv`).
    /// Elsewhere `alpha z E'_{a,b}(z) = E_{a,b-1}(z) - (b - 1) E_{a,b}(z)`, which holds for all
    /// `b` (at `b = 1` it reads `alpha z E' = E_{a,0}(z)`), with `E_{a,b-1}` from a second
    /// evaluator built on first use. Measured: within 1.0e-13 relative of mpmath derivatives
    /// (the identity evaluated in high precision) at 383 development points, and within 1e-10
    /// of fourth-order central differences of [`eval`](Self::eval) (the differences' own
    /// accuracy) at 1538. Non-finite `z` gives NaN.
    pub fn eval_with_derivative(&self, z: f64) -> (f64, f64) {
        if !z.is_finite() {
            return (f64::NAN, f64::NAN);
        }
        let value = self.core.eval(z);
        let core = &self.core;
        let in_deriv_series = if z < 0.0 { -z <= core.dradius_neg } else { z <= core.dradius_pos };
        if in_deriv_series {
            return (value, core.series_sum(&core.dcoeffs, z, true));
        }
        if core.alpha_is_one && z < 0.0 && core.beta >= 1.0 && -z <= KUMMER_MAX_X {
            // a = 1: positive Poisson sums (the identity below would need E_{1,b-1}, which for
            // b near 1 is mostly an exponentially small part that no contour resolves)
            let d = if core.beta.to_bits() == 1.0_f64.to_bits() {
                value // E_{1,1} = e^z is its own derivative
            } else {
                kummer_alpha_one_deriv(core.beta, -z)
            };
            return (value, d);
        }
        if z == 0.0 {
            // Only reachable when beta makes the series unusable even at 0 (1/Gamma(beta)
            // and 1/Gamma(alpha + beta) both finite, so the series value is exact here).
            return (value, rgamma(core.alpha + core.beta));
        }
        let lower = self.lower.get_or_init(|| Box::new(Core::new(core.alpha, core.beta - 1.0, true)));
        let lower_value = lower.eval(z);
        let deriv = (lower_value - (core.beta - 1.0) * value) / (core.alpha * z);
        (value, deriv)
    }
}

// ---------------------------------------------------------------------------------------------
// Core evaluator
// ---------------------------------------------------------------------------------------------

/// Which method produced a value (kept for diagnostics while developing thresholds).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Method {
    /// Precomputed power series.
    Series,
    /// Asymptotic expansion for large negative z.
    Asymptotic,
    /// a = 1: exp or the positive Poisson sum.
    AlphaOne,
    /// Optimal parabolic contour.
    Contour,
    /// Branch-cut integral by tanh-sinh.
    BranchCut,
}

/// One precomputed asymptotic coefficient: `1/Gamma(b - a k)` and the log of the bound
/// `Gamma(1 + a k - b)/pi` on its magnitude (or of `max(1, |1/Gamma|)` when `b - a k > 0`).
#[derive(Debug, Clone, Copy)]
struct AsymCoeff {
    rgamma: f64,
    ln_bound: f64,
}

#[derive(Debug, Clone)]
struct Core {
    alpha: f64,
    beta: f64,
    alpha_is_one: bool,
    rgamma_beta: f64,
    /// `c_k = 1/Gamma(alpha k + beta)`.
    coeffs: Vec<f64>,
    /// `(k + 1) c_{k+1}`, coefficients of the derivative series.
    dcoeffs: Vec<f64>,
    /// Number of series terms to use for `|z| <= SERIES_RADII[j] * SERIES_RADIUS_MAX`.
    nterms: [usize; SERIES_RADII.len()],
    dnterms: [usize; SERIES_RADII.len()],
    radius_neg: f64,
    radius_pos: f64,
    dradius_neg: f64,
    dradius_pos: f64,
    asym: Vec<AsymCoeff>,
}

impl Core {
    fn new(alpha: f64, beta: f64, with_series: bool) -> Self {
        let asym = (1..=ASYMPTOTIC_MAX_TERMS)
            .map(|k| {
                // b - a k exactly as hi + lo: when a is within a few ulps of 1 this argument
                // sits within a few ulps of a pole of Gamma, and 1/Gamma there is
                // proportional to the tiny distance, which plain rounding would destroy.
                let (p_hi, p_lo) = two_prod(alpha, k as f64);
                let (d_hi, d_lo) = two_sum(beta, -p_hi);
                let (hi, lo) = two_sum(d_hi, d_lo - p_lo);
                let rg = rgamma_dd(hi, lo);
                let ln_bound = if hi > 0.0 { rg.abs().max(1.0).ln() } else { libm::lgamma(1.0 - hi) - PI.ln() };
                AsymCoeff { rgamma: rg, ln_bound }
            })
            .collect();
        let mut core = Core {
            alpha,
            beta,
            alpha_is_one: alpha >= 1.0,
            rgamma_beta: rgamma(beta),
            coeffs: Vec::new(),
            dcoeffs: Vec::new(),
            nterms: [0; SERIES_RADII.len()],
            dnterms: [0; SERIES_RADII.len()],
            radius_neg: 0.0,
            radius_pos: 0.0,
            dradius_neg: 0.0,
            dradius_pos: 0.0,
            asym,
        };
        if with_series {
            core.build_series();
        }
        core
    }

    /// Fill the series coefficients, truncation lengths and accepted radii.
    fn build_series(&mut self) {
        let (a, b) = (self.alpha, self.beta);
        let rmax = SERIES_RADIUS_MAX;
        let mut coeffs = Vec::with_capacity(128);
        let mut biggest = 0.0_f64;
        let peak_argument = 2.0 * rmax.powf(1.0 / a) + 2.0;
        let mut power = 1.0_f64;
        for k in 0..SERIES_MAX_TERMS {
            let c = rgamma(a * k as f64 + b);
            let term = (c * power).abs();
            coeffs.push(c);
            biggest = biggest.max(term);
            power *= rmax;
            // past the peak (argument of Gamma beyond 2 rmax^(1/a) + 2, where terms decrease
            // faster than geometrically) and negligible
            let past_peak = a * k as f64 + b > peak_argument;
            if past_peak && term <= SERIES_BUILD_TOL * biggest && k >= 2 {
                break;
            }
        }
        let dcoeffs: Vec<f64> = coeffs.iter().enumerate().skip(1).map(|(k, c)| k as f64 * c).collect();
        let (nterms, rneg, rpos) = series_plan(&coeffs, rmax, SERIES_COND_MAX);
        let (dnterms, drneg, drpos) = series_plan(&dcoeffs, rmax, DERIV_SERIES_COND_MAX);
        self.coeffs = coeffs;
        self.dcoeffs = dcoeffs;
        self.nterms = nterms;
        self.dnterms = dnterms;
        self.radius_neg = rneg;
        self.radius_pos = rpos;
        self.dradius_neg = drneg;
        self.dradius_pos = drpos;
    }

    fn eval(&self, z: f64) -> f64 {
        if z.is_nan() {
            return f64::NAN;
        }
        if z == f64::NEG_INFINITY {
            return 0.0;
        }
        if z == f64::INFINITY {
            return f64::INFINITY;
        }
        let in_series = if z < 0.0 { -z <= self.radius_neg } else { z <= self.radius_pos };
        if in_series {
            return self.series_sum(&self.coeffs, z, false);
        }
        self.robust(z)
    }

    /// Horner sum of `coeffs` at `z`, truncated for the radius class of `|z|`; two
    /// interleaved chains (even and odd powers) halve the dependency chain.
    fn series_sum(&self, coeffs: &[f64], z: f64, deriv: bool) -> f64 {
        let az = z.abs();
        let table = if deriv { &self.dnterms } else { &self.nterms };
        let mut n = coeffs.len();
        for (j, frac) in SERIES_RADII.iter().enumerate() {
            if az <= frac * SERIES_RADIUS_MAX {
                n = table[j];
                break;
            }
        }
        horner2(&coeffs[..n.min(coeffs.len())], z)
    }

    /// Everything outside the series radius.
    fn robust(&self, z: f64) -> f64 {
        self.robust_tagged(z).0
    }

    /// [`Self::robust`] and the method that produced the value.
    fn robust_tagged(&self, z: f64) -> (f64, Method) {
        if z == 0.0 {
            return (self.rgamma_beta, Method::Series);
        }
        if z > 0.0 {
            return (garrappa(self.alpha, self.beta, z).value, Method::Contour);
        }
        let x = -z;
        if self.alpha_is_one && self.beta.to_bits() == 1.0_f64.to_bits() {
            return (z.exp(), Method::AlphaOne);
        }
        if let Some(v) = self.asymptotic(x) {
            return (v, Method::Asymptotic);
        }
        if self.alpha_is_one && self.beta > 1.0 && x <= KUMMER_MAX_X {
            return (kummer_alpha_one(self.beta, x), Method::AlphaOne);
        }
        let contour = garrappa(self.alpha, self.beta, z);
        if contour.rel_err_estimate() <= GARRAPPA_REL_ACCEPT {
            return (contour.value, Method::Contour);
        }
        if !self.alpha_is_one && self.beta < 1.0 + REAL_INTEGRAL_MAX_B_EXCESS * self.alpha {
            if let Some((v, err)) = real_integral(self.alpha, self.beta, x) {
                // the better of the two by their own error estimates
                if err <= contour.rel_err_estimate() * v.abs() {
                    return (v, Method::BranchCut);
                }
            }
        }
        (contour.value, Method::Contour)
    }

    /// `-sum_{k>=1} z^{-k} / Gamma(b - a k)` at `z = -x`, if it is accurate (see
    /// `ASYMPTOTIC_REL_TOL`).
    fn asymptotic(&self, x: f64) -> Option<f64> {
        let ln_x = x.ln();
        let inv_x = 1.0 / x;
        // -z^{-k} = -(-1)^k x^{-k}
        let mut sign_pow = -1.0_f64; // (-1)^k for the current k
        let mut pow = 1.0_f64; // x^-k
        let mut sum = 0.0_f64;
        let mut prev_ln_bound = f64::INFINITY;
        let ln_tol = ASYMPTOTIC_REL_TOL.ln();
        for (i, c) in self.asym.iter().enumerate() {
            let k = (i + 1) as f64;
            pow *= inv_x;
            // term = -(-x)^{-k} / Gamma(b - a k) = -(-1)^k x^{-k} rgamma
            let term = if pow > 0.0 {
                -sign_pow * pow * c.rgamma
            } else {
                // x^{-k} underflowed: compute in logs
                let mag = (c.rgamma.abs().ln() - k * ln_x).exp();
                -sign_pow * mag * c.rgamma.signum()
            };
            sign_pow = -sign_pow;
            sum += term;
            let ln_bound = c.ln_bound - k * ln_x;
            if sum != 0.0 && ln_bound <= ln_tol + sum.abs().ln() {
                return Some(sum);
            }
            if ln_bound > prev_ln_bound {
                return None;
            }
            prev_ln_bound = ln_bound;
        }
        None
    }
}

/// Truncation lengths per candidate radius and the accepted radii (negative side, positive
/// side) for one coefficient list.
fn series_plan(coeffs: &[f64], rmax: f64, cond_max: f64) -> ([usize; SERIES_RADII.len()], f64, f64) {
    let mut nterms = [coeffs.len(); SERIES_RADII.len()];
    let mut radius_neg = 0.0;
    let mut radius_pos = 0.0;
    let mut neg_ok = true;
    let mut pos_ok = true;
    for (j, frac) in SERIES_RADII.iter().enumerate() {
        let r = frac * rmax;
        let mut abs_sum = 0.0;
        let mut pos = 0.0;
        let mut neg = 0.0;
        let mut p = 1.0;
        let mut sign = 1.0;
        for c in coeffs {
            abs_sum += (c * p).abs();
            pos += c * p;
            neg += sign * c * p;
            p *= r;
            sign = -sign;
        }
        let cond_neg = abs_sum / neg.abs();
        let cond_pos = abs_sum / pos.abs();
        neg_ok = neg_ok && cond_neg <= cond_max;
        pos_ok = pos_ok && cond_pos <= cond_max;
        if neg_ok {
            radius_neg = r;
        }
        if pos_ok {
            radius_pos = r;
        }
        // smallest |E| on the used sides, for the truncation tolerance
        let mut floor = f64::INFINITY;
        if neg_ok {
            floor = floor.min(neg.abs());
        }
        if pos_ok {
            floor = floor.min(pos.abs());
        }
        if !floor.is_finite() {
            floor = abs_sum;
        }
        let tol = SERIES_TAIL_TOL * floor;
        // keep terms up to the last one that is not negligible
        let mut n = coeffs.len();
        let mut pk = r.powi(coeffs.len() as i32 - 1);
        for k in (0..coeffs.len()).rev() {
            if (coeffs[k] * pk).abs() > tol || !pk.is_finite() {
                n = k + 1;
                break;
            }
            if k == 0 {
                n = 1;
            }
            pk /= r;
        }
        nterms[j] = n;
    }
    (nterms, radius_neg, radius_pos)
}

// ---------------------------------------------------------------------------------------------
// Tests
// ---------------------------------------------------------------------------------------------

#[cfg(test)]
mod tests {
    use super::*;

    /// Relative tolerance of the identity and table checks: the accuracy target of the
    /// module (1e-12 relative, the target).
    const REL_TOL: f64 = 1e-12;

    fn assert_rel(what: &str, computed: f64, expected: f64, tol: f64) {
        let rel = ((computed - expected) / expected).abs();
        assert!(
            rel <= tol,
            "{what}: computed {computed:e}, expected {expected:e}, relative error {rel:e} > tolerance {tol:e}"
        );
    }

    #[test]
    fn alpha_one_beta_one_is_exp() {
        let series = MittagLefflerSeries::new(1.0, 1.0).expect("valid parameters");
        for &z in &[-200.0, -50.0, -7.5, -2.0, -0.3, 0.0, 1e-8, 0.9, 2.0, 5.0] {
            let expected = f64::exp(z);
            let what = format!("E_1,1({z}) vs exp (identity)");
            assert_rel(&what, mittag_leffler(1.0, 1.0, z).expect("finite"), expected, REL_TOL);
            assert_rel(&what, series.eval(z), expected, REL_TOL);
        }
    }

    #[test]
    fn alpha_one_beta_two_is_expm1_over_z() {
        let series = MittagLefflerSeries::new(1.0, 2.0).expect("valid parameters");
        for &z in &[-200.0, -50.0, -7.5, -2.0, -0.3, 1e-8, 0.9, 2.0, 5.0] {
            let expected = f64::exp_m1(z) / z;
            let what = format!("E_1,2({z}) vs expm1(z)/z (identity)");
            assert_rel(&what, mittag_leffler(1.0, 2.0, z).expect("finite"), expected, REL_TOL);
            assert_rel(&what, series.eval(z), expected, REL_TOL);
        }
        assert_rel("E_1,2(0)", series.eval(0.0), 1.0, REL_TOL);
    }

    #[test]
    fn math_md_table_values() {
        // shared/MATH.md section 6 (mpmath, 150 digits), values copied as printed there
        let table = [
            (0.6, 1.6, -1.0, "5.8667265905689370e-01"),
            (0.6, 2.6, -10.0, "8.9563910180708639e-02"),
            (0.75, 1.75, -30.0, "3.3016110243562762e-02"),
            (1.0, 2.0, -5.0, "1.9865241060018290e-01"),
            (0.55, 1.55, 0.5, "1.8414048202089539e+00"),
        ];
        for (a, b, z, printed) in table {
            let expected: f64 = printed.parse().expect("table value parses");
            let what = format!("E_{a},{b}({z}) vs MATH.md table (mpmath)");
            assert_rel(&what, mittag_leffler(a, b, z).expect("finite"), expected, REL_TOL);
            let series = MittagLefflerSeries::new(a, b).expect("valid parameters");
            assert_rel(&what, series.eval(z), expected, REL_TOL);
        }
    }

    #[test]
    fn rejects_bad_input_without_panicking() {
        assert!(matches!(
            mittag_leffler(f64::NAN, 1.0, 0.0),
            Err(MittagLefflerError::NonFiniteInput { name: "alpha", .. })
        ));
        assert!(matches!(
            mittag_leffler(0.5, f64::INFINITY, 0.0),
            Err(MittagLefflerError::NonFiniteInput { name: "beta", .. })
        ));
        assert!(matches!(
            mittag_leffler(0.5, 1.0, f64::NEG_INFINITY),
            Err(MittagLefflerError::NonFiniteInput { name: "z", .. })
        ));
        for a in [0.0, -0.5, 1.5] {
            assert_eq!(mittag_leffler(a, 1.0, 1.0), Err(MittagLefflerError::AlphaOutOfRange { alpha: a }));
        }
        let s = MittagLefflerSeries::new(0.7, 1.2).expect("valid parameters");
        assert!(s.eval(f64::NAN).is_nan());
        assert!(s.eval(f64::NEG_INFINITY).abs() <= 0.0);
        assert!(s.eval(f64::INFINITY).is_infinite());
        let (v, d) = s.eval_with_derivative(f64::NAN);
        assert!(v.is_nan() && d.is_nan());
    }

    #[test]
    fn odd_parameters_do_not_panic() {
        for &a in &[1e-3, 0.1, 0.3, 0.5, 0.999_999, 1.0] {
            for &b in &[-3.0, -1.0, -0.5, 0.0, 1e-9, 0.5, 1.0, 3.7, 50.0, 400.0] {
                let s = MittagLefflerSeries::new(a, b).expect("valid parameters");
                for &z in &[-1e6, -700.0, -3.0, -1e-300, 0.0, 1e-300, 0.5, 3.0, 60.0, 1e5] {
                    let _ = s.eval(z);
                    let _ = s.eval_with_derivative(z);
                    let _ = mittag_leffler(a, b, z);
                }
            }
        }
    }
}
