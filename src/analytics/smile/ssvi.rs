//! Surface SVI: one skew and curvature law for every expiry, used to anchor the
//! wings of sparse slices.
//!
//! SSVI (Quantitative Finance, 2014, "Arbitrage-free SVI volatility surfaces"):
//! `w(k; theta) = theta/2 (1 + rho phi k + sqrt((phi k + rho)^2 + 1 - rho^2))` with the
//! power law `phi(theta) = eta theta^-gamma`, `theta` the ATM total variance of the
//! slice. Three numbers describe the shape of all smiles, so quotes at every expiry
//! inform the wings of each: where a slice is quoted only near the money, its wings
//! follow the surface instead of the noise of a few quotes.

use argmin::core::{CostFunction, Error as ArgminError, Executor};
use argmin::solver::neldermead::NelderMead;

/// SSVI shape parameters (power-law curvature).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SsviParams {
    /// Skew, in (-1, 1).
    pub rho: f64,
    /// Curvature level `eta > 0`.
    pub eta: f64,
    /// Curvature decay with total variance, `gamma` in (0, 1).
    pub gamma: f64,
}

impl SsviParams {
    /// Total variance at log-moneyness `k` of the slice with ATM total variance `theta`.
    pub fn total_variance(&self, theta: f64, k: f64) -> f64 {
        let phi = self.eta * theta.powf(-self.gamma);
        let x = phi * k + self.rho;
        0.5 * theta * (1.0 + self.rho * phi * k + (x * x + 1.0 - self.rho * self.rho).sqrt())
    }
}

/// Quotes of one slice for the surface fit: ATM total variance and `(k, w, weight)`.
#[derive(Debug, Clone, PartialEq)]
pub struct SurfaceSlice {
    /// ATM total variance (fixed during the fit).
    pub theta: f64,
    /// Quotes as (log-moneyness, total variance, weight).
    pub quotes: Vec<(f64, f64, f64)>,
}

struct SurfaceProblem<'a> {
    slices: &'a [SurfaceSlice],
}

fn params_of(u: &[f64]) -> SsviParams {
    SsviParams { rho: 0.999 * u[0].tanh(), eta: u[1].clamp(-20.0, 5.0).exp(), gamma: 1.0 / (1.0 + (-u[2]).exp()) }
}

impl CostFunction for SurfaceProblem<'_> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, u: &Self::Param) -> Result<f64, ArgminError> {
        let p = params_of(u);
        let mut total = 0.0;
        for s in self.slices {
            for &(k, w, weight) in &s.quotes {
                let e = p.total_variance(s.theta, k) - w;
                total += weight * e * e;
            }
        }
        Ok(if total.is_finite() { total } else { f64::MAX })
    }
}

/// Fits the SSVI shape to every slice's quotes, ATM total variances held fixed.
/// `None` when there is nothing to fit or the fit does not produce finite numbers.
pub fn fit_surface(slices: &[SurfaceSlice]) -> Option<SsviParams> {
    if slices.iter().all(|s| s.quotes.is_empty()) || slices.iter().any(|s| !(s.theta > 0.0)) {
        return None;
    }
    let problem = SurfaceProblem { slices };
    let mut best = (f64::INFINITY, vec![0.0, 0.0, 0.0]);
    for rho in [-0.8f64, -0.4, 0.0] {
        for eta in [0.5f64, 1.5] {
            for gamma in [0.25f64, 0.5] {
                let u = vec![(rho / 0.999).atanh(), eta.ln(), (gamma / (1.0 - gamma)).ln()];
                let c = problem.cost(&u).unwrap_or(f64::INFINITY);
                if c < best.0 {
                    best = (c, u);
                }
            }
        }
    }
    let (f0, u0) = best;
    if !f0.is_finite() {
        return None;
    }
    let mut simplex = vec![u0.clone()];
    for i in 0..3 {
        let mut v = u0.clone();
        v[i] += 0.3;
        simplex.push(v);
    }
    let solver = NelderMead::new(simplex).with_sd_tolerance((1e-10 * f0).max(1e-300)).ok()?;
    let result = Executor::new(problem, solver).configure(|s| s.max_iters(300)).ctrlc(false).timer(false).run().ok()?;
    let u = result.state.best_param.unwrap_or(u0);
    let p = params_of(&u);
    (p.rho.is_finite() && p.eta.is_finite() && p.gamma.is_finite()).then_some(p)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recovers_its_own_surface() {
        let truth = SsviParams { rho: -0.6, eta: 1.2, gamma: 0.4 };
        let slices: Vec<SurfaceSlice> = [0.002, 0.01, 0.04]
            .iter()
            .map(|&theta| SurfaceSlice {
                theta,
                quotes: (0..11).map(|i| {
                    let k = (-1.0 + 0.2 * i as f64) * theta.sqrt();
                    (k, truth.total_variance(theta, k), 1.0 / theta.powi(2))
                }).collect(),
            })
            .collect();
        let fit = fit_surface(&slices).expect("fit");
        // Nelder-Mead to 1e-10 of the starting cost: parameters to ~1e-4.
        assert!((fit.rho - truth.rho).abs() < 1e-3, "{fit:?}");
        assert!((fit.eta - truth.eta).abs() < 1e-3, "{fit:?}");
        assert!((fit.gamma - truth.gamma).abs() < 1e-3, "{fit:?}");
    }
}
