//! Total leverage `L(T) = T * LS(T)` of rough Heston and classical Heston for a
//! piecewise-constant forward-variance curve, with derivatives for calibration.
//!
//! Rough Heston (El Euch & Rosenbaum 2019, "The characteristic function of rough
//! Heston models", Math. Finance 29(1)) in forward-variance form has the kernel
//! `kappa(t) = nu t^(a-1) E_{a,a}(-lambda t^a)`, `a = H + 1/2`. With `c = rho nu` and
//! `mu = lambda - c`, for `xi` constant on `(T_{j-1}, T_j]`:
//!
//! `L(T_i) = sum_{j<=i} xi_j [Phi(T_i - T_{j-1}) - Phi(T_i - T_j)]`,
//! `Phi(t) = c t^(a+1) E_{a,a+2}(-mu t^a)`.
//!
//! Classical Heston (Heston 1993, RFS 6(2)) is `a = 1`.

use super::expiry_gaps::distinct_gaps;
use crate::analytics::numerics::batched::{dot_gather, horner_many, horner_many2};
use crate::analytics::numerics::digamma::digamma;
use crate::analytics::numerics::exp::exp;
use crate::analytics::numerics::gamma::rgamma;
use crate::analytics::numerics::polynomial::terms_needed;
use crate::analytics::special::mittag_leffler::shared_contour::{NegativeAxisChebyshev, NegativeAxisContour};
use crate::analytics::special::mittag_leffler::{
    MittagLefflerError, MittagLefflerSeries, DERIV_SERIES_COND_MAX, SERIES_BUILD_TOL, SERIES_COND_MAX,
    SERIES_MAX_TERMS, SERIES_RADIUS_MAX, SERIES_TAIL_TOL,
};
use std::cell::RefCell;
use std::convert::Infallible;

/// Parameters that the leverage swaps identify.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LeverageParams {
    /// Hurst exponent `H` in (0, 1/2]; classical Heston is `H = 1/2`.
    pub hurst: f64,
    /// `c = rho * nu`, the spot-variance covariation scale (1/sqrt(year)).
    pub rho_nu: f64,
    /// Mean reversion `lambda >= 0` (1/year^a).
    pub mean_reversion: f64,
}

/// Why the model could not be evaluated.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelError {
    /// Expiries not strictly increasing and positive, or mismatched lengths.
    #[error("expiries must be positive, strictly increasing and match the forward variances")]
    BadCurve,
    /// Parameters outside the model's domain.
    #[error("parameters outside the model domain: {0}")]
    BadParams(String),
}

impl From<MittagLefflerError> for ModelError {
    fn from(e: MittagLefflerError) -> Self {
        Self::BadParams(e.to_string())
    }
}

/// A forward-variance curve and the pairwise expiry gaps its leverage needs,
/// precomputed once so that each model evaluation only does arithmetic.
#[derive(Debug, Clone)]
pub struct LeverageCurve {
    taus: Vec<f64>,
    xi: Vec<f64>,
    /// The distinct gaps `T_i - T_{j-1}` (`j = 0..=i`, `T_{-1} = 0`), ascending: listed
    /// expiries fall on calendar dates, so many pairs share a gap (630 pairs, 424 distinct
    /// gaps on the demo snapshot), and `Phi` is evaluated once per distinct gap.
    gaps: Vec<f64>,
    ln_gaps: Vec<f64>,
    /// `gap_of_pair[i * (i + 1) / 2 + j]`: the index in `gaps` of `T_i - T_{j-1}`.
    gap_of_pair: Vec<u32>,
    /// `w_0 = xi_0`, `w_j = xi_j - xi_{j-1}`: weights of `f(T_i - T_{j-1})` in [`Self::assemble`].
    weights: Vec<f64>,
    /// Series evaluators of `E_{a,a+2}` for the last few `a`: building one costs a
    /// Gamma function per term, and a solver asks for the same `a` repeatedly.
    series_cache: RefCell<Vec<(u64, MittagLefflerSeries)>>,
    /// Power-series coefficients of `E_{a,a+2}` (and of its derivatives) for the last few
    /// `a`, summed over all gaps at once where the series is well conditioned.
    phi_cache: RefCell<Vec<PhiSeries>>,
    /// Shared contour nodes of `E_{a,a+2}` on the negative axis for the last few `a`
    /// (`None` when no contour meets its target): gaps beyond the series radius with
    /// `mu > 0` take value and both derivatives from them.
    contour_cache: RefCell<Vec<(u64, Option<NegativeAxisContour>)>>,
    /// The last evaluation, reused when the same parameters come again.
    last: RefCell<PhiValues>,
}

/// Evaluators kept per curve (the point, its Hurst-derivative neighbour, a trial).
const SERIES_CACHE_SIZE: usize = 4;

/// Index of the entry keyed `key` (by `key_of`) in a cache of the last few `a`; when
/// missing, the oldest entry is dropped if the cache holds [`SERIES_CACHE_SIZE`], and
/// `build` makes the new one from the entries left.
fn cache_slot<T, E>(
    cache: &mut Vec<T>,
    key: u64,
    key_of: impl Fn(&T) -> u64,
    build: impl FnOnce(&[T]) -> Result<T, E>,
) -> Result<usize, E> {
    if let Some(i) = cache.iter().position(|entry| key_of(entry) == key) {
        return Ok(i);
    }
    if cache.len() >= SERIES_CACHE_SIZE {
        cache.remove(0);
    }
    let entry = build(cache)?;
    cache.push(entry);
    Ok(cache.len() - 1)
}

/// Step in `H` (= in `a`) of the backward difference used for the rare gaps that neither
/// the series nor the shared contour covers (positive `z`, or a contour whose rounding
/// estimate is too large): truncation error about `1e-7` relative, rounding about `1e-9`
/// (values of order 1 accurate to 1e-16), enough for the solver's steps.
const HURST_STEP: f64 = 1e-7;

/// Largest rounding estimate of the shared contour ([`NegativeAxisContour`]) at which its
/// value is used; above it the single-point evaluator decides. The estimate is
/// pessimistic: where it reached 2.8e-12 the values were within 4.4e-15 of the
/// single-point evaluator (module tests of the contour), so 1e-12 keeps the values to
/// about 1e-14.
const CONTOUR_REL_ACCEPT: f64 = 1e-12;

/// Fewest gaps beyond the series radius for which a Chebyshev interpolant
/// ([`NegativeAxisChebyshev`], 25 to 65 contour sums to build) replaces a contour sum
/// per gap: below it building costs more than it saves.
const CHEBYSHEV_MIN_GAPS: usize = 64;

/// Factor by which the Chebyshev interpolant's range of `x = -z` is widened on each
/// side beyond the gaps that need it, so that a fit's next points at the same `a`
/// (with `mu` within this factor) reuse it instead of sampling the contour again.
/// Rule of thumb (no source): the last iterations of a fit move `mu` by well under
/// 1%, and 5% widens the range in `ln x` by 0.1, within one interpolation degree.
const CHEBYSHEV_RANGE_PAD: f64 = 1.05;

/// Smallest radius the coefficient lists are built for: at smaller radii the derivative
/// coefficients `(k+1) c_{k+1}` are multiplied by up to `(k+1)/r` relative to the value's
/// terms, and building for at least 1/4 keeps the extra factor below about 100, far inside
/// the `SERIES_BUILD_TOL` margin (1e-24 against the 2^-60 truncation tolerance).
const PHI_MIN_BUILD_RADIUS: f64 = 0.25;

/// Condition-number limit of the value series when only ranking start points
/// ([`LeverageCurve::total_leverage_for_start`]): rounding then costs at most about
/// `1e4 * 4e-14 = 4e-10` relative (the series coefficients carry up to 4e-14, measured
/// against mpmath in the Mittag-Leffler module's tests), far below the differences between
/// start points.
const START_SERIES_COND_MAX: f64 = 1e4;

/// Largest `|z|` summed by series when ranking start points: the start grid's largest `|z|`
/// on the demo snapshot is 5.7 (`mu = 2`, gap 3 years, `a = 0.95`); the condition limit
/// above, not this radius, is what usually stops the series.
const START_SERIES_RADIUS_MAX: f64 = 8.0;

/// How accurately `Phi` is wanted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Accuracy {
    /// Full double precision (series condition number at most `SERIES_COND_MAX`).
    Full,
    /// Enough to rank start points (at most `START_SERIES_COND_MAX`).
    Start,
}

impl Accuracy {
    fn radius_max(self) -> f64 {
        match self {
            Self::Full => SERIES_RADIUS_MAX,
            Self::Start => START_SERIES_RADIUS_MAX,
        }
    }

    fn value_cond_max(self) -> f64 {
        match self {
            Self::Full => SERIES_COND_MAX,
            Self::Start => START_SERIES_COND_MAX,
        }
    }
}

/// Fractions of `min(max |z|, radius limit)` tried, largest first, as the radius inside
/// which the gaps are summed by series: the first one at which every series used is within
/// its condition limit (`SERIES_COND_MAX` for values, `DERIV_SERIES_COND_MAX` for derivatives)
/// is taken. The same kind of ladder as the Mittag-Leffler module's own series radii.
const PHI_RADIUS_FRACTIONS: [f64; 10] = [1.0, 0.875, 0.75, 0.625, 0.5, 0.375, 0.25, 0.125, 0.0625, 0.03125];

/// `Phi/c` on every gap and its derivatives in `mu` and `a`, kept for the last `(a, mu)`:
/// a solver asks for the Jacobian at the point whose residuals it has just computed.
#[derive(Debug, Default, Clone)]
struct PhiValues {
    /// `(a, mu, accuracy)` the values below belong to (bit patterns).
    key: Option<(u64, u64, Accuracy)>,
    /// `t^a` per gap.
    t_a: Vec<f64>,
    /// `z = -mu t^a` per gap.
    z: Vec<f64>,
    /// `E_{a,a+2}(z)` per gap.
    e: Vec<f64>,
    /// `Phi/c = t^(a+1) E` per gap.
    value: Vec<f64>,
    /// `d(Phi/c)/dmu`, filled on request.
    d_mu: Vec<f64>,
    /// `d(Phi/c)/da`, filled on request.
    d_alpha: Vec<f64>,
    /// The Chebyshev interpolant of `E_{a,a+2}` beyond the series radius used for
    /// `e` (reused for the derivatives at the same point), with the bits of its `a`:
    /// it is kept for the next point when `a` is the same (a Hurst exponent held on a
    /// bound or given) and its range still covers the gaps.
    chebyshev: Option<NegativeAxisChebyshev>,
    /// `a` of `chebyshev` (bit pattern).
    chebyshev_alpha: u64,
}

/// The power series of `E_{a,a+2}(z)` for one `a`: coefficients `c_k = 1/Gamma(a k + a + 2)`,
/// those of `dE/dz`, `(k+1) c_{k+1}`, and (on first use) those of the `a`-derivative part
/// `S2(z) = sum_k (k+1) psi(a(k+1)+2) c_k z^k`.
#[derive(Debug, Clone)]
struct PhiSeries {
    alpha: f64,
    /// `|z|` up to which the coefficient lists reach (the last kept term is below
    /// `SERIES_BUILD_TOL` of the largest at this radius).
    built_radius: f64,
    coeffs: Vec<f64>,
    dcoeffs: Vec<f64>,
    psi_coeffs: Vec<f64>,
}

impl PhiSeries {
    fn new(alpha: f64) -> Self {
        Self { alpha, built_radius: -1.0, coeffs: Vec::new(), dcoeffs: Vec::new(), psi_coeffs: Vec::new() }
    }

    /// Coefficients for `|z| <= radius`, with the stopping rule of the Mittag-Leffler
    /// module's series (past the peak of the terms and below `SERIES_BUILD_TOL` of the
    /// largest). Coefficients already computed are kept: they do not depend on the radius.
    fn build(&mut self, radius: f64) {
        let a = self.alpha;
        let b = a + 2.0;
        let r = radius.max(PHI_MIN_BUILD_RADIUS);
        let peak_argument = 2.0 * r.powf(1.0 / a) + 2.0;
        let mut biggest = 0.0_f64;
        let mut power = 1.0_f64;
        let have = self.coeffs.len();
        for k in 0..SERIES_MAX_TERMS {
            let c = match self.coeffs.get(k) {
                Some(&c) => c,
                None => {
                    let c = rgamma(a * k as f64 + b);
                    self.coeffs.push(c);
                    c
                }
            };
            let term = (c * power).abs();
            biggest = biggest.max(term);
            power *= r;
            if k + 1 >= have && a * k as f64 + b > peak_argument && term <= SERIES_BUILD_TOL * biggest && k >= 2 {
                self.coeffs.truncate(k + 1);
                break;
            }
        }
        for k in self.dcoeffs.len() + 1..self.coeffs.len() {
            self.dcoeffs.push(k as f64 * self.coeffs[k]);
        }
        if !self.psi_coeffs.is_empty() {
            self.extend_psi();
        }
        self.built_radius = r;
    }

    /// Extends `psi_coeffs` to the length of `coeffs`.
    fn extend_psi(&mut self) {
        let (a, b) = (self.alpha, self.alpha + 2.0);
        for k in self.psi_coeffs.len()..self.coeffs.len() {
            self.psi_coeffs.push((k + 1) as f64 * digamma(a * k as f64 + b) * self.coeffs[k]);
        }
    }

    /// Radius and length of the value series for gaps with `|z| <= z_max` (`z <= 0` when
    /// `negative`), or `None` when not even the smallest candidate radius is well conditioned.
    fn plan_value(&mut self, z_max: f64, negative: bool, accuracy: Accuracy) -> Option<(f64, usize, f64)> {
        let top = z_max.min(accuracy.radius_max());
        if self.built_radius < top {
            self.build(top);
        }
        PHI_RADIUS_FRACTIONS.iter().find_map(|frac| {
            let r = top * frac;
            truncation(&self.coeffs, r, negative, accuracy.value_cond_max()).map(|(n, tol)| (r, n, tol))
        })
    }

    /// Radius and lengths of the `dE/dz` and `S2` series (condition limit
    /// `DERIV_SERIES_COND_MAX`), like [`plan_value`](Self::plan_value).
    fn plan_derivatives(&mut self, z_max: f64, negative: bool) -> Option<(f64, Truncation, Truncation)> {
        let top = z_max.min(SERIES_RADIUS_MAX);
        if self.built_radius < top {
            self.build(top);
        }
        if self.psi_coeffs.len() < self.coeffs.len() {
            self.extend_psi();
        }
        PHI_RADIUS_FRACTIONS.iter().find_map(|frac| {
            let r = top * frac;
            let deriv = truncation(&self.dcoeffs, r, negative, DERIV_SERIES_COND_MAX)?;
            let psi = truncation(&self.psi_coeffs, r, negative, DERIV_SERIES_COND_MAX)?;
            Some((r, deriv, psi))
        })
    }
}

/// Number of terms kept and the absolute tolerance they were chosen for.
type Truncation = (usize, f64);

/// Number of terms of `sum c_k z^k` needed for `|z| <= r` (later terms below
/// `SERIES_TAIL_TOL` of the sum at `|z| = r`, the smallest `|sum|` there) and that absolute
/// tolerance, or `None` when
/// the condition number `sum |c_k| r^k / |sum c_k z^k|` at `z = -r` (or `+r`) exceeds
/// `cond_max`. For coefficients of one sign the condition number only grows with `|z|`, so
/// the check at `r` covers the whole radius.
fn truncation(coeffs: &[f64], r: f64, negative: bool, cond_max: f64) -> Option<Truncation> {
    let mut abs_sum = 0.0;
    let mut sum = 0.0;
    let mut p = 1.0;
    let mut sign = 1.0;
    for c in coeffs {
        let t = c * p;
        abs_sum += t.abs();
        sum += if negative { sign * t } else { t };
        p *= r;
        sign = -sign;
    }
    if !(abs_sum <= cond_max * sum.abs()) {
        return None;
    }
    let tol = SERIES_TAIL_TOL * sum.abs();
    Some((terms_needed(coeffs, r, tol), tol))
}

/// Total leverage per expiry and its derivatives by `(hurst, rho_nu, mean_reversion)`.
#[derive(Debug, Clone, PartialEq)]
pub struct LeverageWithGradient {
    /// `L(T_i)` (variance x years).
    pub total: Vec<f64>,
    /// `dL(T_i)/d(hurst, rho_nu, mean_reversion)`.
    pub gradient: Vec<[f64; 3]>,
}

impl LeverageCurve {
    /// Expiries `taus` (years, strictly increasing, positive) and forward variance
    /// `xi[j]` on `(T_{j-1}, T_j]`.
    ///
    /// # Errors
    /// [`ModelError::BadCurve`] for unsorted, non-positive or mismatched input.
    pub fn new(taus: &[f64], xi: &[f64]) -> Result<Self, ModelError> {
        if taus.len() != xi.len() || taus.is_empty() {
            return Err(ModelError::BadCurve);
        }
        let mut prev = 0.0;
        for (&t, &x) in taus.iter().zip(xi) {
            if !(t.is_finite() && t > prev && x.is_finite()) {
                return Err(ModelError::BadCurve);
            }
            prev = t;
        }
        let n = taus.len();
        let mut pair_gaps = Vec::with_capacity(n * (n + 1) / 2);
        for i in 0..n {
            for j in 0..=i {
                let start = if j == 0 { 0.0 } else { taus[j - 1] };
                pair_gaps.push(taus[i] - start);
            }
        }
        let (gaps, gap_of_pair) = distinct_gaps(&pair_gaps);
        let ln_gaps: Vec<f64> = gaps.iter().map(|g| g.ln()).collect();
        let weights = (0..n).map(|j| if j == 0 { xi[0] } else { xi[j] - xi[j - 1] }).collect();
        Ok(Self {
            taus: taus.to_vec(),
            xi: xi.to_vec(),
            gaps,
            ln_gaps,
            gap_of_pair,
            weights,
            series_cache: RefCell::new(Vec::new()),
            phi_cache: RefCell::new(Vec::new()),
            contour_cache: RefCell::new(Vec::new()),
            last: RefCell::new(PhiValues::default()),
        })
    }

    /// Expiries (years).
    pub fn taus(&self) -> &[f64] {
        &self.taus
    }

    /// Forward variances per period.
    pub fn forward_variances(&self) -> &[f64] {
        &self.xi
    }

    /// The distinct expiry gaps `T_i - T_{j-1}` (years, ascending; see the field docs).
    pub(crate) fn distinct_gaps(&self) -> &[f64] {
        &self.gaps
    }

    /// Index in [`distinct_gaps`](Self::distinct_gaps) of `T_i - T_{j-1}` (`j <= i`,
    /// `T_{-1} = 0`).
    pub(crate) fn gap_index(&self, i: usize, j: usize) -> usize {
        self.gap_of_pair[i * (i + 1) / 2 + j] as usize
    }

    /// The cached series evaluator of `E_{alpha,alpha+2}` (robust outside the series radius).
    fn with_evaluator<R>(&self, alpha: f64, f: impl FnOnce(&MittagLefflerSeries) -> R) -> Result<R, ModelError> {
        let mut cache = self.series_cache.borrow_mut();
        let index = cache_slot(
            &mut cache,
            alpha.to_bits(),
            |(k, _)| *k,
            |_| Ok::<_, ModelError>((alpha.to_bits(), MittagLefflerSeries::new(alpha, alpha + 2.0)?)),
        )?;
        Ok(f(&cache[index].1))
    }

    /// The cached coefficient lists for `alpha` (built on first use).
    fn phi_series(cache: &mut Vec<PhiSeries>, alpha: f64) -> &mut PhiSeries {
        let Ok(index) =
            cache_slot(cache, alpha.to_bits(), |s| s.alpha.to_bits(), |_| Ok::<_, Infallible>(PhiSeries::new(alpha)));
        &mut cache[index]
    }

    /// `Phi(t)/c = t^(a+1) E_{a,a+2}(-mu t^a)` for every gap into `out` (reused when `out`
    /// already holds this `(a, mu, accuracy)`) and, when asked, its derivatives in `mu` and
    /// in `a` (= in `H`).
    ///
    /// Gaps whose `|z| = |mu| t^a` lies inside a radius where the power series is well
    /// conditioned are summed together, one coefficient at a time over blocks of gaps (the
    /// sums are independent, so this runs at the machine's throughput instead of the latency
    /// of one Horner chain). The `a`-derivative there is the series differentiated term by
    /// term: `d/da [t^(a(k+1)+1) / Gamma(a(k+1)+2)]` brings `(k+1)(ln t - psi(a(k+1)+2))`, so
    /// `d(Phi/c)/da = t^(a+1) [ln t (E + z E') - S2(z)]`, `S2(z) = sum_k (k+1) psi_k c_k z^k`.
    /// The other gaps go through [`MittagLefflerSeries`] one by one, with a backward
    /// difference in `a` of step [`HURST_STEP`].
    fn phi_over_c(
        &self,
        alpha: f64,
        mu: f64,
        with_derivatives: bool,
        accuracy: Accuracy,
        out: &mut PhiValues,
    ) -> Result<(), ModelError> {
        let key = (alpha.to_bits(), mu.to_bits(), accuracy);
        if out.key != Some(key) {
            out.key = None;
            self.phi_values(alpha, mu, accuracy, out)?;
            out.key = Some(key);
        }
        if !with_derivatives {
            return Ok(());
        }
        let z_max = out.z.iter().fold(0.0_f64, |acc, zz| acc.max(zz.abs()));
        let radius = self.series_derivatives(alpha, mu > 0.0, z_max, out);
        if z_max <= radius {
            return Ok(());
        }
        self.derivatives_beyond(alpha, mu, radius, out)
    }

    /// `Phi/c` on every gap (`out.t_a`, `out.z`, `out.e`, `out.value`): the series inside
    /// its radius, beyond it a Chebyshev interpolant of the shared contour (many gaps), the
    /// contour per gap, or the single-point evaluator.
    fn phi_values(&self, alpha: f64, mu: f64, accuracy: Accuracy, out: &mut PhiValues) -> Result<(), ModelError> {
        let negative = mu > 0.0;
        let m = self.gaps.len();
        out.t_a.clear();
        out.z.clear();
        out.t_a.extend(self.ln_gaps.iter().map(|l| exp(alpha * l)));
        out.z.extend(out.t_a.iter().map(|p| -mu * p));
        let z_max = out.z.iter().fold(0.0_f64, |acc, zz| acc.max(zz.abs()));
        if !z_max.is_finite() {
            return Err(ModelError::BadParams(format!("mean reversion minus rho_nu {mu} too large for the expiries")));
        }
        let radius = {
            let mut cache = self.phi_cache.borrow_mut();
            let series = Self::phi_series(&mut cache, alpha);
            match series.plan_value(z_max, negative, accuracy) {
                Some((r, n, tol)) => {
                    horner_many(&series.coeffs[..n], tol, &out.z, &mut out.e);
                    r
                }
                None => {
                    out.e.clear();
                    out.e.resize(m, 0.0);
                    -1.0
                }
            }
        };
        if z_max > radius {
            let rest = self.values_beyond(alpha, mu, radius, z_max, out);
            if !rest.is_empty() {
                self.with_evaluator(alpha, |ml| {
                    for &g in &rest {
                        out.e[g] = ml.eval(out.z[g]);
                    }
                })?;
            }
        }
        out.value.clear();
        out.value.extend(self.gaps.iter().zip(&out.t_a).zip(&out.e).map(|((t, p), e)| t * p * e));
        Ok(())
    }

    /// `E` on the gaps beyond the series radius from the shared contour (through a
    /// Chebyshev interpolant when at least [`CHEBYSHEV_MIN_GAPS`] of them are on the
    /// negative axis); returns the gaps the contour could not take.
    fn values_beyond(&self, alpha: f64, mu: f64, radius: f64, z_max: f64, out: &mut PhiValues) -> Vec<usize> {
        let negative = mu > 0.0;
        let mut rest = Vec::new();
        self.with_contour(alpha, |contour| {
            let beyond = out.z.iter().filter(|zz| zz.abs() > radius).count();
            let x_lo = out.z.iter().map(|zz| -zz).filter(|x| *x > radius).fold(f64::INFINITY, f64::min);
            let wanted = negative && beyond >= CHEBYSHEV_MIN_GAPS;
            let reusable = out
                .chebyshev
                .as_ref()
                .is_some_and(|c| out.chebyshev_alpha == alpha.to_bits() && c.contains(x_lo) && c.contains(z_max));
            if !wanted {
                out.chebyshev = None;
            } else if !reusable {
                // Built a little wider than needed, so that the next points of a fit
                // (mean reversion moving by less than CHEBYSHEV_RANGE_PAD) can reuse it.
                out.chebyshev = contour.and_then(|c| {
                    NegativeAxisChebyshev::new(
                        c,
                        x_lo / CHEBYSHEV_RANGE_PAD,
                        z_max * CHEBYSHEV_RANGE_PAD,
                        CONTOUR_REL_ACCEPT,
                    )
                });
                out.chebyshev_alpha = alpha.to_bits();
            }
            if let Some(cheb) = &out.chebyshev {
                let (gaps, xs, logs) = self.gaps_beyond(alpha, mu, radius, &out.z, |_| true);
                let mut values = Vec::with_capacity(xs.len());
                cheb.values_with_logs(&xs, &logs, &mut values);
                for (g, v) in gaps.into_iter().zip(values) {
                    out.e[g] = v;
                }
                return;
            }
            for (g, (e, &zz)) in out.e.iter_mut().zip(&out.z).enumerate() {
                if zz.abs() > radius {
                    match contour.and_then(|c| c.value(zz)).filter(|v| v.1 <= CONTOUR_REL_ACCEPT) {
                        Some((value, _)) => *e = value,
                        None => rest.push(g),
                    }
                }
            }
        });
        rest
    }

    /// Both derivatives of `Phi/c` on the gaps inside the derivative series' radius
    /// (`E'` and `S2` summed together, then turned into the derivatives of `Phi/c`);
    /// returns that radius (-1 when the series is not used at all).
    fn series_derivatives(&self, alpha: f64, negative: bool, z_max: f64, out: &mut PhiValues) -> f64 {
        let m = self.gaps.len();
        let radius = {
            let mut cache = self.phi_cache.borrow_mut();
            let series = Self::phi_series(&mut cache, alpha);
            match series.plan_derivatives(z_max, negative) {
                Some((r, (n_deriv, tol_deriv), (n_psi, tol_psi))) => {
                    horner_many2(
                        (&series.dcoeffs[..n_deriv], tol_deriv),
                        (&series.psi_coeffs[..n_psi], tol_psi),
                        &out.z,
                        &mut out.d_mu,
                        &mut out.d_alpha,
                    );
                    r
                }
                None => {
                    out.d_mu.clear();
                    out.d_mu.resize(m, 0.0);
                    out.d_alpha.clear();
                    out.d_alpha.resize(m, 0.0);
                    -1.0
                }
            }
        };
        // Turn E' and S2 into the derivatives of Phi/c.
        for g in 0..m {
            let (t, p, zz, e) = (self.gaps[g], out.t_a[g], out.z[g], out.e[g]);
            let scale = t * p;
            let de = out.d_mu[g];
            out.d_mu[g] = -scale * p * de;
            out.d_alpha[g] = scale * (self.ln_gaps[g] * (e + zz * de) - out.d_alpha[g]);
        }
        radius
    }

    /// The gaps beyond the series radius (`|z| > radius`, on the negative axis, `mu > 0`)
    /// whose `ln x` passes `keep`, with `x = -z` and `ln x = ln mu + a ln gap` (one
    /// logarithm per evaluation instead of one per gap).
    fn gaps_beyond(
        &self,
        alpha: f64,
        mu: f64,
        radius: f64,
        z: &[f64],
        keep: impl Fn(f64) -> bool,
    ) -> (Vec<usize>, Vec<f64>, Vec<f64>) {
        let ln_mu = mu.ln();
        let (mut gaps, mut xs, mut logs) = (Vec::new(), Vec::new(), Vec::new());
        for (g, zz) in z.iter().enumerate() {
            let u = ln_mu + alpha * self.ln_gaps[g];
            if zz.abs() > radius && keep(u) {
                gaps.push(g);
                xs.push(-zz);
                logs.push(u);
            }
        }
        (gaps, xs, logs)
    }

    /// Both derivatives beyond the series radius: from the shared contour, where its
    /// value was taken (the same nodes, so the same acceptance), else from the
    /// single-point evaluator with a backward difference in `a`.
    fn derivatives_beyond(&self, alpha: f64, mu: f64, radius: f64, out: &mut PhiValues) -> Result<(), ModelError> {
        let m = self.gaps.len();
        let mut rest = Vec::new();
        let cheb = out.chebyshev.take();
        let mut interpolated = vec![false; m];
        if let Some(cheb) = &cheb {
            let (gaps, xs, logs) = self.gaps_beyond(alpha, mu, radius, &out.z, |u| cheb.contains_log(u));
            let mut values = Vec::with_capacity(xs.len());
            cheb.eval_many_with_logs(&xs, &logs, &mut values);
            for (g, [value, d_z, d_a]) in gaps.into_iter().zip(values) {
                let (t, p, zz) = (self.gaps[g], out.t_a[g], out.z[g]);
                out.d_mu[g] = -t * p * p * d_z;
                out.d_alpha[g] = t * p * (self.ln_gaps[g] * (value + zz * d_z) + d_a);
                interpolated[g] = true;
            }
        }
        self.with_contour(alpha, |contour| {
            for g in 0..m {
                let zz = out.z[g];
                if zz.abs() <= radius || interpolated[g] {
                    continue;
                }
                match contour.and_then(|c| c.eval(zz)).filter(|v| v.rel_err_estimate <= CONTOUR_REL_ACCEPT) {
                    Some(v) => {
                        let (t, p) = (self.gaps[g], out.t_a[g]);
                        out.d_mu[g] = -t * p * p * v.d_z;
                        out.d_alpha[g] = t * p * (self.ln_gaps[g] * (v.value + zz * v.d_z) + v.d_alpha);
                    }
                    None => rest.push(g),
                }
            }
        });
        out.chebyshev = cheb;
        if rest.is_empty() {
            return Ok(());
        }
        self.with_evaluator(alpha, |ml| {
            for &g in &rest {
                let (_, de) = ml.eval_with_derivative(out.z[g]);
                out.d_mu[g] = -self.gaps[g] * out.t_a[g] * out.t_a[g] * de;
            }
        })?;
        // Backward difference in a (the forward point may lie beyond H = 1/2).
        let a_lo = alpha - HURST_STEP;
        self.with_evaluator(a_lo, |ml| {
            for &g in &rest {
                let t_lo = exp(a_lo * self.ln_gaps[g]);
                let lo = self.gaps[g] * t_lo * ml.eval(-mu * t_lo);
                out.d_alpha[g] = (out.value[g] - lo) / HURST_STEP;
            }
        })?;
        Ok(())
    }

    /// Runs `f` with the cached shared contour of `E_{alpha,alpha+2}` (built on first
    /// use; `None` when no contour meets its target).
    fn with_contour<R>(&self, alpha: f64, f: impl FnOnce(Option<&NegativeAxisContour>) -> R) -> R {
        let mut cache = self.contour_cache.borrow_mut();
        let Ok(index) = cache_slot(
            &mut cache,
            alpha.to_bits(),
            |(k, _)| *k,
            |kept| {
                // Every a shares the parabola of b = a + 2: move the last contour's nodes to
                // this a rather than build them afresh.
                let contour = match kept.iter().rev().find_map(|(_, c)| c.as_ref()) {
                    Some(previous) => previous.with_alpha(alpha),
                    None => NegativeAxisContour::new(alpha, alpha + 2.0),
                };
                Ok::<_, Infallible>((alpha.to_bits(), contour))
            },
        );
        f(cache[index].1.as_ref())
    }

    /// Assembles `L(T_i) = sum_j xi_j [f(T_i - T_{j-1}) - f(T_i - T_j)]` from values `f` on
    /// the gaps, regrouped as `sum_j w_j f(T_i - T_{j-1})` with `w_0 = xi_0`,
    /// `w_j = xi_j - xi_{j-1}` (one dot product per expiry).
    fn assemble(&self, values: &[f64]) -> Vec<f64> {
        (0..self.taus.len())
            .map(|i| {
                let row = i * (i + 1) / 2;
                dot_gather(&self.weights[..=i], [values], &self.gap_of_pair[row..=row + i])[0]
            })
            .collect()
    }

    fn check(params: &LeverageParams) -> Result<f64, ModelError> {
        let alpha = params.hurst + 0.5;
        if !(params.hurst > 0.0
            && params.hurst <= 0.5
            && params.rho_nu.is_finite()
            && params.mean_reversion.is_finite())
        {
            return Err(ModelError::BadParams(format!("{params:?}")));
        }
        Ok(alpha)
    }

    /// Model total leverage `L(T_i)` per expiry (variance x years).
    ///
    /// # Errors
    /// [`ModelError::BadParams`] for parameters outside the domain.
    pub fn total_leverage(&self, params: &LeverageParams) -> Result<Vec<f64>, ModelError> {
        let alpha = Self::check(params)?;
        let mut phi = self.last.borrow_mut();
        self.phi_over_c(alpha, params.mean_reversion - params.rho_nu, false, Accuracy::Full, &mut phi)?;
        let c = params.rho_nu;
        Ok(self.assemble(&phi.value).into_iter().map(|l| c * l).collect())
    }

    /// [`total_leverage`](Self::total_leverage) to about 1e-9 relative instead of full
    /// precision, for ranking start points: the power series is used where its condition
    /// number is up to `START_SERIES_COND_MAX` (instead of `SERIES_COND_MAX`), which covers
    /// most gaps that would otherwise need the contour integral.
    ///
    /// # Errors
    /// [`ModelError::BadParams`] for parameters outside the domain.
    pub(crate) fn total_leverage_for_start(&self, params: &LeverageParams) -> Result<Vec<f64>, ModelError> {
        let alpha = Self::check(params)?;
        let mut phi = self.last.borrow_mut();
        self.phi_over_c(alpha, params.mean_reversion - params.rho_nu, false, Accuracy::Start, &mut phi)?;
        let c = params.rho_nu;
        Ok(self.assemble(&phi.value).into_iter().map(|l| c * l).collect())
    }

    /// Total leverage and its gradient. Derivatives in `rho_nu` and
    /// `mean_reversion` are analytic; in `hurst` analytic (the power series differentiated
    /// term by term) for gaps inside the series radius, and a backward difference with step
    /// `1e-7` (`HURST_STEP`) for the others, accurate to about 1e-7 relative (enough for the
    /// solver's steps; the fitted point is where the residuals, computed exactly, stop
    /// improving).
    ///
    /// # Errors
    /// [`ModelError::BadParams`] for parameters outside the domain.
    pub fn total_leverage_with_gradient(&self, params: &LeverageParams) -> Result<LeverageWithGradient, ModelError> {
        let alpha = Self::check(params)?;
        let c = params.rho_nu;
        let mu = params.mean_reversion - c;
        let mut phi = self.last.borrow_mut();
        self.phi_over_c(alpha, mu, true, Accuracy::Full, &mut phi)?;
        let n = self.taus.len();
        let mut total = Vec::with_capacity(n);
        let mut gradient = Vec::with_capacity(n);
        for i in 0..n {
            let row = i * (i + 1) / 2;
            let [value, d_mu, d_alpha] = dot_gather(
                &self.weights[..=i],
                [&phi.value, &phi.d_mu, &phi.d_alpha],
                &self.gap_of_pair[row..=row + i],
            );
            total.push(c * value);
            // dPhi/dc = Phi/c + c dPhi/dmu * dmu/dc (dmu/dc = -1); dPhi/dlambda = c dPhi/dmu.
            gradient.push([c * d_alpha, value - c * d_mu, c * d_mu]);
        }
        Ok(LeverageWithGradient { total, gradient })
    }
}

/// Classical Heston leverage swap in closed form for checks: with `v0, kappa,
/// theta, nu, rho`, `VS = theta + (v0 - theta)(1 - e^{-kappa T})/(kappa T)` and the
/// gamma swap the same with `kappa' = kappa - rho nu`, `theta' = kappa theta / kappa'`
/// (MATH.md section 5). Returns `(VS, GS)`.
pub fn heston_swap_closed_form(v0: f64, kappa: f64, theta: f64, nu: f64, rho: f64, tau: f64) -> (f64, f64) {
    let level = |k: f64, th: f64| th + (v0 - th) * (-(-k * tau).exp_m1()) / (k * tau);
    let kp = kappa - rho * nu;
    (level(kappa, theta), level(kp, kappa * theta / kp))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Expiries from a week to three years, like the demo snapshot's.
    fn curve() -> LeverageCurve {
        let taus = [0.02, 0.05, 0.1, 0.2, 0.35, 0.5, 0.75, 1.0, 1.5, 2.0, 2.5, 3.0];
        let xi: Vec<f64> = taus.iter().map(|t| 0.04 + 0.01 * t).collect();
        LeverageCurve::new(&taus, &xi).expect("valid curve")
    }

    /// `t^(a+1) E_{a,a+2}(-mu t^a)` one gap at a time with the Mittag-Leffler module.
    fn direct(curve: &LeverageCurve, alpha: f64, mu: f64) -> Vec<f64> {
        let ml = MittagLefflerSeries::new(alpha, alpha + 2.0).expect("valid parameters");
        curve.gaps.iter().map(|&t| t.powf(alpha + 1.0) * ml.eval(-mu * t.powf(alpha))).collect()
    }

    fn close(what: &str, got: f64, want: f64, scale: f64, tol: f64) {
        assert!((got - want).abs() <= tol * scale, "{what}: computed {got:e}, expected {want:e} (tolerance {tol:e})");
    }

    /// The batched sums (and, beyond their radius, the fallback) against the module's
    /// evaluator gap by gap: values to 1e-13 relative (both are accurate to about 1e-14,
    /// module docs), `mu`-derivatives to 1e-12; the `a`-derivative against a central
    /// difference of the module's values with step 1e-5 (truncation about 1e-10, rounding
    /// about 1e-11 relative), or 1e-6 where the backward-difference fallback is used.
    #[test]
    fn batched_phi_matches_the_mittag_leffler_module() {
        let curve = curve();
        for alpha in [0.51, 0.61, 0.8, 0.95, 0.999] {
            for mu in [-0.5, 0.0, 0.37, 1.3, 4.0, 12.0] {
                let mut out = PhiValues::default();
                curve.phi_over_c(alpha, mu, true, Accuracy::Full, &mut out).expect("evaluates");
                let want = direct(&curve, alpha, mu);
                let ml = MittagLefflerSeries::new(alpha, alpha + 2.0).expect("valid parameters");
                let h = 1e-5;
                let (up, down) = (direct(&curve, alpha + h, mu), direct(&curve, alpha - h, mu));
                // gaps the series covered for the derivatives: the largest |z| they allow
                let mut series = PhiSeries::new(alpha);
                let z_max = out.z.iter().fold(0.0_f64, |m, z| m.max(z.abs()));
                let radius = series.plan_derivatives(z_max, mu > 0.0).map_or(-1.0, |p| p.0);
                for g in 0..curve.gaps.len() {
                    let t = curve.gaps[g];
                    let what = format!("a {alpha} mu {mu} gap {t}");
                    close(&format!("{what} value"), out.value[g], want[g], want[g].abs(), 1e-13);
                    let t_a = t.powf(alpha);
                    let de = -t * t_a * t_a * ml.eval_with_derivative(-mu * t_a).1;
                    close(&format!("{what} d/dmu"), out.d_mu[g], de, de.abs().max(1e-300), 1e-12);
                    let fd = (up[g] - down[g]) / (2.0 * h);
                    let tol = if out.z[g].abs() <= radius { 1e-9 } else { 1e-6 };
                    close(&format!("{what} d/da"), out.d_alpha[g], fd, fd.abs().max(want[g].abs()), tol);
                }
            }
        }
    }

    /// Classical Heston (`a = 1`): `Phi/c = (t - (1 - e^{-mu t})/mu)/mu` (MATH.md section 5),
    /// to 1e-13 relative.
    #[test]
    fn alpha_one_matches_the_heston_closed_form() {
        let curve = curve();
        for mu in [0.3, 1.3, 4.0, 12.0] {
            let mut out = PhiValues::default();
            curve.phi_over_c(1.0, mu, false, Accuracy::Full, &mut out).expect("evaluates");
            for (g, &t) in curve.gaps.iter().enumerate() {
                let want = (t + (-mu * t).exp_m1() / mu) / mu;
                close(&format!("mu {mu} gap {t}"), out.value[g], want, want.abs(), 1e-13);
            }
        }
    }

    /// The start-ranking evaluation stays within 1e-8 relative of the full one (its
    /// documented accuracy is about 1e-9), also where it sums series the full one does not.
    #[test]
    fn start_accuracy_is_close_to_full() {
        let curve = curve();
        for alpha in [0.55, 0.65, 0.8, 0.95] {
            for mu in [0.4, 1.1, 1.3, 2.0, 6.0] {
                let mut full = PhiValues::default();
                let mut start = PhiValues::default();
                curve.phi_over_c(alpha, mu, false, Accuracy::Full, &mut full).expect("evaluates");
                curve.phi_over_c(alpha, mu, false, Accuracy::Start, &mut start).expect("evaluates");
                for g in 0..curve.gaps.len() {
                    let what = format!("a {alpha} mu {mu} gap {}", curve.gaps[g]);
                    close(&what, start.value[g], full.value[g], full.value[g].abs(), 1e-8);
                }
            }
        }
    }

    /// A repeated request reuses the cached values and still adds derivatives.
    /// A fit's points at one `a` (a Hurst exponent held on its bound) reuse the
    /// Chebyshev interpolant of the previous point: values and `mu`-derivatives agree
    /// with a fresh curve's to 1e-13 relative, `a`-derivatives to 1e-11 (the
    /// interpolants' series are cut at 1e-15, 1e-14 and 1e-12 of their largest
    /// coefficient, `CHEBYSHEV_TAIL_TOL`; the margin covers two ranges' errors).
    #[test]
    fn an_interpolant_kept_for_the_next_point_gives_the_fresh_values() {
        let taus: Vec<f64> = (0..35).map(|i| 0.02 * 1.16f64.powi(i)).collect();
        let xi: Vec<f64> = taus.iter().map(|t| 0.04 + 0.01 * t).collect();
        let curve = LeverageCurve::new(&taus, &xi).expect("valid curve");
        let mut kept = PhiValues::default();
        let mut reused = false;
        for mu in [3.0, 3.05, 3.06, 3.0601] {
            curve.phi_over_c(0.97, mu, true, Accuracy::Full, &mut kept).expect("evaluates");
            let table = kept.chebyshev.as_ref().map(|c| c.degree());
            let mut fresh = PhiValues::default();
            curve.phi_over_c(0.97, mu, true, Accuracy::Full, &mut fresh).expect("evaluates");
            assert!(table.is_some(), "mu {mu}: the gaps beyond the series go through an interpolant");
            reused |= kept.chebyshev.as_ref().map(|c| c.range()) != fresh.chebyshev.as_ref().map(|c| c.range());
            for g in 0..curve.gaps.len() {
                let what = format!("mu {mu} gap {}", curve.gaps[g]);
                close(&what, kept.value[g], fresh.value[g], fresh.value[g].abs(), 1e-13);
                close(&what, kept.d_mu[g], fresh.d_mu[g], fresh.d_mu[g].abs(), 1e-13);
                close(&what, kept.d_alpha[g], fresh.d_alpha[g], fresh.d_alpha[g].abs(), 1e-11);
            }
        }
        assert!(reused, "a later point kept the earlier interpolant");
    }

    #[test]
    fn cached_values_are_reused_consistently() {
        let curve = curve();
        let p = LeverageParams { hurst: 0.1, rho_nu: -0.4, mean_reversion: 0.6 };
        let first = curve.total_leverage(&p).expect("evaluates");
        let with_gradient = curve.total_leverage_with_gradient(&p).expect("evaluates");
        let fresh = self::curve().total_leverage_with_gradient(&p).expect("evaluates");
        assert_eq!(first, with_gradient.total);
        assert_eq!(with_gradient, fresh);
    }
}
