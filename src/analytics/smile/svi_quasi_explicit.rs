//! The quasi-explicit SVI search: for fixed `(m, sigma)` the best `(a, d, c)` by weighted
//! linear least squares over the faces of the no-arbitrage box ([`InnerData::solve_faces`]),
//! and the outer Levenberg-Marquardt search over `(m, ln sigma)` on that reduced cost
//! with its variable-projection gradient ([`InnerData::search_outer`]). The fits that use
//! it are in [`super::svi`].

use super::svi::SlopePrior;
use crate::analytics::numerics::small_solve::solve_small;
use crate::analytics::tolerances::{
    SVI_OUTER_COST_REL_TOL, SVI_OUTER_MAX_DAMPING_TRIES, SVI_OUTER_MAX_ITERATIONS, SVI_OUTER_PREDICTED_GAIN_TOL,
    SVI_OUTER_STEP_TOL,
};

/// A face of the `(c, d)` constraint square: an origin `(c, d)` and spanning directions.
type CdFace<'a> = ((f64, f64), &'a [(f64, f64)]);

/// Data of the inner (linear) problem.
pub(super) struct InnerData<'a> {
    pub(super) k: &'a [f64],
    pub(super) w: &'a [f64],
    pub(super) weight: &'a [f64],
    pub(super) w_max: f64,
    pub(super) slope_cap: f64,
    pub(super) prior: SlopePrior,
}

/// Inward normals of the constraints `n.x + b >= 0` on `x = (a, d, c)`:
/// `c - d`, `c + d`, `bound - c - d`, `bound - c + d`, `a`, `w_max - a`.
const NORMALS: [[f64; 3]; 6] =
    [[0.0, -1.0, 1.0], [0.0, 1.0, 1.0], [0.0, -1.0, -1.0], [0.0, 1.0, -1.0], [1.0, 0.0, 0.0], [-1.0, 0.0, 0.0]];

/// Constraints active on each `(c, d)` face of [`InnerData::solve_faces`].
const CD_ACTIVE: [&[usize]; 9] = [&[], &[0], &[1], &[2], &[3], &[0, 1], &[0, 2], &[1, 3], &[2, 3]];

/// Constraints active on each `a` face (free, at 0, at `w_max`).
const A_ACTIVE: [&[usize]; 3] = [&[], &[4], &[5]];

/// Candidate faces `(c, d face, a face)` by number of active constraints, so the first
/// one that meets the Karush-Kuhn-Tucker conditions (feasible, multipliers >= 0) is the
/// optimum of this convex problem and ends the search.
#[rustfmt::skip]
const FACE_ORDER: [(usize, usize); 27] = [
    (0, 0), (1, 0), (2, 0), (3, 0), (4, 0), (0, 1), (0, 2), (5, 0), (6, 0), (7, 0), (8, 0),
    (1, 1), (2, 1), (3, 1), (4, 1), (1, 2), (2, 2), (3, 2), (4, 2),
    (5, 1), (6, 1), (7, 1), (8, 1), (5, 2), (6, 2), (7, 2), (8, 2),
];

/// The inner quadratic `s - 2 v.x + x' M x` in `x = (a, d, c)` at one `(m, sigma)`.
struct InnerProblem {
    mat: [[f64; 3]; 3],
    v: [f64; 3],
    s: f64,
    /// The data's normal sums, without the prior.
    normal: NormalSums,
}

impl InnerProblem {
    /// The weighted squared error at `x` (never below 0).
    fn objective(&self, x: &[f64; 3]) -> f64 {
        let (mat, v) = (&self.mat, &self.v);
        let mut f = self.s;
        for r in 0..3 {
            f -= 2.0 * v[r] * x[r];
            for c in 0..3 {
                f += x[r] * mat[r][c] * x[c];
            }
        }
        f.max(0.0)
    }

    /// The minimiser on the face `x = p0 + P t` with `a` held at `a_fixed` (or free) and
    /// `(c, d)` at `origin` plus the `span` directions; `None` when singular.
    fn face_minimiser(&self, a_fixed: Option<f64>, origin: (f64, f64), span: &[(f64, f64)]) -> Option<[f64; 3]> {
        let (mat, v) = (&self.mat, &self.v);
        let p0 = [a_fixed.unwrap_or(0.0), origin.1, origin.0];
        let mut cols = [[0.0; 3]; 3];
        let mut n = 0;
        if a_fixed.is_none() {
            cols[n] = [1.0, 0.0, 0.0];
            n += 1;
        }
        for (dc, dd) in span.iter() {
            cols[n] = [0.0, *dd, *dc];
            n += 1;
        }
        let mut x = p0;
        if n > 0 {
            let mp0: [f64; 3] = std::array::from_fn(|r| (0..3).map(|c| mat[r][c] * p0[c]).sum());
            let mut h = [[0.0; 3]; 3];
            let mut g = [0.0; 3];
            for i in 0..n {
                for j in 0..n {
                    h[i][j] = (0..3).map(|r| cols[i][r] * (0..3).map(|c| mat[r][c] * cols[j][c]).sum::<f64>()).sum();
                }
                g[i] = (0..3).map(|r| cols[i][r] * (v[r] - mp0[r])).sum();
            }
            let t = solve_small(n, h, g)?;
            for (i, col) in cols.iter().take(n).enumerate() {
                for r in 0..3 {
                    x[r] += t[i] * col[r];
                }
            }
        }
        Some(x)
    }

    /// Whether `x` meets the KKT conditions with the `active` constraints: the gradient
    /// is a non-negative combination of their normals (least-squares multipliers).
    fn kkt(&self, x: &[f64; 3], active: &[usize]) -> bool {
        let (mat, v) = (&self.mat, &self.v);
        let grad: [f64; 3] = std::array::from_fn(|r| 2.0 * ((0..3).map(|c| mat[r][c] * x[c]).sum::<f64>() - v[r]));
        let scale = grad.iter().map(|g| g.abs()).fold(0.0, f64::max).max(1e-300);
        if active.is_empty() {
            return scale <= 1e-300;
        }
        let n = active.len();
        let mut h = [[0.0; 3]; 3];
        let mut r = [0.0; 3];
        for i in 0..n {
            for j in 0..n {
                h[i][j] = (0..3).map(|c| NORMALS[active[i]][c] * NORMALS[active[j]][c]).sum();
            }
            r[i] = (0..3).map(|c| NORMALS[active[i]][c] * grad[c]).sum();
        }
        let Some(lambda) = solve_small(n, h, r) else { return false };
        let residual = (0..3)
            .map(|c| (grad[c] - (0..n).map(|i| lambda[i] * NORMALS[active[i]][c]).sum::<f64>()).abs())
            .fold(0.0, f64::max);
        residual <= 1e-9 * scale && lambda.iter().take(n).all(|l| *l >= -1e-9 * scale)
    }
}

/// The reduced cost's Gauss-Newton Hessian in `(m, ln sigma)`: the outer block minus
/// the coupling through the inner solution's free directions (a Schur complement; the
/// outer block alone when the inner solution sits in a corner).
fn reduced_hessian(
    outer_outer: [[f64; 2]; 2],
    inner_inner: &[[f64; 3]; 3],
    inner_outer: &[[f64; 2]; 3],
    free: &[[f64; 3]; 3],
    n_free: usize,
) -> [[f64; 2]; 2] {
    let mut reduced = [[0.0; 3]; 3];
    let mut coupling = [[0.0; 3]; 2];
    for i in 0..n_free {
        for j in 0..n_free {
            reduced[i][j] =
                (0..3).map(|r| free[i][r] * (0..3).map(|c| inner_inner[r][c] * free[j][c]).sum::<f64>()).sum();
        }
        for c in 0..2 {
            coupling[c][i] = (0..3).map(|r| free[i][r] * inner_outer[r][c]).sum();
        }
    }
    let mut hessian = outer_outer;
    if n_free > 0 {
        let solved = [solve_small(n_free, reduced, coupling[0]), solve_small(n_free, reduced, coupling[1])];
        if let [Some(y0), Some(y1)] = solved {
            let y = [y0, y1];
            for r in 0..2 {
                for c in 0..2 {
                    hessian[r][c] -= (0..n_free).map(|i| coupling[r][i] * y[c][i]).sum::<f64>();
                }
            }
        }
    }
    hessian
}

impl InnerData<'_> {
    /// Best `(a, d, c)` for given `(m, sigma)`, its weighted squared error, and the
    /// weighted sums of the basis products it was solved with ([`NormalSums`]); with
    /// `stop_at_kkt` false every face is visited (for tests). `roots[i]` receives
    /// `sqrt(1 + y_i^2)` of each quote, which the derivatives at this point reuse.
    pub(super) fn solve_faces(
        &self,
        m: f64,
        sigma: f64,
        stop_at_kkt: bool,
        roots: &mut [f64],
    ) -> (f64, [f64; 3], NormalSums) {
        let problem = self.inner_problem(m, sigma, roots);
        let bound = self.slope_cap * sigma;
        let tol = 1e-12 * (1.0 + bound + self.w_max);
        let feasible = |x: &[f64; 3]| {
            let (a, d, c) = (x[0], x[1], x[2]);
            a >= -tol && a <= self.w_max + tol && c + tol >= d.abs() && c + d.abs() <= bound + tol
        };
        // Faces of the (c, d) square |d| <= c, c + |d| <= bound, as origin + span.
        let cd_faces: [CdFace; 9] = [
            ((0.0, 0.0), &[(1.0, 0.0), (0.0, 1.0)]),
            ((0.0, 0.0), &[(1.0, 1.0)]),
            ((0.0, 0.0), &[(1.0, -1.0)]),
            ((bound, 0.0), &[(-1.0, 1.0)]),
            ((bound, 0.0), &[(1.0, 1.0)]),
            ((0.0, 0.0), &[]),
            ((0.5 * bound, 0.5 * bound), &[]),
            ((0.5 * bound, -0.5 * bound), &[]),
            ((bound, 0.0), &[]),
        ];
        let a_faces: [Option<f64>; 3] = [None, Some(0.0), Some(self.w_max)];
        let mut best = (f64::INFINITY, [0.0, 0.0, 0.0]);
        for &(face_index, a_index) in FACE_ORDER.iter() {
            let (origin, span) = &cd_faces[face_index];
            let Some(x) = problem.face_minimiser(a_faces[a_index], *origin, span) else { continue };
            if feasible(&x) {
                let f = problem.objective(&x);
                if f < best.0 {
                    best = (f, x);
                }
                // The unconstrained optimum of a convex problem, when feasible, is the
                // answer; so is a face optimum that meets the KKT conditions.
                let mut active = [0usize; 3];
                let mut count = 0;
                for &c in CD_ACTIVE[face_index].iter().chain(A_ACTIVE[a_index].iter()) {
                    active[count] = c;
                    count += 1;
                }
                let active = &active[..count];
                if (face_index == 0 && a_index == 0) || (stop_at_kkt && problem.kkt(&x, active)) {
                    return (f, x, problem.normal);
                }
            }
        }
        (best.0, best.1, problem.normal)
    }

    /// The inner problem at `(m, sigma)`: normal equations of the basis
    /// `[1, y, sqrt(1 + y^2)]`, `y = (k - m)/sigma` (symmetric: six sums, not nine), with
    /// the prior on the wing slopes added. `roots[i]` receives `sqrt(1 + y_i^2)`.
    fn inner_problem(&self, m: f64, sigma: f64, roots: &mut [f64]) -> InnerProblem {
        let inv_sigma = 1.0 / sigma;
        // The square roots first, in a loop of their own: it has no running sums, so
        // the roots of different quotes overlap (and pair up in SSE2 registers); the
        // sums below then wait on additions only. The same numbers as in one loop.
        self.fill_roots(m, sigma, roots);
        let (mut s11, mut s1y, mut s1z, mut syy, mut syz, mut szz) = (0.0, 0.0, 0.0, 0.0, 0.0, 0.0);
        let (mut v1, mut vy, mut vz, mut s) = (0.0, 0.0, 0.0, 0.0);
        for i in 0..self.k.len().min(roots.len()) {
            let y = (self.k[i] - m) * inv_sigma;
            let z = roots[i];
            let om = self.weight[i];
            let (oy, oz, ow) = (om * y, om * z, om * self.w[i]);
            s11 += om;
            s1y += oy;
            s1z += oz;
            syy += oy * y;
            syz += oy * z;
            szz += oz * z;
            v1 += ow;
            vy += ow * y;
            vz += ow * z;
            s += ow * self.w[i];
        }
        // Prior on the wing slopes, P [(s_L - t_L)^2 + (s_R - t_R)^2], with
        // s_L = (c - d)/sigma and s_R = (c + d)/sigma: quadratic in (a, d, c).
        let p = self.prior.strength;
        let (t_l, t_r) = (self.prior.left, self.prior.right);
        let ridge = 2.0 * p * inv_sigma * inv_sigma;
        InnerProblem {
            mat: [[s11, s1y, s1z], [s1y, syy + ridge, syz], [s1z, syz, szz + ridge]],
            v: [v1, vy + p * (t_r - t_l) * inv_sigma, vz + p * (t_l + t_r) * inv_sigma],
            s: s + p * (t_l * t_l + t_r * t_r),
            normal: [s11, s1y, s1z, syy, syz, szz],
        }
    }
}

/// Smallest and largest `ln sigma` searched (sigma in log-moneyness, about 1e-4 to 7.4).
pub(super) const LN_SIGMA_RANGE: (f64, f64) = (-9.0, 2.0);

/// Levenberg–Marquardt damping of the first outer step (relative to the diagonal of
/// the Gauss–Newton matrix): the first full step from a grid point usually
/// overshoots, and starting at 0.1 instead of 1e-3 saves about four rejected trial
/// points per fit on the demo snapshot (measured with callgrind).
pub(super) const SVI_OUTER_START_DAMPING: f64 = 0.1;

/// `sum omega [1, y, z, y^2, y z, z^2]` over the quotes at one `(m, sigma)`, with
/// `y = (k - m)/sigma` and `z = sqrt(1 + y^2)`: the normal matrix of the inner problem
/// without the slope prior.
pub(super) type NormalSums = [f64; 6];

/// A point of the outer search: `(m, ln sigma)`, its reduced cost, the inner
/// solution `(a, d, c)` there and the sums the inner problem was solved with (the
/// derivatives at the point reuse them).
#[derive(Debug, Clone, Copy)]
pub(super) struct OuterPoint {
    pub(super) m: f64,
    pub(super) ln_sigma: f64,
    pub(super) cost: f64,
    pub(super) x: [f64; 3],
    pub(super) normal: NormalSums,
}

impl InnerData<'_> {
    /// `sqrt(1 + y_i^2)`, `y_i = (k_i - m)/sigma`, as [`Self::solve_faces`] uses it.
    #[inline]
    pub(super) fn fill_roots(&self, m: f64, sigma: f64, roots: &mut [f64]) {
        let inv_sigma = 1.0 / sigma;
        for (k, z) in self.k.iter().zip(roots.iter_mut()) {
            let y = (k - m) * inv_sigma;
            *z = (1.0 + y * y).sqrt();
        }
    }

    /// The reduced cost at `(m, ln sigma)`, both clamped into the search box.
    pub(super) fn outer_point(&self, m_range: (f64, f64), m: f64, ln_sigma: f64, roots: &mut [f64]) -> OuterPoint {
        let m = m.clamp(m_range.0, m_range.1);
        let ln_sigma = ln_sigma.clamp(LN_SIGMA_RANGE.0, LN_SIGMA_RANGE.1);
        let (cost, x, normal) = self.solve_faces(m, ln_sigma.exp(), true, roots);
        OuterPoint { m, ln_sigma, cost, x, normal }
    }

    /// Half the gradient of the reduced cost in `(m, ln sigma)` and its Gauss–Newton
    /// matrix, by variable projection (SIAM J. Numer. Anal. 10(2) (1973), "The differentiation of pseudo-inverses and nonlinear least squares
    /// problems whose variables separate").
    ///
    /// In the variables `(a, beta, gamma) = (a, d/sigma, c/sigma)` the model is
    /// `a + beta (k - m) + gamma sqrt((k - m)^2 + sigma^2)` and neither the
    /// constraints (`|beta| <= gamma`, `gamma + |beta| <= slope cap`, `0 <= a <= w_max`)
    /// nor the slope prior depend on `(m, sigma)`, so the gradient of the reduced cost
    /// is the partial gradient at the fixed inner solution (envelope theorem). The
    /// matrix is the Gauss–Newton matrix of all five variables with the inner ones
    /// eliminated (Schur complement) over the face of the constraints the inner
    /// solution lies on.
    ///
    /// `roots` holds `sqrt(1 + y_i^2)` at this point (from [`Self::solve_faces`]), so
    /// that each quote's `sqrt((k - m)^2 + sigma^2)` is `sigma` times it.
    /// `scratch` (as long as `roots`) receives `gamma / root` per quote.
    pub(super) fn outer_derivatives(
        &self,
        p: &OuterPoint,
        roots: &[f64],
        scratch: &mut [f64],
    ) -> ([f64; 2], [[f64; 2]; 2]) {
        let sigma = p.ln_sigma.exp();
        let sigma_sq = sigma * sigma;
        let (a, beta, gamma) = (p.x[0], p.x[1] / sigma, p.x[2] / sigma);
        // sum omega d_inner d_inner^T with d_inner = [1, k - m, root] = [1, sigma y, sigma z]:
        // the inner problem's sums at this point, scaled.
        let [s11, s1y, s1z, syy, syz, szz] = p.normal;
        let mut inner_inner = [
            [s11, sigma * s1y, sigma * s1z],
            [sigma * s1y, sigma_sq * syy, sigma_sq * syz],
            [sigma * s1z, sigma_sq * syz, sigma_sq * szz],
        ];
        let mut inner_outer = [[0.0; 2]; 3];
        let mut outer_outer = [[0.0; 2]; 2];
        let mut gradient = [0.0; 2];
        // The divisions first, in a loop without running sums (as in `solve_faces`).
        for (ratio, z) in scratch.iter_mut().zip(roots) {
            *ratio = gamma / (sigma * z);
        }
        for i in 0..self.k.len().min(roots.len()).min(scratch.len()) {
            let om = self.weight[i];
            if om == 0.0 {
                continue;
            }
            let u = self.k[i] - p.m;
            let root = sigma * roots[i];
            let gamma_over_root = scratch[i];
            let residual = a + beta * u + gamma * root - self.w[i];
            let d_inner = [1.0, u, root];
            let d_outer = [-beta - gamma_over_root * u, gamma_over_root * sigma_sq];
            for r in 0..3 {
                for c in 0..2 {
                    inner_outer[r][c] += om * d_inner[r] * d_outer[c];
                }
            }
            for r in 0..2 {
                outer_outer[r][r] += om * d_outer[r] * d_outer[r];
                gradient[r] += om * residual * d_outer[r];
            }
            outer_outer[0][1] += om * d_outer[0] * d_outer[1];
        }
        outer_outer[1][0] = outer_outer[0][1];
        // The slope prior P [(gamma - beta - left)^2 + (gamma + beta - right)^2].
        inner_inner[1][1] += 2.0 * self.prior.strength;
        inner_inner[2][2] += 2.0 * self.prior.strength;

        let (free, n_free) = self.free_directions(a, beta, gamma);
        let hessian = reduced_hessian(outer_outer, &inner_inner, &inner_outer, &free, n_free);
        (gradient, hessian)
    }

    /// Directions the inner solution `(a, beta, gamma)` can move in without leaving its
    /// face of the box, and how many there are.
    fn free_directions(&self, a: f64, beta: f64, gamma: f64) -> ([[f64; 3]; 3], usize) {
        // Along each single (beta, gamma) constraint: (1, 1) keeps gamma - beta, (1, -1) gamma + beta.
        const ALONG_FACE: [[f64; 3]; 4] = [[0.0, 1.0, 1.0], [0.0, 1.0, -1.0], [0.0, 1.0, -1.0], [0.0, 1.0, 1.0]];
        let cap_tol = 1e-9 * self.slope_cap;
        let a_tol = 1e-9 * self.w_max;
        let a_free = a > a_tol && a < self.w_max - a_tol;
        let on_face = [
            gamma - beta <= cap_tol,
            gamma + beta <= cap_tol,
            self.slope_cap - gamma - beta <= cap_tol,
            self.slope_cap - gamma + beta <= cap_tol,
        ];
        let mut free = [[0.0; 3]; 3];
        let mut n_free = 0;
        if a_free {
            free[n_free] = [1.0, 0.0, 0.0];
            n_free += 1;
        }
        match on_face.iter().filter(|f| **f).count() {
            0 => {
                free[n_free] = [0.0, 1.0, 0.0];
                free[n_free + 1] = [0.0, 0.0, 1.0];
                n_free += 2;
            }
            1 => {
                let face = on_face.iter().position(|f| *f).unwrap_or(0);
                free[n_free] = ALONG_FACE[face];
                n_free += 1;
            }
            _ => {}
        }
        (free, n_free)
    }

    /// Levenberg–Marquardt (J. Soc. Indust. Appl. Math. 11(2) (1963), "An algorithm for
    /// least-squares estimation of nonlinear parameters") on the
    /// reduced cost over `(m, ln sigma)` from `start`, with steps clamped into the
    /// search box. Every accepted step lowers the cost, so the result is never worse
    /// than the start.
    pub(super) fn search_outer(&self, m_range: (f64, f64), start: OuterPoint) -> OuterPoint {
        let mut point = start;
        // sqrt(1 + y^2) per quote at the current point and at the trial point: the
        // derivatives reuse what the inner solve computed.
        let mut roots = vec![0.0; self.k.len()];
        let mut trial_roots = vec![0.0; self.k.len()];
        self.fill_roots(point.m, point.ln_sigma.exp(), &mut roots);
        let mut damping = SVI_OUTER_START_DAMPING;
        let step_scale = [(m_range.1 - m_range.0).max(1e-3), 1.0];
        for _ in 0..SVI_OUTER_MAX_ITERATIONS {
            // The trial point's roots are free until the next trial: scratch for the pass.
            let (gradient, hessian) = self.outer_derivatives(&point, &roots, &mut trial_roots);
            let diag_floor = 1e-12 * hessian[0][0].max(hessian[1][1]).max(1e-300);
            // The stop of the model fit (`levenberg.rs`): when even the undamped step, the
            // most the Gauss–Newton model offers from here, would lower the cost by at most
            // SVI_OUTER_PREDICTED_GAIN_TOL of it, the search ends. With the cost
            // `sum omega r^2` modelled as `cost + 2 g.s + s.H.s` (half gradient `g`,
            // Gauss–Newton matrix `H`), that step solves `H s = -g` and gains `-g.s`.
            // The step `(H + D) s = -g` for a diagonal `D`.
            let step_with = |diagonal: [f64; 2]| {
                let mut matrix = [[0.0; 3]; 3];
                for r in 0..2 {
                    for c in 0..2 {
                        matrix[r][c] = hessian[r][c];
                    }
                    matrix[r][r] += diagonal[r];
                }
                solve_small(2, matrix, [-gradient[0], -gradient[1], 0.0])
            };
            if let Some(step) = step_with([diag_floor; 2]) {
                let predicted_gain = -(gradient[0] * step[0] + gradient[1] * step[1]);
                if predicted_gain >= 0.0 && predicted_gain <= SVI_OUTER_PREDICTED_GAIN_TOL * point.cost {
                    return point;
                }
            }
            let mut accepted = None;
            for _ in 0..SVI_OUTER_MAX_DAMPING_TRIES {
                let damped = [0, 1].map(|r| damping * hessian[r][r].max(diag_floor));
                let Some(step) = step_with(damped) else {
                    damping *= 10.0;
                    continue;
                };
                let trial = self.outer_point(m_range, point.m + step[0], point.ln_sigma + step[1], &mut trial_roots);
                if trial.cost < point.cost {
                    damping = (damping / 3.0).max(1e-12);
                    std::mem::swap(&mut roots, &mut trial_roots);
                    accepted = Some(trial);
                    break;
                }
                damping *= 4.0;
            }
            let Some(trial) = accepted else { return point };
            let gain = point.cost - trial.cost;
            let moved = ((trial.m - point.m) / step_scale[0]).abs().max((trial.ln_sigma - point.ln_sigma).abs());
            point = trial;
            if gain <= SVI_OUTER_COST_REL_TOL * trial.cost || moved <= SVI_OUTER_STEP_TOL {
                break;
            }
        }
        point
    }
}
