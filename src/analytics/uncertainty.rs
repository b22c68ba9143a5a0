//! Standard errors of the replicated swap levels: how far the quotes' own noise and
//! the choice of wing can move each level.
//!
//! **Quote noise.** The smile's total variance at the kept quotes is, to first order,
//! a linear map `T` of the quoted total variances `y`: the SVI stage projects `y` onto
//! the tangent space of SVI at its fit (`P = A (A' W A)^-1 A' W`, `A` the Jacobian of
//! total variance in the five raw parameters, `W` the stage's weights), and the
//! residual spline smooths what is left with its hat matrix `H`, so
//! `T = P + H (I - P)`. A level is, to first order, `L = sum_j c_j g_j` over the
//! fitted values `g_j` at the quotes, with `c_j` the level's sensitivity to total
//! variance near quote `j` (the replication integrand's derivative in total
//! variance, times the quote's share of log-moneyness, plus the wing beyond an edge
//! quote, which moves with it; and where the wings take their slope and curvature
//! from the SVI base, their response to SVI's parameters). With independent quote
//! noise of standard deviation `s_i` in total variance,
//! `Var L = sum_i (T' c)_i^2 s_i^2`. `T' c` costs one more
//! spline solve (`H' c = W_s (W_s + lambda K)^-1 c`, the spline of the data
//! `c / W_s` with the same weights and smoothing) and a 5 x 5 solve.
//!
//! **Wings.** Beyond the outermost kept quotes the level rests on a wing rule. The
//! wing part is half the spread of the level over reasonable rules (the fitted wing,
//! the wing bending to the SVI base's slope, the straight line of the edge slope and,
//! where the wings follow SVI, the wing matching the curve's own edge slope and
//! curvature), and at least [`WING_EXTRAPOLATED_REL_SE`] of the level's part from
//! beyond the edges: the rules can agree by chance (on 15 clean strikes they put a
//! few 1e-5 on variance swaps whose extrapolated fifth was 1e-3 off).
//!
//! The two parts are independent and add in quadrature. Both are first-order
//! estimates: the noise estimate itself is uncertain on few quotes, the curve's error
//! between clean quotes is not counted, and a wing rule none of the alternatives
//! resembles is not covered.

use super::black::otm_price_vega;
use super::numerics::smoothing_spline;
use super::replication::levels_beyond;
use super::smile::svi::SviParams;
use super::smile::{FittedSmile, SmileCurve};
use super::tolerances::WING_EXTRAPOLATED_REL_SE;

/// What the smile fit knows about its quotes' noise and its own linear response to
/// them (kept quotes only, in increasing log-moneyness).
#[derive(Debug, Clone, PartialEq)]
pub struct QuoteNoise {
    /// Log-moneyness of the kept quotes.
    pub k: Vec<f64>,
    /// Quoted minus fitted total variance at each kept quote.
    pub residual: Vec<f64>,
    /// Each kept quote's noise unit in total variance (`2 vol tau` times its half
    /// spread with bid/ask, or times one vol without): the noise is estimated as one
    /// multiple of these units for all quotes.
    pub scale: Vec<f64>,
    /// Weights of the SVI stage (relative; zero leaves a quote out).
    pub svi_weights: Vec<f64>,
    /// The SVI base.
    pub svi: SviParams,
    /// The residual spline's weights and smoothing `lambda`, when the smile has one.
    pub spline: Option<(Vec<f64>, f64)>,
}

/// Standard errors of the three levels `[variance swap, gamma swap, leverage swap]`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LevelErrors {
    /// From the quotes' noise.
    pub quote_noise: [f64; 3],
    /// From the wing rule.
    pub wings: [f64; 3],
}

impl LevelErrors {
    /// Both parts in quadrature.
    pub fn total(&self) -> [f64; 3] {
        std::array::from_fn(|l| self.quote_noise[l].hypot(self.wings[l]))
    }
}

/// Derivative of the three levels' integrands in total variance at `k`, per unit of
/// log-moneyness: `(2 / tau) [e^-k, 1, 1 - e^-k] d otm / d w`.
pub fn integrand_sensitivity(k: f64, w: f64, tau: f64) -> [f64; 3] {
    let s = w.max(1e-300).sqrt();
    let vega_w = otm_price_vega(k, s) / (2.0 * s);
    let scale = 2.0 / tau * vega_w;
    let e = (-k).exp();
    [scale * e, scale, scale * (1.0 - e)]
}

/// Sensitivity of each level to the fitted total variance near each kept quote
/// `knots[j]` of a smile `w(k)`: the integrand's sensitivity at the quote times its
/// share of log-moneyness (half the distance to each neighbour), and for the two
/// edge quotes also the integral of the sensitivity over their wing (which moves
/// with the edge value), integrated to ten ATM deviations beyond the edge.
///
/// With `svi`, when the wings beyond the outermost knots follow that SVI base, also
/// each level's sensitivity to the SVI parameters through those wings: the integral
/// over each wing of the level's sensitivity to total variance times the change of
/// SVI's total variance relative to its edge value (the edge value itself is counted
/// with the edge quote); zero without. Both integrate the same sensitivity at the
/// same points, so one walk over each wing serves both.
pub fn knot_and_parameter_sensitivities(
    knots: &[f64],
    svi: Option<&SviParams>,
    w: impl Fn(f64) -> f64,
    tau: f64,
) -> (Vec<[f64; 3]>, [[f64; 5]; 3]) {
    let n = knots.len();
    let mut out = Vec::with_capacity(n);
    for j in 0..n {
        let left = if j == 0 { knots[0] } else { 0.5 * (knots[j - 1] + knots[j]) };
        let right = if j + 1 == n { knots[n - 1] } else { 0.5 * (knots[j] + knots[j + 1]) };
        let at = integrand_sensitivity(knots[j], w(knots[j]), tau);
        out.push(at.map(|x| x * (right - left)));
    }
    let mut parameters = [[0.0; 5]; 3];
    if n == 0 {
        return (out, parameters);
    }
    let reach = wing_reach(&w);
    for (j, direction) in [(0, -1.0), (n - 1, 1.0)] {
        let edge = knots[j];
        let (wing, part) = wing_integrals(edge, edge + direction * reach, &w, tau, svi);
        for l in 0..3 {
            out[j][l] += wing[l];
        }
        for l in 0..3 {
            for a in 0..5 {
                parameters[l][a] += part[l][a];
            }
        }
    }
    (out, parameters)
}

/// How far beyond an edge the sensitivities are integrated: ten ATM deviations.
fn wing_reach(w: &impl Fn(f64) -> f64) -> f64 {
    10.0 * w(0.0).max(1e-8).sqrt()
}

/// Over the wing from `edge` to `end`: the integral of each level's sensitivity to
/// total variance, and with `svi` also of that sensitivity times the change of SVI's
/// total variance in each parameter relative to its value at `edge` (zero without).
/// Composite Simpson on 64 panels (signed to the outward direction's length): the
/// sensitivity is smooth and its integral is only an error-bar weight.
fn wing_integrals(
    edge: f64,
    end: f64,
    w: &impl Fn(f64) -> f64,
    tau: f64,
    svi: Option<&SviParams>,
) -> ([f64; 3], [[f64; 5]; 3]) {
    const PANELS: usize = 64;
    let (lo, hi) = if edge < end { (edge, end) } else { (end, edge) };
    let h = (hi - lo) / PANELS as f64;
    let at_edge = svi.map(|p| p.total_variance_gradient(edge));
    let mut sum = [0.0; 3];
    let mut parameter_sum = [[0.0; 5]; 3];
    for i in 0..=PANELS {
        let weight = if i == 0 || i == PANELS {
            1.0
        } else if i % 2 == 1 {
            4.0
        } else {
            2.0
        };
        let k = lo + h * i as f64;
        let s = integrand_sensitivity(k, w(k), tau);
        for l in 0..3 {
            sum[l] += weight * s[l];
        }
        if let (Some(p), Some(at_edge)) = (svi, at_edge) {
            let gradient = p.total_variance_gradient(k);
            for a in 0..5 {
                let g = gradient[a] - at_edge[a];
                for l in 0..3 {
                    parameter_sum[l][a] += weight * (s[l] * g);
                }
            }
        }
    }
    (sum.map(|s| s * h / 3.0), parameter_sum.map(|row| row.map(|s| s * h / 3.0)))
}

/// The quotes' estimated noise and what the smile's linear response to it needs besides
/// the levels' sensitivities: the SVI stage's Jacobian and normal matrix, and the
/// residual spline's smoother.
struct NoiseResponse<'a> {
    noise: &'a QuoteNoise,
    jacobian: Vec<[f64; 5]>,
    normal: nalgebra::Matrix5<f64>,
    /// With the residual spline: its smoother and weights.
    smoother: Option<(smoothing_spline::Smoother, &'a [f64])>,
    /// Each kept quote's estimated noise in total variance.
    sd: Vec<f64>,
}

impl<'a> NoiseResponse<'a> {
    /// The noise estimated from the residuals: `s^2 = sum (r_i / u_i)^2 / (n - trace T)`
    /// in the quotes' noise units `u_i`, the residual degrees of freedom counting the SVI
    /// stage's five parameters and the spline's (`trace T = trace P + trace H - trace H P`).
    /// A fit with no residual degrees of freedom (interpolation) has no noise to
    /// estimate: zero. `None` when the lengths disagree or a solve fails.
    fn new(noise: &'a QuoteNoise) -> Option<Self> {
        let n = noise.k.len();
        if n != noise.residual.len() || n != noise.scale.len() || n != noise.svi_weights.len() {
            return None;
        }
        let jacobian: Vec<[f64; 5]> = noise.k.iter().map(|&k| noise.svi.total_variance_gradient(k)).collect();
        let normal = normal_matrix(&jacobian, &noise.svi_weights)?;
        let smoother = match &noise.spline {
            Some((weights, lambda)) => {
                Some((smoothing_spline::Smoother::new(&noise.k, weights, *lambda).ok()?, weights.as_slice()))
            }
            None => None,
        };
        let sd = noise_sd(noise, &jacobian, &normal, smoother.as_ref().map(|(s, _)| s));
        Some(Self { noise, jacobian, normal, smoother, sd })
    }

    /// True when no noise was estimated (the fit interpolates its quotes): every level's
    /// quote-noise part is then zero whatever its sensitivities, and they need not be
    /// computed.
    fn is_silent(&self) -> bool {
        self.sd.iter().all(|s| *s == 0.0)
    }

    /// Standard deviation of each level from the quotes' noise, for level sensitivities
    /// `c` at the kept quotes, one per quote (see the module documentation), and to the
    /// SVI parameters directly `parameter_sensitivity` (per level; zero unless the wings
    /// follow SVI), with the noise this response estimated.
    fn level_sd(&self, c: &[[f64; 3]], parameter_sensitivity: &[[f64; 5]; 3]) -> [f64; 3] {
        let (noise, jacobian, normal) = (self.noise, &self.jacobian, &self.normal);
        // H' u for the three levels' sensitivities at once.
        let hat_transposed =
            self.smoother.as_ref().map(|(smoother, weights)| hat_transpose_times(smoother, weights, c));
        let mut out = [0.0; 3];
        for (l, slot) in out.iter_mut().enumerate() {
            let u: Vec<f64> = c.iter().map(|row| row[l]).collect();
            let h_u: Option<Vec<f64>> = hat_transposed.as_ref().map(|h| h.iter().map(|row| row[l]).collect());
            let mut r = response(noise, jacobian, normal, h_u.as_deref(), &u);
            // Levels that move with SVI's parameters directly (wings that follow SVI):
            // d' N^-1 A' W y responds to the quotes by W A N^-1 d.
            let z = normal * nalgebra::Vector5::from_column_slice(&parameter_sensitivity[l]);
            for (i, row) in jacobian.iter().enumerate() {
                r[i] += noise.svi_weights[i] * (0..5).map(|a| row[a] * z[a]).sum::<f64>();
            }
            let variance: f64 = r.iter().zip(&self.sd).map(|(r, s)| (r * s).powi(2)).sum();
            *slot = variance.sqrt();
        }
        out
    }
}

/// `T' u = P' u + H' u - P' H' u`: how the level `u' g` responds to each quote, with
/// `H' u` given when the smile has a residual spline.
fn response(
    noise: &QuoteNoise,
    jacobian: &[[f64; 5]],
    normal_inverse: &nalgebra::Matrix5<f64>,
    h_u: Option<&[f64]>,
    u: &[f64],
) -> Vec<f64> {
    let p_u = projection_transpose_times(jacobian, &noise.svi_weights, normal_inverse, u);
    match h_u {
        Some(h_u) => {
            let p_h_u = projection_transpose_times(jacobian, &noise.svi_weights, normal_inverse, h_u);
            (0..u.len()).map(|i| p_u[i] + h_u[i] - p_h_u[i]).collect()
        }
        None => p_u,
    }
}

/// Each kept quote's estimated noise in total variance (see [`NoiseResponse::new`]).
fn noise_sd(
    noise: &QuoteNoise,
    jacobian: &[[f64; 5]],
    normal_inverse: &nalgebra::Matrix5<f64>,
    smoother: Option<&smoothing_spline::Smoother>,
) -> Vec<f64> {
    let n = noise.k.len();
    let weights = &noise.svi_weights;
    // trace P = sum_i w_i a_i' N^-1 a_i.
    let p_row = |i: usize| -> nalgebra::Vector5<f64> {
        normal_inverse * nalgebra::Vector5::from_column_slice(&jacobian[i]) * weights[i]
    };
    let trace_p: f64 = (0..n).map(|i| nalgebra::Vector5::from_column_slice(&jacobian[i]).dot(&p_row(i))).sum();
    let (trace_h, trace_hp) = match (&noise.spline, smoother) {
        (Some(_), Some(smoother)) => {
            let trace_h = smoother.degrees_of_freedom();
            // (H P)_ii = (H A)_i . N^-1 a_i w_i, H applied to each column of A.
            let h_a = smoother.smooth_lanes(jacobian);
            let trace_hp: f64 = (0..n).map(|i| nalgebra::Vector5::from_column_slice(&h_a[i]).dot(&p_row(i))).sum();
            (trace_h, trace_hp)
        }
        _ => (0.0, 0.0),
    };
    let residual_dof = n as f64 - (trace_p + trace_h - trace_hp);
    let sum_sq: f64 = noise.residual.iter().zip(&noise.scale).map(|(r, u)| (r / u).powi(2)).sum();
    let s = if residual_dof > MIN_RESIDUAL_DOF { (sum_sq / residual_dof).sqrt() } else { 0.0 };
    noise.scale.iter().map(|u| s * u).collect()
}

/// Fewest residual degrees of freedom a noise estimate is made from: below it the fit
/// (all but) interpolates and the quotes say nothing about their noise.
pub const MIN_RESIDUAL_DOF: f64 = 0.5;

/// `H' u = W (W + lambda K)^-1 u`: the smoothing spline of the data `u / W` with
/// weights `W` and the smoother's `lambda`, times `W`, for the three levels' `u` at
/// once (`u[i][l]`).
fn hat_transpose_times(smoother: &smoothing_spline::Smoother, weights: &[f64], u: &[[f64; 3]]) -> Vec<[f64; 3]> {
    let data: Vec<[f64; 3]> = u.iter().zip(weights).map(|(u, w)| u.map(|u| u / w)).collect();
    smoother.smooth_lanes(&data).iter().zip(weights).map(|(g, w)| g.map(|g| g * w)).collect()
}

/// `A' W A` with a ridge of 1e-12 of its trace (a parameter the quotes do not pin,
/// such as `m` on a flat smile, then contributes nothing instead of failing), as its
/// inverse.
pub(crate) fn normal_matrix(jacobian: &[[f64; 5]], weights: &[f64]) -> Option<nalgebra::Matrix5<f64>> {
    let mut normal = nalgebra::Matrix5::<f64>::zeros();
    for (row, w) in jacobian.iter().zip(weights) {
        for a in 0..5 {
            for b in 0..5 {
                normal[(a, b)] += w * row[a] * row[b];
            }
        }
    }
    let ridge = 1e-12 * normal.trace().max(f64::MIN_POSITIVE);
    for a in 0..5 {
        normal[(a, a)] += ridge;
    }
    normal.try_inverse()
}

/// `P' u = W A (A' W A)^-1 A' u`, with the inverse of `A' W A` given.
fn projection_transpose_times(
    jacobian: &[[f64; 5]],
    weights: &[f64],
    normal_inverse: &nalgebra::Matrix5<f64>,
    u: &[f64],
) -> Vec<f64> {
    let mut a_u = nalgebra::Vector5::<f64>::zeros();
    for (row, u) in jacobian.iter().zip(u) {
        for a in 0..5 {
            a_u[a] += row[a] * u;
        }
    }
    let z = normal_inverse * a_u;
    jacobian.iter().zip(weights).map(|(row, w)| w * (0..5).map(|a| row[a] * z[a]).sum::<f64>()).collect()
}

/// Half the spread of a level over wing rules: `levels` holds the level under each
/// rule (the fitted one among them).
pub fn wing_spread(levels: &[[f64; 3]]) -> [f64; 3] {
    std::array::from_fn(|l| {
        let (lo, hi) =
            levels.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), v| (lo.min(v[l]), hi.max(v[l])));
        if lo.is_finite() && hi.is_finite() {
            0.5 * (hi - lo)
        } else {
            0.0
        }
    })
}

/// The wing part of each level's standard error: half the spread over wing rules
/// ([`wing_spread`]), but never less than [`WING_EXTRAPOLATED_REL_SE`] of the level's
/// own part from beyond the edges (`levels[0]`, the fitted curve's), since rules that
/// happen to agree do not make the extrapolation known.
pub fn wing_part(levels: &[[f64; 3]]) -> [f64; 3] {
    let spread = wing_spread(levels);
    let fitted = levels.first().copied().unwrap_or([0.0; 3]);
    std::array::from_fn(|l| spread[l].max(WING_EXTRAPOLATED_REL_SE * fitted[l].abs()))
}

/// Standard errors of a fitted smile's three levels at expiry `tau` (years): `None`
/// for a smile that records no [`QuoteNoise`] (the monotone cubic) or when a solve
/// fails. The wing part is computed for a smile with a residual spline (the default),
/// whose wings have alternatives ([`crate::analytics::smile::svi_spline::SviSpline::alternative_wings`]); raw SVI's wings
/// are its own formula, and its wing part is zero.
pub fn level_errors(smile: &FittedSmile, tau: f64) -> Option<LevelErrors> {
    let noise = smile.noise.as_ref()?;
    let curve = &smile.curve;
    // The wings begin at the outermost kept quotes, the first and last of `noise.k`.
    let wings_follow = match curve {
        SmileCurve::SviSpline(spline) if spline.wings_from_svi => Some(&spline.svi),
        _ => None,
    };
    let response = NoiseResponse::new(noise)?;
    let quote_noise = if response.is_silent() {
        [0.0; 3]
    } else {
        let (c, parameters) =
            knot_and_parameter_sensitivities(&noise.k, wings_follow, |k| curve.total_variance(k), tau);
        response.level_sd(&c, &parameters)
    };
    let wings = match curve {
        SmileCurve::SviSpline(spline) => {
            let edges = (spline.edges()[0], spline.edges()[1]);
            let curves: Vec<SmileCurve> = std::iter::once(curve.clone())
                .chain(spline.alternative_wings().into_iter().map(SmileCurve::SviSpline))
                .collect();
            wing_part(&levels_beyond(&curves, edges, tau))
        }
        _ => [0.0; 3],
    };
    Some(LevelErrors { quote_noise, wings })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interpolation_passes_each_quote_straight_through_and_leaves_no_noise_estimate() {
        // Identity: with the spline interpolating (lambda -> 0) H = I and T' = I
        // whatever the SVI stage does; and with no residual degrees of freedom left
        // there is no noise to estimate.
        let k: Vec<f64> = (0..12).map(|i| -0.3 + 0.05 * i as f64).collect();
        let svi = SviParams { a: 0.01, b: 0.1, rho: -0.4, m: 0.0, sigma: 0.2 };
        let residual: Vec<f64> = (0..12).map(|i| if i % 2 == 0 { 1e-4 } else { -1e-4 }).collect();
        let noise = QuoteNoise {
            k: k.clone(),
            residual,
            scale: vec![1.0; 12],
            svi_weights: vec![1.0; 12],
            svi,
            spline: Some((vec![1.0; 12], 1e-14)),
        };
        let jacobian: Vec<[f64; 5]> = k.iter().map(|&k| svi.total_variance_gradient(k)).collect();
        let normal = normal_matrix(&jacobian, &noise.svi_weights).expect("normal");
        let u: Vec<f64> = (0..12).map(|i| 1.0 + i as f64).collect();
        let smoother = smoothing_spline::Smoother::new(&k, &[1.0; 12], 1e-14).expect("smoother");
        let rows: Vec<[f64; 3]> = u.iter().map(|&u| [u; 3]).collect();
        let h_u: Vec<f64> = hat_transpose_times(&smoother, &[1.0; 12], &rows).iter().map(|r| r[0]).collect();
        let t_u = response(&noise, &jacobian, &normal, Some(&h_u), &u);
        for (got, want) in t_u.iter().zip(&u) {
            assert!((got - want).abs() < 1e-8 * want, "{got} vs {want}");
        }
        let sd = noise_sd(&noise, &jacobian, &normal, Some(&smoother));
        assert!(sd.iter().all(|s| s.abs() < 1e-300));
        // So the levels' sensitivities need not be computed: the response is silent,
        // and any sensitivities give exactly zero.
        let response = NoiseResponse::new(&noise).expect("response");
        assert!(response.is_silent());
        assert!(response.level_sd(&rows, &[[1.0; 5]; 3]).iter().all(|s| *s == 0.0));
    }

    #[test]
    fn one_walk_gives_both_sensitivities_to_the_bit() {
        // Identity: the one walk sums the same terms in the same order as Simpson's
        // rule on each integral alone (written out here: the knot's own wing, then
        // one parameter at a time).
        let svi = SviParams { a: 0.01, b: 0.1, rho: -0.4, m: 0.02, sigma: 0.2 };
        let knots: Vec<f64> = (0..9).map(|i| -0.3 + 0.07 * i as f64).collect();
        let w = |k: f64| svi.total_variance(k) * 1.01;
        let tau = 0.7;
        let simpson = |f: &dyn Fn(f64) -> [f64; 3], a: f64, b: f64| -> [f64; 3] {
            let (lo, hi) = if a < b { (a, b) } else { (b, a) };
            let h = (hi - lo) / 64.0;
            let mut sum = [0.0; 3];
            for i in 0..=64 {
                let weight = if i == 0 || i == 64 {
                    1.0
                } else if i % 2 == 1 {
                    4.0
                } else {
                    2.0
                };
                let v = f(lo + h * i as f64);
                for l in 0..3 {
                    sum[l] += weight * v[l];
                }
            }
            sum.map(|s| s * h / 3.0)
        };
        let (c, parameters) = knot_and_parameter_sensitivities(&knots, Some(&svi), w, tau);
        let (c_alone, none) = knot_and_parameter_sensitivities(&knots, None, w, tau);
        let reach = 10.0 * w(0.0).sqrt();
        let mut want = [[0.0; 5]; 3];
        for (edge, direction) in [(knots[0], -1.0), (knots[8], 1.0)] {
            let at_edge = svi.total_variance_gradient(edge);
            for a in 0..5 {
                let f = |k: f64| {
                    let s = integrand_sensitivity(k, w(k), tau);
                    let g = svi.total_variance_gradient(k)[a] - at_edge[a];
                    [s[0] * g, s[1] * g, s[2] * g]
                };
                let part = simpson(&f, edge, edge + direction * reach);
                for l in 0..3 {
                    want[l][a] += part[l];
                }
            }
        }
        let edge_wing = simpson(&|k| integrand_sensitivity(k, w(k), tau), knots[0], knots[0] - reach);
        let inner =
            integrand_sensitivity(knots[0], w(knots[0]), tau).map(|x| x * (0.5 * (knots[0] + knots[1]) - knots[0]));
        for l in 0..3 {
            assert_eq!(c[0][l].to_bits(), (inner[l] + edge_wing[l]).to_bits());
        }
        for (a, b) in c.iter().flatten().zip(c_alone.iter().flatten()) {
            assert_eq!(a.to_bits(), b.to_bits());
        }
        for (a, b) in parameters.iter().flatten().zip(want.iter().flatten()) {
            assert_eq!(a.to_bits(), b.to_bits());
        }
        assert!(parameters.iter().flatten().any(|v| v.abs() > 0.0));
        assert!(none.iter().flatten().all(|v| v.abs() < 1e-300));
    }

    #[test]
    fn a_pure_svi_fit_averages_noise_down() {
        // Identity: without a spline T = P, an orthogonal projection for equal weights
        // whose range holds the constants (SVI's `a`), so P' 1 = 1 and the sum of the
        // fitted values has the raw sum's variance, n s^2.
        let k: Vec<f64> = (0..30).map(|i| -0.5 + 0.035 * i as f64).collect();
        let svi = SviParams { a: 0.01, b: 0.1, rho: -0.4, m: 0.02, sigma: 0.2 };
        // Residuals of size 1e-3 with 25 degrees of freedom left: s^2 = 30e-6 / 25.
        let residual: Vec<f64> = (0..30).map(|i| if i % 2 == 0 { 1e-3 } else { -1e-3 }).collect();
        let noise =
            QuoteNoise { k: k.clone(), residual, scale: vec![1.0; 30], svi_weights: vec![1.0; 30], svi, spline: None };
        let s = (30e-6f64 / 25.0).sqrt();
        let c = vec![[1.0, 1.0, 1.0]; 30];
        let got = NoiseResponse::new(&noise).expect("response").level_sd(&c, &[[0.0; 5]; 3]);
        let want = s * (30.0f64).sqrt();
        // 1e-6: the ridge of 1e-12 of the trace, amplified by the normal matrix's
        // condition (about 1e5 here), moves the projection by a few 1e-9.
        assert!((got[0] - want).abs() < 1e-6 * want, "{} vs {want}", got[0]);
        // A single quote's sensitivity is spread over five directions: less than its
        // own noise.
        let mut one = vec![[0.0; 3]; 30];
        one[15] = [1.0; 3];
        let single = NoiseResponse::new(&noise).expect("response").level_sd(&one, &[[0.0; 5]; 3]);
        assert!(single[0] < s && single[0] > s * (1.0 / 30.0f64).sqrt());
    }

    #[test]
    fn the_wing_part_is_at_least_a_share_of_the_extrapolated_level() {
        // Rules that agree to 1e-6 on a wing worth 0.2 of variance: the part is the floor.
        let agreeing = [[0.2, 0.1, -0.1], [0.200001, 0.1, -0.1]];
        let part = wing_part(&agreeing);
        for l in 0..3 {
            // The same product, computed the same way: equal to the bit.
            assert_eq!(part[l].to_bits(), (WING_EXTRAPOLATED_REL_SE * agreeing[0][l].abs()).to_bits());
        }
        // Rules far apart: the spread.
        let apart = [[0.2, 0.1, -0.1], [0.3, 0.1, -0.1]];
        // 1e-15: a few roundings of numbers near 0.1.
        assert!((wing_part(&apart)[0] - 0.05).abs() < 1e-15);
    }

    #[test]
    fn the_wing_part_is_half_the_spread() {
        let got = wing_spread(&[[1.0, 2.0, 0.0], [1.2, 1.0, 0.0], [0.9, 2.0, 0.0]]);
        assert!((got[0] - 0.15).abs() < 1e-15 && (got[1] - 0.5).abs() < 1e-15 && got[2].abs() < 1e-300);
    }
}
