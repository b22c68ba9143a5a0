//! `E_{a,b}(z)` for many negative `z` at one `(a, b)`, with its derivatives in `z` and in
//! `a`, from one set of contour nodes.
//!
//! Garrappa's optimal parabolic contour (Garrappa 2015, SIAM J. Numer. Anal. 53(3),
//! "Numerical evaluation of two-parameter Mittag-Leffler functions"; the method of
//! [`super`] outside the series radius) writes
//!
//! `E_{a,b}(z) = (1 / 2 pi i) int_C e^s s^(a-b) / (s^a - z) ds`,
//!
//! summed by the trapezoidal rule on `s(u) = mu (1 + i u)^2`. For `z < 0` the only
//! singularity that shapes the contour is the branch point at the origin, so the
//! parabola `(mu, h, N)` depends on `(a, b)` alone: the nodes `s_k`, the weights
//! `h e^(s_k) s_k^(a-b) s'(u_k) / 2 pi` and the powers `s_k^a` are computed once, and each
//! `z` then costs one complex reciprocal per node. On the same nodes:
//!
//! - `dE/dz = (1 / 2 pi i) int e^s s^(a-b) / (s^a - z)^2 ds`;
//! - `dE/da` with `b - a` held fixed (the leverage model's `E_{a,a+2}`), where only
//!   `s^a` moves: `-(1 / 2 pi i) int e^s s^(a-b) s^a ln s / (s^a - z)^2 ds`.
//!
//! Each comes with the size of its integrand's sum, so that a caller can check the
//! rounding the sum suffered (`GARRAPPA_EPS` times that size, relative to the result)
//! and fall back to [`super::MittagLefflerSeries`] where it is too large.

use super::contour::{contour_choice, ContourParams};
use super::{GARRAPPA_EPS, GARRAPPA_MAX_NODES};
use num_complex::Complex64;
use std::f64::consts::PI;

/// One contour node's precomputed parts.
#[derive(Debug, Clone, Copy)]
struct Node {
    /// `s^a`.
    s_alpha: Complex64,
    /// Trapezoid weight times `e^s s^(a-b) s'(u) / 2 pi` (twice that for `u > 0`, which
    /// stands for `-u` too: the integrand at `-u` is minus the conjugate).
    weight: Complex64,
    /// `weight * s^a * ln s`, for the derivative in `a`.
    weight_log: Complex64,
    /// `|weight|` and `|weight_log|`, for the rounding estimates.
    abs_weight: f64,
    abs_weight_log: f64,
    /// `ln s`, to move to another `a` at the same `b - a`.
    ln_s: Complex64,
}

/// `E_{a,b}` on the negative real axis from shared contour nodes (see the module docs).
#[derive(Debug, Clone)]
pub struct NegativeAxisContour {
    alpha: f64,
    beta: f64,
    nodes: Vec<Node>,
}

/// `E_{a,b}(z)`, `dE/dz` and `dE/da` (with `b - a` fixed) at one negative `z`, and the
/// rounding each may carry, estimated from the size of its sum.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ContourValues {
    /// `E_{a,b}(z)`.
    pub value: f64,
    /// `dE/dz`.
    pub d_z: f64,
    /// `dE/da` with `b - a` held fixed.
    pub d_alpha: f64,
    /// Estimated relative error of `value` and `d_z`, the larger of the two
    /// (`GARRAPPA_EPS` times the sum of the integrand's magnitudes over the result's).
    /// Pessimistic: where it reached 2.8e-12 the values were within 4.4e-15 of the
    /// single-point evaluator (`a` 0.51 to 1, `b = a + 2`, `z` -0.5 to -150).
    pub rel_err_estimate: f64,
    /// The same estimate for `d_alpha`, which crosses zero (its relative error is then
    /// large while its absolute error stays at rounding level).
    pub d_alpha_rel_err_estimate: f64,
}

impl NegativeAxisContour {
    /// Nodes for `E_{alpha,beta}` with `alpha` in (0, 1]; `None` when no parabola meets
    /// the accuracy target with at most 400 nodes (relaxing the target tenfold at a time, as the single-point evaluator does).
    pub fn new(alpha: f64, beta: f64) -> Option<Self> {
        if !(alpha > 0.0 && alpha <= 1.0 && beta.is_finite()) {
            return None;
        }
        let (ContourParams { mu, h, n }, _) = contour_choice(alpha, beta, -1.0)?;
        let n = n.min(4.0 * GARRAPPA_MAX_NODES) as usize;
        let nodes = (0..=n)
            .map(|k| {
                let u = h * k as f64;
                let one_iu = Complex64::new(1.0, u);
                let s = one_iu * one_iu * mu;
                let ds = Complex64::new(0.0, 2.0 * mu) * one_iu;
                let ln_s = s.ln();
                let s_alpha = (ln_s * alpha).exp();
                let trapezoid = if k == 0 { 1.0 } else { 2.0 };
                let weight = s.exp() * (ln_s * (alpha - beta)).exp() * ds * (trapezoid * h / (2.0 * PI));
                let weight_log = weight * s_alpha * ln_s;
                Node { s_alpha, weight, weight_log, abs_weight: weight.norm(), abs_weight_log: weight_log.norm(), ln_s }
            })
            .collect();
        Some(Self { alpha, beta, nodes })
    }

    /// The nodes for `alpha` with the same `beta - alpha`: the parabola depends on
    /// `beta - alpha` only (through the branch point's strength), and so do the weights
    /// `e^s s^(alpha - beta) s'`; only `s^alpha` is recomputed (one complex exponential
    /// per node instead of a logarithm and three exponentials). `None` for `alpha`
    /// outside (0, 1].
    pub fn with_alpha(&self, alpha: f64) -> Option<Self> {
        if !(alpha > 0.0 && alpha <= 1.0) {
            return None;
        }
        let nodes = self
            .nodes
            .iter()
            .map(|node| {
                let s_alpha = (node.ln_s * alpha).exp();
                let weight_log = node.weight * s_alpha * node.ln_s;
                Node { s_alpha, weight_log, abs_weight_log: weight_log.norm(), ..*node }
            })
            .collect();
        Some(Self { alpha, beta: alpha + (self.beta - self.alpha), nodes })
    }

    /// `alpha`.
    pub fn alpha(&self) -> f64 {
        self.alpha
    }

    /// `beta`.
    pub fn beta(&self) -> f64 {
        self.beta
    }

    /// Number of nodes (the cost of one [`eval`](Self::eval) in complex reciprocals).
    pub fn len(&self) -> usize {
        self.nodes.len()
    }

    /// Always false: a contour has at least its node at `u = 0`.
    pub fn is_empty(&self) -> bool {
        self.nodes.is_empty()
    }

    /// `E_{a,b}(z)` and its estimated relative error alone (a third of the work of
    /// [`eval`](Self::eval)); `None` unless `z < 0`. The same sums as `eval`, so the
    /// value is bit-identical.
    pub fn value(&self, z: f64) -> Option<(f64, f64)> {
        if !(z < 0.0) {
            return None;
        }
        let (mut value, mut size) = (0.0, 0.0);
        for node in &self.nodes {
            let (x, y) = (node.s_alpha.re - z, node.s_alpha.im);
            let norm_sq = x * x + y * y;
            let r = Complex64::new(x / norm_sq, -y / norm_sq);
            value += (node.weight * r).im;
            size += node.abs_weight * norm_sq.sqrt().recip();
        }
        let estimate = if value == 0.0 { f64::INFINITY } else { GARRAPPA_EPS * size / value.abs() };
        Some((value, estimate))
    }

    /// The three values at `z`; `None` unless `z < 0`.
    pub fn eval(&self, z: f64) -> Option<ContourValues> {
        if !(z < 0.0) {
            return None;
        }
        let (mut value, mut d_z, mut d_alpha) = (0.0, 0.0, 0.0);
        let (mut size, mut size_2, mut size_log) = (0.0, 0.0, 0.0);
        for node in &self.nodes {
            // r = 1 / (s^a - z)
            let (x, y) = (node.s_alpha.re - z, node.s_alpha.im);
            let norm_sq = x * x + y * y;
            let r = Complex64::new(x / norm_sq, -y / norm_sq);
            let r2 = r * r;
            let abs_r = norm_sq.sqrt().recip();
            value += (node.weight * r).im;
            d_z += (node.weight * r2).im;
            d_alpha -= (node.weight_log * r2).im;
            size += node.abs_weight * abs_r;
            size_2 += node.abs_weight * abs_r * abs_r;
            size_log += node.abs_weight_log * abs_r * abs_r;
        }
        let relative = |size: f64, v: f64| if v == 0.0 { f64::INFINITY } else { GARRAPPA_EPS * size / v.abs() };
        Some(ContourValues {
            value,
            d_z,
            d_alpha,
            rel_err_estimate: relative(size, value).max(relative(size_2, d_z)),
            d_alpha_rel_err_estimate: relative(size_log, d_alpha),
        })
    }
}

/// `E_{a,b}(-x)`, `dE/dz` and `dE/da` (with `b - a` fixed) on `x` in `[x_lo, x_hi]` by
/// Chebyshev interpolation in `u = ln x` of the shared contour's values: many
/// arguments at one `(a, b)` then cost a few Chebyshev sums each instead of a contour
/// sum (the leverage model's 35-expiry fits evaluate 200 to 800 gaps beyond the series
/// radius at every step).
///
/// Interpolated are the scaled functions `x E(-x)`, `x^2 E'(-x)` and `x^2 dE/da(-x)`,
/// which stay of order one over the whole range when `b - a` is 2 (the asymptotic
/// expansion `E(z) = -sum_k z^-k / Gamma(b - a k)` starts with `1 / (Gamma(2) x)`), so
/// that an absolute error of the interpolant is a relative one of the function. The
/// degree is the smallest of [`CHEBYSHEV_DEGREES`] whose last two coefficients fall
/// below [`CHEBYSHEV_TAIL_TOL`] of the largest, for each of the three functions (the standard
/// test of a Chebyshev series' convergence, as in mpmath's `chebyfit` and Chebfun).
#[derive(Debug, Clone)]
pub struct NegativeAxisChebyshev {
    u_lo: f64,
    u_hi: f64,
    /// Chebyshev coefficients of `x E`, `x^2 E'` and `x^2 dE/da` in `t = (2u - u_lo -
    /// u_hi) / (u_hi - u_lo)`, each cut after its last coefficient above its own
    /// tolerance ([`CHEBYSHEV_TAIL_TOL`]): the derivatives need fewer terms.
    series: [Vec<f64>; 3],
}

/// Degrees tried, smallest first (the interpolation points are the degree + 1
/// Chebyshev extrema). Nested degrees (16, 32, 64, reusing the points) measured
/// slower on the 35 x 60 fits: 24 usually suffices there, where 16 never does.
pub const CHEBYSHEV_DEGREES: [usize; 3] = [24, 40, 64];

/// Relative size of the last two Chebyshev coefficients below which each series has
/// converged, for `E`, `E'` and `dE/da`: the interpolation error is then about the
/// first neglected coefficient. Full double precision for the value (the contour's own
/// rounding leaves the coefficients' floor at 1e-16 to 7e-16), 1e-14 for `E'` and
/// 1e-12 for `dE/da`, which only enter the solver's Jacobian (the backward difference
/// they replace was good to about 1e-7). At `a = 1` the value's scaled form carries
/// `e^-x`, which converges slowest in `ln x`: degree 64 over `x` in [1.5, 600].
pub const CHEBYSHEV_TAIL_TOL: [f64; 3] = [1e-15, 1e-14, 1e-12];

impl NegativeAxisChebyshev {
    /// The interpolant on `[x_lo, x_hi]` (`0 < x_lo < x_hi`); `None` when a contour value
    /// is not accepted by its own rounding estimate (`accept`) or no degree converges.
    pub fn new(contour: &NegativeAxisContour, x_lo: f64, x_hi: f64, accept: f64) -> Option<Self> {
        if !(x_lo > 0.0 && x_hi > x_lo && x_hi.is_finite()) {
            return None;
        }
        let (u_lo, u_hi) = (x_lo.ln(), x_hi.ln());
        for degree in CHEBYSHEV_DEGREES {
            let samples: Option<Vec<[f64; 3]>> = (0..=degree)
                .map(|j| {
                    let t = (std::f64::consts::PI * j as f64 / degree as f64).cos();
                    let x = (0.5 * (u_lo + u_hi) + 0.5 * (u_hi - u_lo) * t).exp();
                    let v = contour.eval(-x).filter(|v| v.rel_err_estimate <= accept)?;
                    Some([x * v.value, x * x * v.d_z, x * x * v.d_alpha])
                })
                .collect();
            let samples = samples?;
            let coefficients = chebyshev_coefficients(&samples);
            let largest = coefficients.iter().fold([0.0f64; 3], |m, c| std::array::from_fn(|l| m[l].max(c[l].abs())));
            let tail = &coefficients[degree - 1..];
            let converged = (0..3).all(|l| tail.iter().all(|c| c[l].abs() <= CHEBYSHEV_TAIL_TOL[l] * largest[l]));
            if converged {
                let series = std::array::from_fn(|l| {
                    let keep = coefficients
                        .iter()
                        .rposition(|c| c[l].abs() > CHEBYSHEV_TAIL_TOL[l] * largest[l])
                        .map_or(1, |i| i + 1)
                        .max(2);
                    coefficients[..keep].iter().map(|c| c[l]).collect()
                });
                return Some(Self { u_lo, u_hi, series });
            }
        }
        None
    }

    /// True when `x` lies in the interpolant's range (where it was built).
    pub fn contains(&self, x: f64) -> bool {
        self.contains_log(x.ln())
    }

    /// True when `e^u` lies in the interpolant's range, give or take
    /// [`LOG_RANGE_SLACK`]: a caller's `u` computed as a sum of logarithms can differ
    /// by a rounding from the `ln` the range was built with, and one rounding beyond
    /// the ends moves the interpolant by far less than its own error.
    pub fn contains_log(&self, u: f64) -> bool {
        let slack = LOG_RANGE_SLACK * (1.0 + self.u_lo.abs().max(self.u_hi.abs()));
        u >= self.u_lo - slack && u <= self.u_hi + slack
    }

    /// The range of `ln x` the interpolant was built on.
    pub fn range(&self) -> (f64, f64) {
        (self.u_lo, self.u_hi)
    }

    /// Degree of the interpolant (of its longest series).
    pub fn degree(&self) -> usize {
        self.series.iter().map(Vec::len).max().unwrap_or(1) - 1
    }

    /// `t` of `x`.
    fn t_of(&self, x: f64) -> f64 {
        self.t_of_log(x.ln())
    }

    /// `t` of `x = e^u`.
    fn t_of_log(&self, u: f64) -> f64 {
        (2.0 * u - self.u_lo - self.u_hi) / (self.u_hi - self.u_lo)
    }

    /// `(E(-x), dE/dz, dE/da)` at `x` in the interpolant's range (Clenshaw's recurrence;
    /// outside the range, see [`contains`](Self::contains), it extrapolates and is not
    /// to be used).
    pub fn eval(&self, x: f64) -> [f64; 3] {
        let t = self.t_of(x);
        let g: [f64; 3] = std::array::from_fn(|l| clenshaw(&self.series[l], [t])[0]);
        let inv = 1.0 / x;
        [g[0] * inv, g[1] * inv * inv, g[2] * inv * inv]
    }

    /// `E(-x)` alone at each of `xs` (all in range) into `out`, [`CHEBYSHEV_LANES`] at a
    /// time; the same bits as [`eval`](Self::eval)'s first entry.
    pub fn values(&self, xs: &[f64], out: &mut Vec<f64>) {
        let logs: Vec<f64> = xs.iter().map(|x| x.ln()).collect();
        self.values_with_logs(xs, &logs, out);
    }

    /// [`values`](Self::values) with each argument's natural logarithm given
    /// (`logs[i] = ln xs[i]`), for callers that have it without a `ln` call.
    pub fn values_with_logs(&self, xs: &[f64], logs: &[f64], out: &mut Vec<f64>) {
        out.clear();
        for (chunk, chunk_logs) in xs.chunks(CHEBYSHEV_LANES).zip(logs.chunks(CHEBYSHEV_LANES)) {
            let (mut x, mut u) = ([1.0; CHEBYSHEV_LANES], [0.0; CHEBYSHEV_LANES]);
            x[..chunk.len()].copy_from_slice(chunk);
            u[..chunk.len()].copy_from_slice(chunk_logs);
            let g = clenshaw(&self.series[0], u.map(|u| self.t_of_log(u)));
            out.extend((0..chunk.len()).map(|i| g[i] * (1.0 / x[i])));
        }
    }

    /// [`eval`](Self::eval) at each of `xs` (all in range) into `out`,
    /// [`CHEBYSHEV_LANES`] at a time; the same bits as `eval`.
    pub fn eval_many(&self, xs: &[f64], out: &mut Vec<[f64; 3]>) {
        let logs: Vec<f64> = xs.iter().map(|x| x.ln()).collect();
        self.eval_many_with_logs(xs, &logs, out);
    }

    /// [`eval_many`](Self::eval_many) with each argument's natural logarithm given
    /// (`logs[i] = ln xs[i]`).
    pub fn eval_many_with_logs(&self, xs: &[f64], logs: &[f64], out: &mut Vec<[f64; 3]>) {
        out.clear();
        for (chunk, chunk_logs) in xs.chunks(CHEBYSHEV_LANES).zip(logs.chunks(CHEBYSHEV_LANES)) {
            let (mut x, mut u) = ([1.0; CHEBYSHEV_LANES], [0.0; CHEBYSHEV_LANES]);
            x[..chunk.len()].copy_from_slice(chunk);
            u[..chunk.len()].copy_from_slice(chunk_logs);
            let t = u.map(|u| self.t_of_log(u));
            let g: [[f64; CHEBYSHEV_LANES]; 3] = std::array::from_fn(|l| clenshaw(&self.series[l], t));
            out.extend((0..chunk.len()).map(|i| {
                let inv = 1.0 / x[i];
                [g[0][i] * inv, g[1][i] * inv * inv, g[2][i] * inv * inv]
            }));
        }
    }
}

/// `sum_k c_k T_k(t)` at each lane's `t` by Clenshaw's recurrence, the lanes'
/// independent chains interleaved.
fn clenshaw<const N: usize>(c: &[f64], t: [f64; N]) -> [f64; N] {
    let (mut b1, mut b2) = ([0.0f64; N], [0.0f64; N]);
    for &ck in c[1..].iter().rev() {
        for i in 0..N {
            let b0 = ck + 2.0 * t[i] * b1[i] - b2[i];
            b2[i] = b1[i];
            b1[i] = b0;
        }
    }
    std::array::from_fn(|i| c[0] + t[i] * b1[i] - b2[i])
}

/// Relative slack of [`NegativeAxisChebyshev::contains_log`]: a few roundings of `u`.
pub const LOG_RANGE_SLACK: f64 = 8.0 * f64::EPSILON;

/// Arguments evaluated together by [`NegativeAxisChebyshev::eval_many`] and
/// [`NegativeAxisChebyshev::values`]: Clenshaw's recurrence is a chain of dependent
/// multiply-adds, and interleaving several arguments' chains lets them overlap
/// (the one-argument recurrence took a third of a 35-expiry fit).
pub const CHEBYSHEV_LANES: usize = 4;

/// Chebyshev coefficients `c_0..c_n` of the polynomial interpolating `samples` at the
/// extrema `cos(pi j / n)` (the discrete cosine transform of type I, summed directly:
/// `n` is at most 64).
fn chebyshev_coefficients(samples: &[[f64; 3]]) -> Vec<[f64; 3]> {
    let n = samples.len() - 1;
    // cos(pi m / n) for m in 0..2n: cos(pi k j / n) is entry (k j) mod 2n.
    let cosines: Vec<f64> = (0..2 * n).map(|m| (std::f64::consts::PI * m as f64 / n as f64).cos()).collect();
    (0..=n)
        .map(|k| {
            let mut sum = [0.0f64; 3];
            // (k j) mod 2n, stepped by k (no division in the loop).
            let mut at = 0;
            for (j, f) in samples.iter().enumerate() {
                let weight = if j == 0 || j == n { 0.5 } else { 1.0 };
                let c = cosines[at] * weight;
                at += k;
                if at >= 2 * n {
                    at -= 2 * n;
                }
                for l in 0..3 {
                    sum[l] += c * f[l];
                }
            }
            let scale = if k == 0 || k == n { 1.0 / n as f64 } else { 2.0 / n as f64 };
            sum.map(|s| s * scale)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytics::special::mittag_leffler::MittagLefflerSeries;

    #[test]
    fn values_and_derivatives_match_the_single_point_evaluator() {
        // The single-point evaluator is checked against mpmath in
        // tests/reference_mittag_leffler.rs (worst 1.2e-14 relative for values, 1.0e-13
        // for dE/dz); the shared nodes are the same parabola, so agreement to those
        // levels (1e-13) is expected. dE/da against a fourth-order central difference of
        // the single-point evaluator, step 1e-4: its truncation (h^4) and rounding
        // (1e-14 / h) are about 1e-10 of the derivative's scale |E|.
        for alpha in [0.51, 0.55, 0.7, 0.85, 0.97, 0.999] {
            let contour = NegativeAxisContour::new(alpha, alpha + 2.0).expect("nodes");
            let series = MittagLefflerSeries::new(alpha, alpha + 2.0).expect("series");
            let shifted = |d: f64| MittagLefflerSeries::new(alpha + d, alpha + d + 2.0).expect("series");
            let h = 1e-4;
            let (m2, m1, p1, p2) = (shifted(-2.0 * h), shifted(-h), shifted(h), shifted(2.0 * h));
            for z in [-0.5, -2.5, -7.0, -20.0, -60.0, -150.0] {
                let got = contour.eval(z).expect("negative z");
                let (alone, estimate) = contour.value(z).expect("negative z");
                assert!(alone.to_bits() == got.value.to_bits() && estimate <= got.rel_err_estimate);
                let (value, d_z) = series.eval_with_derivative(z);
                assert!((got.value - value).abs() <= 1e-13 * value.abs(), "E at a={alpha} z={z}");
                assert!((got.d_z - d_z).abs() <= 1e-13 * d_z.abs(), "dE/dz at a={alpha} z={z}: {} vs {d_z}", got.d_z);
                let fd = (-p2.eval(z) + 8.0 * p1.eval(z) - 8.0 * m1.eval(z) + m2.eval(z)) / (12.0 * h);
                assert!(
                    (got.d_alpha - fd).abs() <= 1e-9 * value.abs(),
                    "dE/da at a={alpha} z={z}: {} vs {fd}",
                    got.d_alpha
                );
            }
        }
    }

    #[test]
    fn moving_to_another_alpha_matches_new_nodes() {
        // Same parabola (b - a fixed), so the same sums up to the rounding of s^a: to
        // 1e-14 relative of the value.
        let base = NegativeAxisContour::new(0.6, 2.6).expect("nodes");
        for alpha in [0.55, 0.8, 0.97, 1.0] {
            let moved = base.with_alpha(alpha).expect("in range");
            let fresh = NegativeAxisContour::new(alpha, alpha + 2.0).expect("nodes");
            assert_eq!(moved.len(), fresh.len());
            for z in [-0.7, -3.0, -25.0] {
                let (a, b) = (moved.eval(z).expect("negative"), fresh.eval(z).expect("negative"));
                assert!((a.value - b.value).abs() <= 1e-14 * b.value.abs(), "a={alpha} z={z}");
                assert!((a.d_z - b.d_z).abs() <= 1e-14 * b.d_z.abs(), "a={alpha} z={z}");
                assert!((a.d_alpha - b.d_alpha).abs() <= 1e-13 * b.value.abs(), "a={alpha} z={z}");
            }
        }
    }

    #[test]
    fn non_negative_z_is_refused() {
        let contour = NegativeAxisContour::new(0.8, 2.8).expect("nodes");
        assert!(contour.eval(0.0).is_none() && contour.eval(1.0).is_none() && contour.eval(f64::NAN).is_none());
        assert!(NegativeAxisContour::new(1.2, 3.2).is_none());
    }

    #[test]
    fn chebyshev_interpolant_matches_the_contour() {
        // Against the contour itself at points between the interpolation nodes: the
        // interpolant is exact at its nodes and its error elsewhere is about the first
        // neglected coefficient (CHEBYSHEV_TAIL_TOL); checked to 1e-13 of |E| for the
        // value and E' (|E| / x, the derivatives' scale) and 1e-11 for dE/da.
        for alpha in [0.51, 0.6, 0.75, 0.9, 0.99, 1.0] {
            let contour = NegativeAxisContour::new(alpha, alpha + 2.0).expect("nodes");
            for (x_lo, x_hi) in [(0.5, 3.0), (2.0, 80.0), (1.5, 600.0)] {
                let cheb = NegativeAxisChebyshev::new(&contour, x_lo, x_hi, 1e-12).expect("converges");
                let xs: Vec<f64> = (0..=13).map(|i| x_lo * (x_hi / x_lo).powf(i as f64 / 13.0)).collect();
                let mut many = Vec::new();
                cheb.eval_many(&xs, &mut many);
                let mut alone = Vec::new();
                cheb.values(&xs, &mut alone);
                for ((x, got), value) in xs.iter().zip(&many).zip(&alone) {
                    assert_eq!(got.map(f64::to_bits), cheb.eval(*x).map(f64::to_bits), "eval_many at x={x}");
                    assert_eq!(value.to_bits(), got[0].to_bits(), "values at x={x}");
                }
                for i in 0..=97 {
                    let x = x_lo * (x_hi / x_lo).powf(i as f64 / 97.0);
                    let want = contour.eval(-x).expect("negative");
                    let got = cheb.eval(x);
                    let scale = want.value.abs();
                    assert!((got[0] - want.value).abs() <= 1e-13 * scale, "E a={alpha} x={x}");
                    assert!((got[1] - want.d_z).abs() <= 1e-13 * scale / x, "E' a={alpha} x={x}");
                    assert!((got[2] - want.d_alpha).abs() <= 1e-11 * scale / x, "dE/da a={alpha} x={x}");
                }
            }
        }
    }
}
