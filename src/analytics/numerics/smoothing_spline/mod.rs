//! Weighted cubic smoothing splines with the smoothing chosen by generalised
//! cross-validation: generic numerics, no finance.
//!
//! For knots `x_0 < ... < x_{n-1}`, data `y_i` and weights `omega_i > 0`, the smoothing
//! spline minimises `sum omega_i (y_i - g(x_i))^2 + lambda Integral g''(x)^2 dx`; the
//! minimiser is a natural cubic spline with knots at the data (Reinsch 1967, Numer.
//! Math. 10, "Smoothing by spline functions"). With `Q` the `n x (n-2)` second-difference
//! matrix and `R` the `(n-2) x (n-2)` tridiagonal Gram matrix of the spline basis, its
//! second derivatives at the interior knots `gamma` solve the pentadiagonal system
//! `(R + lambda Q' W^-1 Q) gamma = Q' y` and its values are `g = y - lambda W^-1 Q gamma`.
//!
//! The hat matrix `H` (`g = H y`) has `I - H = lambda W^-1 Q B^-1 Q'` with
//! `B = R + lambda Q' W^-1 Q`; its diagonal needs only the central band of `B^-1`, which
//! the band-inverse recurrence gives from the `L D L'` factors in `O(n)` (Technometrics,
//! 1985, "Efficient algorithms for computing the smoothing parameter ..." gives the
//! method for smoothing splines). The diagonal gives the trace for generalised
//! cross-validation (Craven & Wahba 1979, Numer. Math. 31) and the leave-one-out
//! residuals `e_i / (1 - H_ii)`.

mod banded;
mod cross_validation;

use banded::{hat_diagonal, Factor, System};
pub use cross_validation::{
    fit_by_cross_validation, CrossValidation, LANES, LOG10_LAMBDA_RANGE, LOG10_LAMBDA_STEP, PLATEAU_SHARE,
};

/// A natural cubic spline: values and second derivatives at its knots (second
/// derivatives zero at both ends).
#[derive(Debug, Clone, PartialEq)]
pub struct NaturalCubic {
    knots: Vec<f64>,
    values: Vec<f64>,
    second: Vec<f64>,
}

impl NaturalCubic {
    /// Knots, increasing.
    pub fn knots(&self) -> &[f64] {
        &self.knots
    }

    /// Values at the knots.
    pub fn values(&self) -> &[f64] {
        &self.values
    }

    /// Value, first and second derivative at `x`; beyond the end knots the spline
    /// continues as the straight line of its end value and slope (its second
    /// derivative is zero there).
    pub fn eval(&self, x: f64) -> (f64, f64, f64) {
        let last = self.knots.len() - 1;
        if x <= self.knots[0] || x >= self.knots[last] {
            let (i, end) = if x <= self.knots[0] { (0, 0) } else { (last - 1, last) };
            let slope = self.slope_in(i, end);
            return (self.values[end] + slope * (x - self.knots[end]), slope, 0.0);
        }
        let i = self.interval(x);
        let h = self.knots[i + 1] - self.knots[i];
        let a = (self.knots[i + 1] - x) / h;
        let b = 1.0 - a;
        let (m0, m1) = (self.second[i], self.second[i + 1]);
        let value =
            a * self.values[i] + b * self.values[i + 1] + ((a * a * a - a) * m0 + (b * b * b - b) * m1) * h * h / 6.0;
        let slope = (self.values[i + 1] - self.values[i]) / h - (3.0 * a * a - 1.0) / 6.0 * h * m0
            + (3.0 * b * b - 1.0) / 6.0 * h * m1;
        (value, slope, a * m0 + b * m1)
    }

    /// Value at `x`: [`NaturalCubic::eval`]'s first component, without the
    /// derivatives (the replication integrals take only values, many of them).
    pub fn value(&self, x: f64) -> f64 {
        let last = self.knots.len() - 1;
        if x <= self.knots[0] || x >= self.knots[last] {
            let (i, end) = if x <= self.knots[0] { (0, 0) } else { (last - 1, last) };
            return self.values[end] + self.slope_in(i, end) * (x - self.knots[end]);
        }
        let i = self.interval(x);
        let h = self.knots[i + 1] - self.knots[i];
        let a = (self.knots[i + 1] - x) / h;
        let b = 1.0 - a;
        a * self.values[i]
            + b * self.values[i + 1]
            + ((a * a * a - a) * self.second[i] + (b * b * b - b) * self.second[i + 1]) * h * h / 6.0
    }

    /// The `i` with `knots[i] <= x < knots[i + 1]`, for `x` strictly inside the knots:
    /// a first guess as if the knots were evenly spaced (quotes usually nearly are),
    /// then a walk of a step or two, and a bisection when the guess is far off.
    fn interval(&self, x: f64) -> usize {
        let knots = &self.knots;
        let last = knots.len() - 1;
        let guess = ((x - knots[0]) / (knots[last] - knots[0]) * last as f64) as usize;
        let mut i = guess.min(last - 1);
        for _ in 0..3 {
            if x < knots[i] {
                i -= 1;
            } else if x >= knots[i + 1] {
                i += 1;
            } else {
                return i;
            }
        }
        knots.partition_point(|&k| k <= x).clamp(1, last) - 1
    }

    fn slope_in(&self, i: usize, at: usize) -> f64 {
        let h = self.knots[i + 1] - self.knots[i];
        let (m0, m1) = (self.second[i], self.second[i + 1]);
        let chord = (self.values[i + 1] - self.values[i]) / h;
        if at == i {
            chord - h * (2.0 * m0 + m1) / 6.0
        } else {
            chord + h * (m0 + 2.0 * m1) / 6.0
        }
    }
}

/// A smoothing spline fitted at one `lambda`, with its hat-matrix diagonal.
#[derive(Debug, Clone, PartialEq)]
pub struct SmoothingFit {
    /// The fitted spline.
    pub spline: NaturalCubic,
    /// Diagonal of the hat matrix, `dg_i / dy_i`.
    pub hat_diagonal: Vec<f64>,
    /// Smoothing parameter used.
    pub lambda: f64,
    /// Generalised cross-validation score `n RSS / (n - tr H)^2` (weighted residual
    /// sum of squares); infinite when `tr H` reaches `n`.
    pub gcv: f64,
    /// Weighted residual sum of squares `sum omega_i (y_i - g_i)^2`.
    pub residual_sum_of_squares: f64,
}

impl SmoothingFit {
    /// Effective degrees of freedom, the trace of the hat matrix.
    pub fn degrees_of_freedom(&self) -> f64 {
        self.hat_diagonal.iter().sum()
    }

    /// The data's noise in the units the weights make one, `sqrt(RSS / (n - tr H))`
    /// (Craven & Wahba 1979, Numer. Math. 31); `None` when the fit (nearly)
    /// interpolates, fewer than half a degree of freedom left.
    pub fn noise_scale(&self) -> Option<f64> {
        let left = self.hat_diagonal.len() as f64 - self.degrees_of_freedom();
        (left > 0.5).then(|| (self.residual_sum_of_squares / left).sqrt())
    }
}

/// Why a smoothing spline cannot be fitted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
pub enum SmoothingError {
    /// Fewer than three points, lengths differ, knots not strictly increasing, or a
    /// weight or value not finite and positive (weights) or finite (values).
    #[error("a smoothing spline needs at least 3 strictly increasing knots with finite values and positive weights")]
    BadData,
    /// The banded system lost positive definiteness (a non-finite `lambda`).
    #[error("the smoothing system is not positive definite")]
    NotPositiveDefinite,
}

fn check(x: &[f64], y: &[f64], weight: &[f64]) -> Result<(), SmoothingError> {
    let ok = x.len() >= 3
        && x.len() == y.len()
        && x.len() == weight.len()
        && x.windows(2).all(|p| p[1] > p[0] && (p[1] - p[0]).is_finite())
        && y.iter().all(|v| v.is_finite())
        && weight.iter().all(|w| w.is_finite() && *w > 0.0);
    if ok {
        Ok(())
    } else {
        Err(SmoothingError::BadData)
    }
}

/// The smoothing spline of `(x, y)` with weights `weight` at smoothing `lambda`.
///
/// # Errors
/// [`SmoothingError`] for unusable data or `lambda`.
pub fn fit(x: &[f64], y: &[f64], weight: &[f64], lambda: f64) -> Result<SmoothingFit, SmoothingError> {
    check(x, y, weight)?;
    let n = x.len();
    let m = n - 2;
    let system = System::new(x, weight);
    let factor = Factor::new(&system, lambda)?;
    let gamma = factor.solve(system.q_transpose_times(y));
    let values = system.values(y, lambda, &gamma);
    let hat_diagonal = hat_diagonal(&system, &factor, lambda);
    let rss: f64 = (0..n).map(|i| weight[i] * (y[i] - values[i]).powi(2)).sum();
    let dof_left = n as f64 - hat_diagonal.iter().sum::<f64>();
    let gcv = if dof_left > 1e-9 { n as f64 * rss / (dof_left * dof_left) } else { f64::INFINITY };
    let mut second = vec![0.0; n];
    second[1..=m].copy_from_slice(&gamma);
    Ok(SmoothingFit {
        spline: NaturalCubic { knots: x.to_vec(), values, second },
        hat_diagonal,
        lambda,
        gcv,
        residual_sum_of_squares: rss,
    })
}

/// The smoothing spline's fitted values at the knots, `g = H y`, for many data vectors
/// at one set of knots, weights and `lambda`: the banded `L D L'` factorisation of
/// `R + lambda Q' W^-1 Q` is made once, and each vector then costs two triangular
/// solves (no hat diagonal, no spline object).
pub struct Smoother {
    system: System,
    factor: Factor,
    lambda: f64,
}

impl Smoother {
    /// Factorises the system of knots `x`, weights `weight` and smoothing `lambda`.
    ///
    /// # Errors
    /// [`SmoothingError`] for unusable knots or weights, or a system that is not
    /// positive definite.
    pub fn new(x: &[f64], weight: &[f64], lambda: f64) -> Result<Self, SmoothingError> {
        check(x, &vec![0.0; x.len()], weight)?;
        let system = System::new(x, weight);
        let factor = Factor::new(&system, lambda)?;
        Ok(Self { system, factor, lambda })
    }

    /// Effective degrees of freedom, the trace of the hat matrix (the same sum as
    /// [`SmoothingFit::degrees_of_freedom`] of a fit at these knots, weights and
    /// `lambda`, without fitting any data).
    pub fn degrees_of_freedom(&self) -> f64 {
        hat_diagonal(&self.system, &self.factor, self.lambda).iter().sum()
    }

    /// Fitted values `H y` at the knots (`y` one value per knot).
    pub fn smooth(&self, y: &[f64]) -> Vec<f64> {
        let gamma = self.factor.solve(self.system.q_transpose_times(y));
        self.system.values(y, self.lambda, &gamma)
    }

    /// [`Smoother::smooth`] of `L` data vectors at once, given by knot (`rows[i][l]`
    /// is vector `l` at knot `i`): the triangular solves are chains of dependent
    /// multiply-adds, and `L` chains side by side take about the time of one. Each
    /// lane's arithmetic is that of [`Smoother::smooth`], to the bit. Rows of NaN when
    /// `rows` does not hold one row per knot.
    pub fn smooth_lanes<const L: usize>(&self, rows: &[[f64; L]]) -> Vec<[f64; L]> {
        if rows.len() != self.system.columns.len() + 2 {
            return vec![[f64::NAN; L]; rows.len()];
        }
        let gamma = self.factor.solve_lanes(self.system.q_transpose_lanes(rows));
        self.system.values_lanes(rows, self.lambda, &gamma)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Dense reference: solves `(W + lambda K) g = W y` with `K = Q R^-1 Q'` by plain
    /// Gaussian elimination on full matrices, and the hat matrix column by column.
    fn dense(x: &[f64], y: &[f64], w: &[f64], lambda: f64) -> (Vec<f64>, Vec<f64>) {
        let n = x.len();
        let m = n - 2;
        let h: Vec<f64> = x.windows(2).map(|p| p[1] - p[0]).collect();
        let mut q = vec![vec![0.0; m]; n];
        let mut r = vec![vec![0.0; m]; m];
        for j in 0..m {
            q[j][j] = 1.0 / h[j];
            q[j + 1][j] = -1.0 / h[j] - 1.0 / h[j + 1];
            q[j + 2][j] = 1.0 / h[j + 1];
            r[j][j] = (h[j] + h[j + 1]) / 3.0;
            if j + 1 < m {
                r[j][j + 1] = h[j + 1] / 6.0;
                r[j + 1][j] = h[j + 1] / 6.0;
            }
        }
        let solve = |mut a: Vec<Vec<f64>>, mut b: Vec<f64>| -> Vec<f64> {
            let n = b.len();
            for c in 0..n {
                let p = (c..n).max_by(|&i, &j| a[i][c].abs().total_cmp(&a[j][c].abs())).expect("rows");
                a.swap(c, p);
                b.swap(c, p);
                for rr in c + 1..n {
                    let f = a[rr][c] / a[c][c];
                    for cc in c..n {
                        a[rr][cc] -= f * a[c][cc];
                    }
                    b[rr] -= f * b[c];
                }
            }
            let mut out = vec![0.0; n];
            for c in (0..n).rev() {
                out[c] = (b[c] - (c + 1..n).map(|cc| a[c][cc] * out[cc]).sum::<f64>()) / a[c][c];
            }
            out
        };
        // K = Q R^-1 Q', column by column of Q'.
        let mut k = vec![vec![0.0; n]; n];
        for col in 0..n {
            let qt_col: Vec<f64> = (0..m).map(|j| q[col][j]).collect();
            let z = solve(r.clone(), qt_col);
            for row in 0..n {
                k[row][col] = (0..m).map(|j| q[row][j] * z[j]).sum();
            }
        }
        let a: Vec<Vec<f64>> =
            (0..n).map(|i| (0..n).map(|j| lambda * k[i][j] + if i == j { w[i] } else { 0.0 }).collect()).collect();
        let g = solve(a.clone(), (0..n).map(|i| w[i] * y[i]).collect());
        let hat: Vec<f64> = (0..n)
            .map(|i| {
                let mut e = vec![0.0; n];
                e[i] = w[i];
                solve(a.clone(), e)[i]
            })
            .collect();
        (g, hat)
    }

    #[test]
    fn band_solution_and_hat_diagonal_equal_a_dense_solve() {
        // Identity check against dense linear algebra (same definitions, no shortcut).
        let x: Vec<f64> = (0..12).map(|i| -0.5 + 0.09 * i as f64 + 0.01 * ((i * 7) % 3) as f64).collect();
        let y: Vec<f64> = x.iter().enumerate().map(|(i, v)| v.sin() + 0.01 * ((i * 5) % 4) as f64).collect();
        let w: Vec<f64> = (0..12).map(|i| 1.0 + 0.3 * ((i * 3) % 5) as f64).collect();
        for lambda in [1e-6, 1e-3, 0.1, 10.0] {
            let banded = fit(&x, &y, &w, lambda).expect("fit");
            let (g, hat) = dense(&x, &y, &w, lambda);
            for i in 0..x.len() {
                // Tolerance: both solve well-conditioned systems of size 12; 1e-10 absolute
                // allows the dense elimination's rounding at the largest lambda.
                assert!((banded.spline.values()[i] - g[i]).abs() < 1e-10, "lambda {lambda} value {i}");
                assert!((banded.hat_diagonal[i] - hat[i]).abs() < 1e-10, "lambda {lambda} hat {i}");
            }
        }
    }

    #[test]
    fn value_agrees_with_eval_on_uneven_knots() {
        // Knots bunched at one end, so the evenly-spaced first guess of the interval is
        // far off and the bisection runs; values agree bit for bit with `eval`.
        let x: Vec<f64> = (0..15).map(|i| (i as f64 / 14.0).powi(3)).collect();
        let y: Vec<f64> = x.iter().map(|v| (5.0 * v).sin()).collect();
        let spline = fit(&x, &y, &[1.0; 15], 1e-6).expect("fit").spline;
        for i in 0..=400 {
            let at = -0.1 + 1.2 * i as f64 / 400.0;
            assert_eq!(spline.value(at).to_bits(), spline.eval(at).0.to_bits(), "x {at}");
        }
    }

    #[test]
    fn the_smoother_gives_the_fit_values() {
        // Identity: one factorisation, many data vectors, the same values as `fit`.
        let x: Vec<f64> = (0..20).map(|i| -0.4 + 0.05 * i as f64 + 0.003 * ((i * 7) % 4) as f64).collect();
        let w: Vec<f64> = (0..20).map(|i| 0.5 + 0.25 * ((i * 3) % 5) as f64).collect();
        let smoother = Smoother::new(&x, &w, 1e-3).expect("factorised");
        for shift in [0.0, 0.3, -1.2] {
            let y: Vec<f64> =
                x.iter().enumerate().map(|(i, v)| (3.0 * v + shift).sin() + 0.01 * (i % 3) as f64).collect();
            let want = fit(&x, &y, &w, 1e-3).expect("fit");
            for (a, b) in smoother.smooth(&y).iter().zip(want.spline.values()) {
                assert!((a - b).abs() < 1e-13, "{a} vs {b}");
            }
            // Same factor, same sum of the hat diagonal: equal to the bit.
            assert_eq!(smoother.degrees_of_freedom().to_bits(), want.degrees_of_freedom().to_bits());
        }
    }

    #[test]
    fn lanes_smooth_each_vector_as_alone() {
        // Identity: the batched solve is the single one lane by lane, to the bit.
        let x: Vec<f64> = (0..17).map(|i| -0.4 + 0.05 * i as f64 + 0.004 * ((i * 5) % 3) as f64).collect();
        let w: Vec<f64> = (0..17).map(|i| 0.5 + 0.3 * ((i * 3) % 4) as f64).collect();
        let smoother = Smoother::new(&x, &w, 2e-4).expect("factorised");
        let rows: Vec<[f64; 3]> = x.iter().map(|v| [v.sin(), (2.0 * v).cos(), v * v]).collect();
        let lanes = smoother.smooth_lanes(&rows);
        for l in 0..3 {
            let alone = smoother.smooth(&rows.iter().map(|r| r[l]).collect::<Vec<_>>());
            for (a, b) in lanes.iter().zip(&alone) {
                assert_eq!(a[l].to_bits(), b.to_bits());
            }
        }
        assert!(smoother.smooth_lanes(&rows[1..]).iter().all(|r| r.iter().all(|v| v.is_nan())));
    }

    #[test]
    fn the_search_score_equals_the_full_fit_score() {
        // Identity: lambda trace(B^-1 Q' W^-1 Q) = n - sum H_ii and
        // lambda^2 sum (Q gamma)^2 / omega = RSS; the two computations differ only by
        // rounding (1e-9 relative: n - sum H_ii cancels to about 1e-12 of n here).
        let x: Vec<f64> = (0..25).map(|i| -0.7 + 0.06 * i as f64 + 0.004 * ((i * 7) % 5) as f64).collect();
        let y: Vec<f64> = x.iter().enumerate().map(|(i, v)| (2.0 * v).cos() + 0.02 * ((i * 3) % 4) as f64).collect();
        let w: Vec<f64> = (0..25).map(|i| 0.5 + 0.2 * ((i * 5) % 3) as f64).collect();
        let mut scorer = CrossValidation::new(&x, &y, &w).expect("data");
        for lambda in [1e-6, 1e-4, 1e-2, 1.0, 100.0] {
            let full = fit(&x, &y, &w, lambda).expect("fit").gcv;
            let fast = scorer.score(lambda).expect("score");
            assert!((fast - full).abs() <= 1e-9 * full, "lambda {lambda}: {fast} vs {full}");
        }
    }

    #[test]
    fn exact_on_a_straight_line_and_interpolating_at_zero_lambda() {
        // A line has no curvature: the penalty is zero at the data, at any lambda.
        let x = [0.0, 0.3, 0.5, 1.1, 1.4];
        let line: Vec<f64> = x.iter().map(|v| 2.0 - 3.0 * v).collect();
        let fitted = fit(&x, &line, &[1.0; 5], 100.0).expect("fit");
        for (g, y) in fitted.spline.values().iter().zip(&line) {
            assert!((g - y).abs() < 1e-12);
        }
        let (v, s, c) = fitted.spline.eval(2.0);
        assert!((v - (2.0 - 6.0)).abs() < 1e-12 && (s + 3.0).abs() < 1e-12 && c.abs() < 1e-12);
        let y = [0.0, 1.0, 0.5, 2.0, -1.0];
        let interp = fit(&x, &y, &[1.0; 5], 0.0).expect("fit");
        for (i, xi) in x.iter().enumerate() {
            assert!((interp.spline.eval(*xi).0 - y[i]).abs() < 1e-12);
        }
    }

    #[test]
    fn cross_validation_smooths_noise_and_keeps_a_clean_curve() {
        // Clean cubic data: the chosen spline reproduces it (a cubic is smooth; GCV goes
        // to interpolation or to a small lambda, 1e-8 absolute). Noisy data: the spline
        // is closer to the truth than the data (root mean square).
        let x: Vec<f64> = (0..40).map(|i| i as f64 / 39.0).collect();
        let truth: Vec<f64> = x.iter().map(|v| (3.0 * v).sin()).collect();
        let clean = fit_by_cross_validation(&x, &truth, &[1.0; 40]).expect("fit");
        for (g, y) in clean.spline.values().iter().zip(&truth) {
            assert!((g - y).abs() < 1e-6, "{g} vs {y}");
        }
        // Uniform noise of +-0.05 from a linear congruential generator (Numerical Recipes'
        // constants; any fixed seed).
        let mut state: u32 = 20261205;
        let noisy: Vec<f64> = truth
            .iter()
            .map(|y| {
                state = state.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
                y + 0.05 * (2.0 * f64::from(state) / f64::from(u32::MAX) - 1.0)
            })
            .collect();
        let smooth = fit_by_cross_validation(&x, &noisy, &[1.0; 40]).expect("fit");
        let rms = |a: &[f64]| (a.iter().zip(&truth).map(|(g, y)| (g - y).powi(2)).sum::<f64>() / 40.0).sqrt();
        assert!(rms(smooth.spline.values()) < 0.7 * rms(&noisy), "{} vs {}", rms(smooth.spline.values()), rms(&noisy));
        assert!(smooth.degrees_of_freedom() < 20.0);
    }
}
