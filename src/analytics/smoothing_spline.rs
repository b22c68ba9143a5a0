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
        let n = self.knots.len();
        let last = n - 1;
        if x <= self.knots[0] || x >= self.knots[last] {
            let (i, end) = if x <= self.knots[0] { (0, 0) } else { (last - 1, last) };
            let slope = self.slope_in(i, end);
            return (self.values[end] + slope * (x - self.knots[end]), slope, 0.0);
        }
        let i = self.knots.partition_point(|&k| k <= x).clamp(1, last) - 1;
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

    /// Slope of interval `i` at its knot `at` (`i` or `i + 1`).
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
    if !(lambda.is_finite() && lambda >= 0.0) {
        return Err(SmoothingError::NotPositiveDefinite);
    }
    let n = x.len();
    let m = n - 2;
    let h: Vec<f64> = x.windows(2).map(|p| p[1] - p[0]).collect();
    // Column j of Q (interior knot j + 1) has entries at rows j, j + 1, j + 2; taken
    // once, as are the inverse weights (divisions are most of this function's cost).
    let columns: Vec<[f64; 3]> = (0..m)
        .map(|j| {
            let (a, b) = (1.0 / h[j], 1.0 / h[j + 1]);
            [a, -a - b, b]
        })
        .collect();
    let q = |j: usize| columns[j];
    let inverse_weight: Vec<f64> = weight.iter().map(|w| 1.0 / w).collect();
    // B = R + lambda Q' W^-1 Q as three bands: diagonal, first and second off-diagonal.
    let mut d0 = vec![0.0; m];
    let mut d1 = vec![0.0; m];
    let mut d2 = vec![0.0; m];
    for j in 0..m {
        let qj = q(j);
        d0[j] = (h[j] + h[j + 1]) / 3.0
            + lambda
                * (qj[0] * qj[0] * inverse_weight[j]
                    + qj[1] * qj[1] * inverse_weight[j + 1]
                    + qj[2] * qj[2] * inverse_weight[j + 2]);
        if j + 1 < m {
            let qn = q(j + 1);
            d1[j] = h[j + 1] / 6.0
                + lambda * (qj[1] * qn[0] * inverse_weight[j + 1] + qj[2] * qn[1] * inverse_weight[j + 2]);
        }
        if j + 2 < m {
            let qn = q(j + 2);
            d2[j] = lambda * qj[2] * qn[0] * inverse_weight[j + 2];
        }
    }
    // L D L' with L unit lower triangular of bandwidth 2: l1[j] = L[j+1][j], l2[j] = L[j+2][j].
    let mut dd = vec![0.0; m];
    let mut inverse_d = vec![0.0; m];
    let mut l1 = vec![0.0; m];
    let mut l2 = vec![0.0; m];
    for j in 0..m {
        let mut dj = d0[j];
        if j >= 1 {
            dj -= l1[j - 1] * l1[j - 1] * dd[j - 1];
        }
        if j >= 2 {
            dj -= l2[j - 2] * l2[j - 2] * dd[j - 2];
        }
        if !(dj > 0.0 && dj.is_finite()) {
            return Err(SmoothingError::NotPositiveDefinite);
        }
        dd[j] = dj;
        let inverse = 1.0 / dj;
        inverse_d[j] = inverse;
        if j + 1 < m {
            let mut b = d1[j];
            if j >= 1 {
                b -= l2[j - 1] * l1[j - 1] * dd[j - 1];
            }
            l1[j] = b * inverse;
        }
        if j + 2 < m {
            l2[j] = d2[j] * inverse;
        }
    }
    // gamma = B^-1 Q' y.
    let mut gamma: Vec<f64> = (0..m)
        .map(|j| {
            let qj = q(j);
            qj[0] * y[j] + qj[1] * y[j + 1] + qj[2] * y[j + 2]
        })
        .collect();
    for j in 0..m {
        if j >= 1 {
            gamma[j] -= l1[j - 1] * gamma[j - 1];
        }
        if j >= 2 {
            gamma[j] -= l2[j - 2] * gamma[j - 2];
        }
    }
    for (g, d) in gamma.iter_mut().zip(&inverse_d) {
        *g *= d;
    }
    for j in (0..m).rev() {
        if j + 1 < m {
            gamma[j] -= l1[j] * gamma[j + 1];
        }
        if j + 2 < m {
            gamma[j] -= l2[j] * gamma[j + 2];
        }
    }
    // Values g = y - lambda W^-1 Q gamma.
    let mut values = y.to_vec();
    for j in 0..m {
        let qj = q(j);
        for (r, qv) in qj.iter().enumerate() {
            values[j + r] -= lambda * qv * gamma[j] * inverse_weight[j + r];
        }
    }
    // Central band of S = B^-1: s0[j] = S[j][j], s1[j] = S[j][j+1], s2[j] = S[j][j+2].
    let mut s0 = vec![0.0; m];
    let mut s1 = vec![0.0; m];
    let mut s2 = vec![0.0; m];
    for j in (0..m).rev() {
        let (a1, a2) = (if j + 1 < m { l1[j] } else { 0.0 }, if j + 2 < m { l2[j] } else { 0.0 });
        let s11 = if j + 1 < m { s0[j + 1] } else { 0.0 };
        let s12 = if j + 1 < m { s1[j + 1] } else { 0.0 };
        let s22 = if j + 2 < m { s0[j + 2] } else { 0.0 };
        s2[j] = -a1 * s12 - a2 * s22;
        s1[j] = -a1 * s11 - a2 * s12;
        s0[j] = inverse_d[j] - a1 * s1[j] - a2 * s2[j];
    }
    let band = |a: usize, b: usize| -> f64 {
        let (lo, hi) = if a <= b { (a, b) } else { (b, a) };
        match hi - lo {
            0 => s0[lo],
            1 => s1[lo],
            2 => s2[lo],
            _ => 0.0,
        }
    };
    // (Q S Q')_ii over the columns j with a non-zero Q[i][j]: j = i - 2, i - 1, i.
    let mut hat_diagonal = vec![0.0; n];
    for (i, hat) in hat_diagonal.iter_mut().enumerate() {
        let mut cols = [(0usize, 0.0f64); 3];
        let mut count = 0;
        for j in i.saturating_sub(2)..=i {
            if j < m {
                cols[count] = (j, q(j)[i - j]);
                count += 1;
            }
        }
        let mut quad = 0.0;
        for &(a, qa) in &cols[..count] {
            for &(b, qb) in &cols[..count] {
                quad += qa * qb * band(a, b);
            }
        }
        *hat = 1.0 - lambda * quad * inverse_weight[i];
    }
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

/// Decades of `lambda`, relative to its natural scale, searched by
/// [`fit_by_cross_validation`]: from near interpolation to near the straight line.
pub const LOG10_LAMBDA_RANGE: (f64, f64) = (-14.0, 6.0);

/// Step of the coarse search in decades of `lambda`.
pub const LOG10_LAMBDA_STEP: f64 = 1.0;

/// Golden-section steps refining the best coarse point: the bracket of two decades
/// shrinks by 0.618 each step, to about 0.01 decade after ten.
pub const GOLDEN_STEPS: usize = 10;

/// The smoothing spline with `lambda` chosen by generalised cross-validation: a coarse
/// search over [`LOG10_LAMBDA_RANGE`] decades of the natural scale
/// `sum(omega) (x_max - x_min)^3 / n` (where the penalty and the data term are of
/// one size), then golden-section refinement around the best point. Without noise
/// the score falls towards interpolation, which it then returns (to within
/// `1e-14` of the natural scale).
///
/// # Errors
/// [`SmoothingError`] for unusable data.
pub fn fit_by_cross_validation(x: &[f64], y: &[f64], weight: &[f64]) -> Result<SmoothingFit, SmoothingError> {
    fit_by_cross_validation_near(x, y, weight, None).map(|(fit, _)| fit)
}

/// Decades either side of a hint that the warm-started search brackets.
pub const HINT_HALF_WIDTH: f64 = 1.5;

/// [`fit_by_cross_validation`] starting from `hint`, a `log10` of `lambda` relative to
/// its natural scale (from a neighbouring, similar fit): the golden-section search runs
/// over [`HINT_HALF_WIDTH`] decades either side of it, and the full coarse search only
/// when the best point ends on that bracket's edge. Returns the fit and its `log10`
/// relative `lambda`, the hint for the next.
///
/// # Errors
/// [`SmoothingError`] for unusable data.
pub fn fit_by_cross_validation_near(
    x: &[f64],
    y: &[f64],
    weight: &[f64],
    hint: Option<f64>,
) -> Result<(SmoothingFit, f64), SmoothingError> {
    check(x, y, weight)?;
    let n = x.len();
    let scale = weight.iter().sum::<f64>() * (x[n - 1] - x[0]).powi(3) / n as f64;
    let at = |p: f64| fit(x, y, weight, scale * 10f64.powf(p));
    if let Some(centre) = hint.filter(|h| h.is_finite()) {
        let (fit, p) = golden(&at, centre - HINT_HALF_WIDTH, centre + HINT_HALF_WIDTH)?;
        if (p - centre).abs() < HINT_HALF_WIDTH * 0.95 {
            return Ok((fit, p));
        }
    }
    let mut best: Option<(f64, SmoothingFit)> = None;
    let mut p = LOG10_LAMBDA_RANGE.0;
    while p <= LOG10_LAMBDA_RANGE.1 + 1e-9 {
        let candidate = at(p)?;
        if best.as_ref().is_none_or(|(_, b)| candidate.gcv < b.gcv) {
            best = Some((p, candidate));
        }
        p += LOG10_LAMBDA_STEP;
    }
    let Some((p_best, best_fit)) = best else { return Err(SmoothingError::BadData) };
    let (refined, p_refined) = golden(&at, p_best - LOG10_LAMBDA_STEP, p_best + LOG10_LAMBDA_STEP)?;
    Ok(if refined.gcv < best_fit.gcv { (refined, p_refined) } else { (best_fit, p_best) })
}

/// Golden-section minimisation of the score over `[lo, hi]` in `log10 lambda`.
fn golden(
    at: &impl Fn(f64) -> Result<SmoothingFit, SmoothingError>,
    mut lo: f64,
    mut hi: f64,
) -> Result<(SmoothingFit, f64), SmoothingError> {
    const INV_PHI: f64 = 0.618_033_988_749_894_8;
    let mut c = hi - INV_PHI * (hi - lo);
    let mut d = lo + INV_PHI * (hi - lo);
    let (mut fc, mut fd) = (at(c)?, at(d)?);
    for _ in 0..GOLDEN_STEPS {
        if fc.gcv < fd.gcv {
            hi = d;
            d = c;
            fd = fc;
            c = hi - INV_PHI * (hi - lo);
            fc = at(c)?;
        } else {
            lo = c;
            c = d;
            fc = fd;
            d = lo + INV_PHI * (hi - lo);
            fd = at(d)?;
        }
    }
    Ok(if fc.gcv < fd.gcv { (fc, c) } else { (fd, d) })
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
