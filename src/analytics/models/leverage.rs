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

use crate::analytics::special::mittag_leffler::{MittagLefflerError, MittagLefflerSeries};
use std::cell::RefCell;

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
    /// `gaps[i * (i + 1) / 2 + j] = T_i - T_{j-1}` for `j = 0..=i` (with `T_{-1} = 0`).
    gaps: Vec<f64>,
    ln_gaps: Vec<f64>,
    /// Series evaluators of `E_{a,a+2}` for the last few `a`: building one costs a
    /// Gamma function per term, and a solver asks for the same `a` repeatedly.
    series_cache: RefCell<Vec<(u64, MittagLefflerSeries)>>,
}

/// Evaluators kept per curve (the point, its Hurst-derivative neighbour, a trial).
const SERIES_CACHE_SIZE: usize = 4;

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
        let mut gaps = Vec::with_capacity(n * (n + 1) / 2);
        for i in 0..n {
            for j in 0..=i {
                let start = if j == 0 { 0.0 } else { taus[j - 1] };
                gaps.push(taus[i] - start);
            }
        }
        let ln_gaps = gaps.iter().map(|g| g.ln()).collect();
        Ok(Self { taus: taus.to_vec(), xi: xi.to_vec(), gaps, ln_gaps, series_cache: RefCell::new(Vec::new()) })
    }

    /// Expiries (years).
    pub fn taus(&self) -> &[f64] {
        &self.taus
    }

    /// Forward variances per period.
    pub fn forward_variances(&self) -> &[f64] {
        &self.xi
    }

    /// `Phi(t)/c = t^(a+1) E_{a,a+2}(-mu t^a)` and (when asked) its derivative in
    /// `mu`, for every gap.
    fn phi_over_c(
        &self,
        alpha: f64,
        mu: f64,
        with_derivative: bool,
        out: &mut Vec<(f64, f64)>,
    ) -> Result<(), ModelError> {
        let mut cache = self.series_cache.borrow_mut();
        let key = alpha.to_bits();
        let index = match cache.iter().position(|(k, _)| *k == key) {
            Some(i) => i,
            None => {
                if cache.len() >= SERIES_CACHE_SIZE {
                    cache.remove(0);
                }
                cache.push((key, MittagLefflerSeries::new(alpha, alpha + 2.0)?));
                cache.len() - 1
            }
        };
        let series = &cache[index].1;
        out.clear();
        out.extend(self.gaps.iter().zip(&self.ln_gaps).map(|(&t, &ln_t)| {
            let t_a = (alpha * ln_t).exp();
            let scale = t * t_a;
            if with_derivative {
                let (e, de) = series.eval_with_derivative(-mu * t_a);
                (scale * e, -scale * t_a * de)
            } else {
                (scale * series.eval(-mu * t_a), 0.0)
            }
        }));
        Ok(())
    }

    /// Assembles `L(T_i) = sum_j xi_j [f(T_i - T_{j-1}) - f(T_i - T_j)]` from values on the gaps.
    fn assemble(&self, values: impl Fn(usize) -> f64) -> Vec<f64> {
        let n = self.taus.len();
        (0..n)
            .map(|i| {
                let row = i * (i + 1) / 2;
                (0..=i)
                    .map(|j| {
                        let later = if j < i { values(row + j + 1) } else { 0.0 };
                        self.xi[j] * (values(row + j) - later)
                    })
                    .sum()
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
        let mut phi = Vec::with_capacity(self.gaps.len());
        self.phi_over_c(alpha, params.mean_reversion - params.rho_nu, false, &mut phi)?;
        let c = params.rho_nu;
        Ok(self.assemble(|g| c * phi[g].0))
    }

    /// Total leverage and its gradient. Derivatives in `rho_nu` and
    /// `mean_reversion` are analytic; in `hurst` a backward difference with step
    /// `1e-7`, accurate to about 1e-7 relative (enough for the solver's steps; the
    /// fitted point is where the residuals, computed exactly, stop improving).
    ///
    /// # Errors
    /// [`ModelError::BadParams`] for parameters outside the domain.
    pub fn total_leverage_with_gradient(&self, params: &LeverageParams) -> Result<LeverageWithGradient, ModelError> {
        let alpha = Self::check(params)?;
        let c = params.rho_nu;
        let mu = params.mean_reversion - c;
        let mut phi = Vec::with_capacity(self.gaps.len());
        self.phi_over_c(alpha, mu, true, &mut phi)?;
        let total = self.assemble(|g| c * phi[g].0);
        // dPhi/dc = Phi/c + c dPhi/dmu * dmu/dc (dmu/dc = -1); dPhi/dlambda = c dPhi/dmu.
        let d_c = self.assemble(|g| phi[g].0 - c * phi[g].1);
        let d_lambda = self.assemble(|g| c * phi[g].1);
        // Backward difference in H (one extra set of Mittag-Leffler values; the
        // forward point may lie beyond H = 1/2): truncation ~1e-7, rounding ~1e-9.
        let step = 1e-7;
        let a_lo = params.hurst - step + 0.5;
        let mut phi_lo = Vec::with_capacity(self.gaps.len());
        self.phi_over_c(a_lo, mu, false, &mut phi_lo)?;
        let l_lo = self.assemble(|g| c * phi_lo[g].0);
        let gradient = (0..total.len()).map(|i| [(total[i] - l_lo[i]) / step, d_c[i], d_lambda[i]]).collect();
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
