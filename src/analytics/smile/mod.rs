//! Smiles per expiry: a curve of total implied variance `w(k)` over log-moneyness,
//! fitted to one slice's quotes, with explicit wings and the butterfly check.
//!
//! Two fitting methods (MATH.md section 3):
//! - [`svi`]: raw SVI by quasi-explicit calibration (Zeliade Systems white paper
//!   2009), weighted by bid/ask, with off-market quotes screened out. The default:
//!   listed quotes are noisy and sparse, a smoothing fit with linear wings whose
//!   slopes respect Lee's moment bound holds up where an interpolant reproduces the noise.
//! - [`monotone`]: a shape-preserving cubic through the quotes (SIAM J. Numer.
//!   Anal. 17(2) (1980), "Monotone piecewise cubic interpolation") with linear wings, for dense clean quotes that
//!   should be reproduced exactly.

pub mod delta_levels;
pub mod monotone;
pub mod svi;
mod svi_quasi_explicit;
pub mod svi_spline;

use crate::analytics::tolerances;
use monotone::MonotoneSmile;
use svi::SviParams;
use svi_spline::SviSpline;

/// Total implied variance and its first two derivatives in log-moneyness at one point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SmilePoint {
    /// Total implied variance `w` (variance x years).
    pub w: f64,
    /// `dw/dk`.
    pub dw: f64,
    /// `d2w/dk2`.
    pub d2w: f64,
}

/// A smile quote after validation: log-moneyness and total variance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SmileQuote {
    /// Log-moneyness `ln(K/F)`.
    pub k: f64,
    /// Implied volatility (decimal, annualised).
    pub vol: f64,
    /// Half the bid/ask spread in vol, when both were quoted.
    pub half_spread: Option<f64>,
}

/// How a slice's smile is built from its quotes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum SmileMethod {
    /// SVI plus a cross-validated smoothing spline of its residuals, square-root wings
    /// ([`svi_spline`]): exact on clean quotes, robust with bid/ask (the default).
    #[default]
    SviSpline,
    /// Raw SVI alone, weighted by bid/ask: smooths, and cannot bend to a clean smile.
    Svi,
    /// Shape-preserving cubic through every quote, linear wings.
    Monotone,
}

/// A fitted smile: defined for every log-moneyness, wings included.
#[derive(Debug, Clone, PartialEq)]
pub enum SmileCurve {
    /// Raw SVI over the whole line.
    Svi(SviParams),
    /// SVI plus a residual spline inside the kept quotes, square-root wings beyond.
    SviSpline(SviSpline),
    /// Cubic between the quotes, linear beyond.
    Monotone(MonotoneSmile),
}

impl SmileCurve {
    /// Total variance and derivatives at log-moneyness `k`.
    pub fn point(&self, k: f64) -> SmilePoint {
        match self {
            Self::Svi(p) => p.point(k),
            Self::SviSpline(c) => c.point(k),
            Self::Monotone(m) => m.point(k),
        }
    }

    /// Total variance at log-moneyness `k`.
    pub fn total_variance(&self, k: f64) -> f64 {
        match self {
            Self::Svi(p) => p.total_variance(k),
            Self::SviSpline(c) => c.total_variance(k),
            Self::Monotone(m) => m.point(k).w,
        }
    }

    /// Log-moneyness where the curve's second derivative jumps (interpolation nodes);
    /// empty for an analytic curve.
    pub fn kinks(&self) -> &[f64] {
        match self {
            Self::Svi(_) => &[],
            Self::SviSpline(c) => c.edges(),
            Self::Monotone(m) => m.nodes(),
        }
    }

    /// The SVI base of an SVI-based curve.
    pub fn svi_base(&self) -> Option<&SviParams> {
        match self {
            Self::Svi(p) => Some(p),
            Self::SviSpline(c) => Some(&c.svi),
            Self::Monotone(_) => None,
        }
    }

    /// Slopes of total variance in the left (as a magnitude) and right wing.
    pub fn wing_slopes(&self) -> (f64, f64) {
        match self {
            Self::Svi(p) => p.wing_slopes(),
            Self::SviSpline(c) => c.wing_slopes(),
            Self::Monotone(m) => m.wing_slopes(),
        }
    }
}

/// What replication needs of a smile: total variance at any log-moneyness, and where
/// its second derivative jumps (so that integration panels end there).
pub trait SmileShape {
    /// Total implied variance `w(k)` at log-moneyness `k`.
    fn total_variance(&self, k: f64) -> f64;
    /// Log-moneyness of the curve's kinks (interpolation nodes); empty when smooth.
    fn kinks(&self) -> &[f64];
    /// Where an analytic curve bends and over what width, `(centre, width)` in
    /// log-moneyness, when it has such a place (SVI's vertex `m` and `sigma`).
    fn vertex(&self) -> Option<(f64, f64)> {
        None
    }
    /// Relative accuracy the replication integrals are held to on this curve.
    fn relative_tolerance(&self) -> f64 {
        tolerances::REPLICATION_REL_TOL
    }
    /// [`SmileShape::total_variance`] at each `k[i]` into `w[i]`: a curve that
    /// dispatches on its kind can do so once for many points.
    fn total_variances(&self, k: &[f64], w: &mut [f64]) {
        for (k, w) in k.iter().zip(w.iter_mut()) {
            *w = self.total_variance(*k);
        }
    }
}

impl SmileShape for SmileCurve {
    fn total_variance(&self, k: f64) -> f64 {
        SmileCurve::total_variance(self, k)
    }
    fn kinks(&self) -> &[f64] {
        SmileCurve::kinks(self)
    }
    fn relative_tolerance(&self) -> f64 {
        match self {
            Self::SviSpline(c) => c.replication_tolerance,
            _ => tolerances::REPLICATION_REL_TOL,
        }
    }
    fn vertex(&self) -> Option<(f64, f64)> {
        match self {
            Self::Svi(p) => Some((p.m, p.sigma)),
            Self::SviSpline(c) => Some((c.svi.m, c.svi.sigma)),
            Self::Monotone(_) => None,
        }
    }
    fn total_variances(&self, k: &[f64], w: &mut [f64]) {
        match self {
            Self::Svi(p) => k.iter().zip(w.iter_mut()).for_each(|(k, w)| *w = p.total_variance(*k)),
            Self::SviSpline(c) => k.iter().zip(w.iter_mut()).for_each(|(k, w)| *w = c.total_variance(*k)),
            Self::Monotone(m) => k.iter().zip(w.iter_mut()).for_each(|(k, w)| *w = m.point(*k).w),
        }
    }
}

/// A smile fitted to one slice, with what the fit says about the quotes.
#[derive(Debug, Clone, PartialEq)]
pub struct FittedSmile {
    /// The curve.
    pub curve: SmileCurve,
    /// Root-mean-square distance in vol between the curve and the quotes used.
    pub rmse_vol: f64,
    /// Indices of quotes left out of the fit as off-market, with their signed distance
    /// in vol (fitted smile minus quote: negative when the quote lies above the smile).
    pub excluded: Vec<(usize, f64)>,
    /// Indices of quotes kept in the fit but further from it than
    /// [`SUSPECT_HALF_SPREADS`] half spreads (only with bid/ask).
    pub suspect: Vec<usize>,
    /// Lowest and highest quoted log-moneyness.
    pub quoted_range: (f64, f64),
    /// What the fit has to say about itself, in words (a method replaced by another).
    pub notes: Vec<String>,
    /// What the levels' standard errors need from the fit (SVI-based smiles only).
    pub noise: Option<crate::analytics::uncertainty::QuoteNoise>,
    /// [`butterfly_over_quotes`] of `curve` over `quoted_range`, when the fit already
    /// made that check (the default smile does, to choose its smoothing): `None` when
    /// it did not, `Some(None)` when the curve passed.
    pub butterfly: Option<Option<ButterflyViolation>>,
}

impl FittedSmile {
    /// [`butterfly_over_quotes`] of the curve over its quoted range: the fit's own
    /// check where it made one, else a scan now.
    pub fn butterfly_over_quotes(&self) -> Option<ButterflyViolation> {
        self.butterfly.unwrap_or_else(|| butterfly_over_quotes(&self.curve, self.quoted_range))
    }
}

/// A kept quote further than this many half spreads from the fitted smile is named as
/// suspect (common practice, no source: the fit should lie inside the quote's market).
pub const SUSPECT_HALF_SPREADS: f64 = 2.0;

/// Durrleman's butterfly function `g(k)`; the risk-neutral density is non-negative
/// where `g >= 0` (Durrleman 2010, "From implied to spot volatilities", Finance
/// Stoch. 14).
pub fn durrleman_g(k: f64, p: SmilePoint) -> f64 {
    // One division: `1/w` serves both terms.
    let inv_w = 1.0 / p.w;
    let a = 1.0 - 0.5 * k * p.dw * inv_w;
    a * a - 0.25 * p.dw * p.dw * (inv_w + 0.25) + 0.5 * p.d2w
}

/// Where a smile has butterfly arbitrage: the range of log-moneyness with `g < 0`
/// on the scanned grid, and the minimum of `g`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ButterflyViolation {
    /// First grid point with `g < -tolerance`.
    pub k_from: f64,
    /// Last grid point with `g < -tolerance`.
    pub k_to: f64,
    /// Smallest `g` found.
    pub g_min: f64,
    /// Where the smallest `g` was found.
    pub k_at_min: f64,
}

/// The butterfly check every smile gets: [`butterfly_scan`] over the quoted range
/// `quoted` plus a quarter of its width on each side, on
/// [`tolerances::BUTTERFLY_SCAN_STEPS`] steps, at [`tolerances::BUTTERFLY_G_TOL`].
pub fn butterfly_over_quotes(curve: &SmileCurve, quoted: (f64, f64)) -> Option<ButterflyViolation> {
    let (k_lo, k_hi) = quoted;
    let pad = 0.25 * (k_hi - k_lo);
    butterfly_scan(curve, k_lo - pad, k_hi + pad, tolerances::BUTTERFLY_SCAN_STEPS, tolerances::BUTTERFLY_G_TOL)
}

/// Scans `g(k)` over `[k_lo, k_hi]` on `steps + 1` evenly spaced points and reports
/// the violated range, if any, below `-tolerance`.
pub fn butterfly_scan(
    curve: &SmileCurve,
    k_lo: f64,
    k_hi: f64,
    steps: usize,
    tolerance: f64,
) -> Option<ButterflyViolation> {
    let steps = steps.max(1);
    // Total variance and g a block of points at a time, in a loop without branches:
    // the points are independent, so their square roots and divisions overlap (and
    // pair up in vector registers) instead of each point waiting on the last.
    const BLOCK: usize = 16;
    let mut found: Option<ButterflyViolation> = None;
    for first in (0..=steps).step_by(BLOCK) {
        let count = BLOCK.min(steps + 1 - first);
        let mut k = [0.0; BLOCK];
        for (j, k) in k.iter_mut().enumerate() {
            *k = k_lo + (k_hi - k_lo) * (first + j) as f64 / steps as f64;
        }
        let mut w = [0.0; BLOCK];
        let mut g = [0.0; BLOCK];
        // The whole block, also past the last grid point in the last block (a curve is
        // defined everywhere; those points are not scanned): a fixed trip count is what
        // lets the loop pair up. One dispatch on the curve's kind per block.
        match curve {
            SmileCurve::Svi(params) => block_g(&k, &mut w, &mut g, |k| params.point(k)),
            SmileCurve::SviSpline(curve) => block_g(&k, &mut w, &mut g, |k| curve.point(k)),
            SmileCurve::Monotone(cubic) => block_g(&k, &mut w, &mut g, |k| cubic.point(k)),
        }
        scan_block(&k[..count], &w[..count], &g[..count], tolerance, &mut found);
    }
    found
}

/// Total variance `w[j]` and Durrleman's `g[j]` at each `k[j]` of a block.
#[inline(always)]
fn block_g(k: &[f64], w: &mut [f64], g: &mut [f64], point: impl Fn(f64) -> SmilePoint) {
    for ((k, w), g) in k.iter().zip(w.iter_mut()).zip(g.iter_mut()) {
        let p = point(*k);
        *w = p.w;
        *g = durrleman_g(*k, p);
    }
}

/// Records the points of one block of the butterfly scan where `g < -tolerance` or
/// the total variance is not positive.
fn scan_block(k: &[f64], w: &[f64], g: &[f64], tolerance: f64, found: &mut Option<ButterflyViolation>) {
    for ((&k, &w), &g) in k.iter().zip(w).zip(g) {
        if !(w > 0.0) {
            // Non-positive total variance is itself an arbitrage (negative price of time).
            let v =
                found.get_or_insert(ButterflyViolation { k_from: k, k_to: k, g_min: f64::NEG_INFINITY, k_at_min: k });
            v.k_to = k;
            continue;
        }
        if g < -tolerance {
            let v = found.get_or_insert(ButterflyViolation { k_from: k, k_to: k, g_min: g, k_at_min: k });
            v.k_to = k;
            if g < v.g_min {
                v.g_min = g;
                v.k_at_min = k;
            }
        }
    }
}

/// Fits a smile to validated quotes (sorted by `k`, at least three) of an expiry
/// `tau` years away.
///
/// # Errors
/// [`SmileError`] when the quotes cannot carry a smile (too few, unsorted, or
/// non-finite values).
pub fn fit_smile(quotes: &[SmileQuote], tau: f64, method: SmileMethod) -> Result<FittedSmile, SmileError> {
    check_quotes(quotes, tau)?;
    match method {
        SmileMethod::SviSpline => svi_spline::fit(quotes, tau, None, svi::SlopePrior::default()),
        SmileMethod::Svi => svi::fit(quotes, tau),
        SmileMethod::Monotone => monotone::fit(quotes, tau),
    }
}

/// Fits the smiles of all slices of a snapshot, `(quotes, tau)` each.
///
/// With [`SmileMethod::Svi`] and at least `SMOOTHING_MIN_SLICES` expiries, the wing
/// slopes are made consistent across expiries: the first fits' slopes, normalised
/// by the ATM total volatility (`s / sqrt(w(0))`, which varies slowly with expiry),
/// are smoothed by least squares on a quadratic in `ln tau`, and every slice is
/// refitted with a prior towards its smoothed slopes (strength
/// `SLOPE_SMOOTHING_STRENGTH`). A few noisy quotes near the money then borrow wing
/// information from the neighbouring expiries instead of extrapolating their noise.
///
/// # Errors
/// The input position of the first slice whose quotes cannot carry a smile.
pub fn fit_smiles(
    slices: &[(&[SmileQuote], f64)],
    method: SmileMethod,
) -> Result<Vec<FittedSmile>, (usize, SmileError)> {
    if method == SmileMethod::Monotone {
        return slices
            .iter()
            .enumerate()
            .map(|(i, (quotes, tau))| {
                check_quotes(quotes, *tau).map_err(|e| (i, e))?;
                match quote_noise_vol(quotes, *tau) {
                    Some(noise) if noise > MONOTONE_MAX_NOISE_VOL => {
                        let mut fit =
                            svi_spline::fit(quotes, *tau, None, svi::SlopePrior::default()).map_err(|e| (i, e))?;
                        fit.notes.push(format!(
                            "quotes carry about {:.2} vol points of noise: an interpolant would follow it into \
                             the wings, so this smile is svi_spline, not monotone",
                            noise * 100.0
                        ));
                        Ok(fit)
                    }
                    _ => monotone::fit(quotes, *tau).map_err(|e| (i, e)),
                }
            })
            .collect();
    }
    // Each expiry's search starts from its predecessor's fit (in units of the ATM
    // deviation); the start grid runs only when that start does not fit well.
    let mut first: Vec<FittedSmile> = Vec::with_capacity(slices.len());
    for (i, (quotes, tau)) in slices.iter().enumerate() {
        check_quotes(quotes, *tau).map_err(|e| (i, e))?;
        let warm = first.last().and_then(|f: &FittedSmile| f.curve.svi_base().and_then(svi::WarmStart::from_params));
        first.push(fit_with(method, quotes, *tau, svi::SlopePrior::default(), warm).map_err(|e| (i, e))?);
    }
    if slices.len() < SMOOTHING_MIN_SLICES {
        return Ok(first);
    }
    let sd: Vec<f64> = first.iter().map(|f| f.curve.total_variance(0.0).max(1e-12).sqrt()).collect();
    let x: Vec<f64> = slices.iter().map(|(_, tau)| tau.ln()).collect();
    let base_slopes = |f: &FittedSmile| f.curve.svi_base().map_or_else(|| f.curve.wing_slopes(), |p| p.wing_slopes());
    let normalised = |pick: fn((f64, f64)) -> f64| -> Vec<f64> {
        first.iter().zip(&sd).map(|(f, s)| pick(base_slopes(f)) / s).collect()
    };
    // A slice says more about a wing the further out it is quoted on that side:
    // weight (reach in ATM standard deviations / NARROW_REACH_SD)^2, at least 1%.
    let reach_weight = |reach: f64, s: f64| (reach / (s * NARROW_REACH_SD)).clamp(0.1, 1.0).powi(2);
    let left_weight: Vec<f64> = first.iter().zip(&sd).map(|(f, s)| reach_weight(-f.quoted_range.0, *s)).collect();
    let right_weight: Vec<f64> = first.iter().zip(&sd).map(|(f, s)| reach_weight(f.quoted_range.1, *s)).collect();
    let (Some(left), Some(right)) =
        (quadratic_fit(&x, &normalised(|p| p.0), &left_weight), quadratic_fit(&x, &normalised(|p| p.1), &right_weight))
    else {
        return Ok(first);
    };
    let mut out = first;
    for (i, (quotes, tau)) in slices.iter().enumerate() {
        let at = |c: [f64; 3]| (c[0] + c[1] * x[i] + c[2] * x[i] * x[i]) * sd[i];
        let prior = svi::SlopePrior {
            left: at(left).clamp(0.0, tolerances::MAX_WING_SLOPE),
            right: at(right).clamp(0.0, tolerances::MAX_WING_SLOPE),
            strength: SLOPE_SMOOTHING_STRENGTH,
        };
        // With a residual spline the wings continue the fitted curve at its edges, where
        // the SVI base still sets the curvature: a slice quoted to `NARROW_REACH_SD`
        // deviations on both sides shows its own, and keeps its fit.
        if method == SmileMethod::SviSpline {
            let reach = NARROW_REACH_SD * sd[i];
            if -quotes[0].k >= reach && quotes[quotes.len() - 1].k >= reach {
                continue;
            }
        }
        // A slice whose own wings already agree with its neighbours' keeps its fit.
        let (own_left, own_right) = base_slopes(&out[i]);
        let agrees = |own: f64, target: f64| (own - target).abs() <= SLOPE_AGREEMENT * (target.abs() + 0.1 * sd[i]);
        if agrees(own_left, prior.left) && agrees(own_right, prior.right) {
            continue;
        }
        let own = out[i].curve.svi_base().and_then(svi::WarmStart::from_params);
        if let Ok(refit) = fit_with(method, quotes, *tau, prior, own) {
            out[i] = refit;
        }
    }
    Ok(out)
}

/// One slice's fit by an SVI-based method with a slope prior and a warm start.
fn fit_with(
    method: SmileMethod,
    quotes: &[SmileQuote],
    tau: f64,
    prior: svi::SlopePrior,
    warm: Option<svi::WarmStart>,
) -> Result<FittedSmile, SmileError> {
    match method {
        SmileMethod::SviSpline => svi_spline::fit(quotes, tau, warm, prior),
        _ => svi::fit_from(quotes, tau, prior, warm),
    }
}

/// Noise above which `monotone` gives way to `svi_spline`, in vol (0.05 vol points).
/// Rule of thumb (no source): on QuantLib Heston quotes the estimate is below 1e-6 vol
/// when they are exact and 0.1 to 0.2 vol points with 0.2 to 0.3 vol points of uniform
/// noise (`tests/smile_sets.rs`), where an interpolant's fitted wings ran a variance
/// swap to 70 times its value.
pub const MONOTONE_MAX_NOISE_VOL: f64 = 5e-4;

/// The quotes' noise in vol, estimated from a cubic smoothing spline of total variance
/// with its smoothing chosen by generalised cross-validation
/// ([`crate::analytics::numerics::smoothing_spline::SmoothingFit::noise_scale`]), in vol units
/// through the weights `(2 vol tau)^-2`. `None` with fewer than five quotes, or when
/// the spline interpolates them (clean quotes).
pub fn quote_noise_vol(quotes: &[SmileQuote], tau: f64) -> Option<f64> {
    if quotes.len() < 5 {
        return None;
    }
    let x: Vec<f64> = quotes.iter().map(|q| q.k).collect();
    let y: Vec<f64> = quotes.iter().map(|q| q.vol * q.vol * tau).collect();
    let weight: Vec<f64> = quotes.iter().map(|q| (2.0 * q.vol * tau).powi(-2)).collect();
    crate::analytics::numerics::smoothing_spline::fit_by_cross_validation(&x, &y, &weight).ok()?.noise_scale()
}

/// Weighted least-squares coefficients `[c0, c1, c2]` of `y ~ c0 + c1 x + c2 x^2`.
fn quadratic_fit(x: &[f64], y: &[f64], weight: &[f64]) -> Option<[f64; 3]> {
    least_squares3(x.iter().zip(y).zip(weight).map(|((&xi, &yi), &wi)| ([1.0, xi, xi * xi], yi, wi)))
}

/// Weighted least squares with three basis functions: rows of `(basis values, y,
/// weight)`; `None` when the normal matrix is singular or the result not finite.
pub(crate) fn least_squares3(rows: impl Iterator<Item = ([f64; 3], f64, f64)>) -> Option<[f64; 3]> {
    let mut m = [[0.0; 3]; 3];
    let mut v = [0.0; 3];
    for (phi, y, w) in rows {
        for r in 0..3 {
            for c in 0..3 {
                m[r][c] += w * phi[r] * phi[c];
            }
            v[r] += w * phi[r] * y;
        }
    }
    let c = crate::analytics::numerics::small_solve::solve_small(3, m, v)?;
    c.iter().all(|v| v.is_finite()).then_some(c)
}

/// Reach (in ATM standard deviations) from which a slice's wing slope counts fully
/// in the smoothing across expiries; nearer quotes count less (common practice, no
/// source: a wing quoted to three standard deviations shows its slope).
pub const NARROW_REACH_SD: f64 = 3.0;

/// A slice is refitted only when one of its wing slopes differs from the smoothed
/// one by more than this fraction (of the smoothed slope plus a tenth of the ATM
/// total volatility): the prior would barely move a fit that already agrees.
pub const SLOPE_AGREEMENT: f64 = 0.1;

/// Expiries needed before wing slopes are smoothed across them.
pub const SMOOTHING_MIN_SLICES: usize = 4;
/// Strength of the prior towards the smoothed wing slopes, in the units of
/// [`svi::SVI_WING_RIDGE`]. Chosen by experiment on the QuantLib Heston fixture
/// with 40 noise draws (see `tests/reference_heston.rs`, which keeps the
/// experiment): with it, the worst variance-swap error over all draws and expiries
/// is 4.3% and 90% of draws stay within 3.1% at every expiry; with the ridge alone
/// the worst was 4.9% and the p90 3.3%.
pub const SLOPE_SMOOTHING_STRENGTH: f64 = 0.03;

/// Why a smile could not be fitted.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SmileError {
    /// Fewer than three quotes.
    #[error("a smile needs at least 3 quotes, got {0}")]
    TooFewQuotes(usize),
    /// Log-moneyness not strictly increasing at this quote index.
    #[error("quote {0} is not above the previous one in strike")]
    Unsorted(usize),
    /// A non-finite or non-positive value at this quote index.
    #[error("quote {0} has a non-finite or non-positive value")]
    BadValue(usize),
    /// The expiry is not a positive finite time.
    #[error("time to expiry must be positive and finite, got {0}")]
    BadTau(f64),
}

fn check_quotes(quotes: &[SmileQuote], tau: f64) -> Result<(), SmileError> {
    if !(tau.is_finite() && tau > 0.0) {
        return Err(SmileError::BadTau(tau));
    }
    if quotes.len() < 3 {
        return Err(SmileError::TooFewQuotes(quotes.len()));
    }
    for (i, q) in quotes.iter().enumerate() {
        let spread_ok = q.half_spread.is_none_or(|h| h.is_finite() && h >= 0.0);
        if !(q.k.is_finite() && q.vol.is_finite() && q.vol > 0.0 && spread_ok) || q.vol * q.vol * tau <= 0.0 {
            return Err(SmileError::BadValue(i));
        }
        if i > 0 && q.k <= quotes[i - 1].k {
            return Err(SmileError::Unsorted(i));
        }
    }
    Ok(())
}

/// Root-mean-square vol distance between a curve and the quotes at `used` indices.
pub(crate) fn rmse_vol(curve: &SmileCurve, quotes: &[SmileQuote], tau: f64, used: impl Iterator<Item = usize>) -> f64 {
    let mut sum = 0.0;
    let mut n = 0usize;
    for i in used {
        let q = quotes[i];
        let fitted = (curve.total_variance(q.k).max(0.0) / tau).sqrt();
        sum += (fitted - q.vol).powi(2);
        n += 1;
    }
    if n == 0 {
        0.0
    } else {
        (sum / n as f64).sqrt()
    }
}
