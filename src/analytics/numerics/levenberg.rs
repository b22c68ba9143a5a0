//! Levenberg–Marquardt least squares within box bounds, as an argmin solver.
//!
//! argmin (0.11) ships Gauss–Newton with a line search but no damped method and no
//! bounds. Marquardt's damping (J. Soc. Indust. Appl. Math. 11(2), 1963, "An
//! algorithm for least-squares estimation of nonlinear parameters") interpolates
//! between Gauss–Newton and scaled gradient descent. Bounds are handled directly, in
//! the natural parameters, by an active set (the projected Levenberg–Marquardt
//! method; J. Comput. Appl. Math. 172(2), 2004, "Levenberg–Marquardt methods with
//! strong local convergence properties for solving nonlinear equations with convex
//! constraints"): a parameter on a bound whose gradient points out of the box is held
//! there, and a step that would leave the box is cut at the bound, the parameter held
//! and the others re-solved with it (the minimiser of the damped model on that face).
//! A parameter that reaches its bound does so in one step instead of creeping towards
//! it through a map onto the real line. It runs inside argmin's `Executor`, so
//! iteration caps, counts and termination reasons are argmin's.

use argmin::core::{Error, IterState, Jacobian, Operator, Problem, Solver, TerminationReason, TerminationStatus, KV};
use nalgebra::{DMatrix, DVector};

/// The argmin state this solver works on.
pub type LmState = IterState<DVector<f64>, (), DMatrix<f64>, (), (), f64>;

/// Damped Gauss–Newton (Levenberg–Marquardt) with Marquardt's diagonal scaling,
/// within optional box bounds.
#[derive(Debug, Clone)]
pub struct LevenbergMarquardt {
    damping: f64,
    relative_tolerance: f64,
    /// `(lower, upper)` per parameter; unbounded when `None`.
    bounds: Option<(Vec<f64>, Vec<f64>)>,
    /// Residuals at the current point, reused by the next iteration.
    residual: Option<DVector<f64>>,
    /// Set when an iteration met a convergence criterion.
    converged: bool,
}

/// Damping steps tried per iteration before the point is declared a minimum to
/// working precision.
const MAX_DAMPING_TRIES: usize = 30;

/// A final step whose every component is below this times `1 + |x_i|` is taken without
/// evaluating the residuals there: the linear model's error is second order in the step
/// (about 1e-12 relative of the step's own effect), far below any tolerance.
const TINY_STEP: f64 = 1e-6;

impl LevenbergMarquardt {
    /// A solver that stops when an accepted step reduces the sum of squares by less
    /// than `relative_tolerance` of itself, when the undamped step from the current point
    /// is predicted to reduce it by less than that, or when no damping reduces it at all.
    pub fn new(relative_tolerance: f64) -> Self {
        Self { damping: 1e-3, relative_tolerance, bounds: None, residual: None, converged: false }
    }

    /// Keeps every parameter `i` within `[lower[i], upper[i]]` (the start is clamped
    /// into the box first).
    pub fn with_bounds(mut self, lower: Vec<f64>, upper: Vec<f64>) -> Self {
        self.bounds = Some((lower, upper));
        self
    }

    /// The residuals at the last point the solver returned (after a run: at its result).
    /// After a final step small enough to be taken without an evaluation, they are the
    /// linear model's `r + J d`, exact to second order in the step.
    pub fn residual(&self) -> Option<&DVector<f64>> {
        self.residual.as_ref()
    }

    /// `x` clamped into the box.
    fn project(&self, mut x: DVector<f64>) -> DVector<f64> {
        if let Some((lo, hi)) = &self.bounds {
            for i in 0..x.len() {
                x[i] = x[i].clamp(lo[i], hi[i]);
            }
        }
        x
    }

    /// The step `d` minimising the damped model `g.d + d.A.d/2` with the parameters in
    /// `held` kept where they are (`d_i = 0`), then, while the step leaves the box, with
    /// the parameters it takes furthest out also held, at their bound. `None` when the
    /// damped matrix is not positive definite.
    fn bounded_step(
        &self,
        a: &DMatrix<f64>,
        g: &DVector<f64>,
        x: &DVector<f64>,
        held: &mut [bool],
    ) -> Option<DVector<f64>> {
        let n = x.len();
        let mut d = DVector::zeros(n);
        for _ in 0..=n {
            let free: Vec<usize> = (0..n).filter(|&i| !held[i]).collect();
            if free.is_empty() {
                return Some(d);
            }
            // A_ff d_f = -(g_f + A_fh d_h) with the held parameters' steps fixed.
            let m = free.len();
            let sub = DMatrix::from_fn(m, m, |r, c| a[(free[r], free[c])]);
            let rhs = DVector::from_fn(m, |r, _| {
                let i = free[r];
                -(g[i] + (0..n).filter(|&k| held[k]).map(|k| a[(i, k)] * d[k]).sum::<f64>())
            });
            let step = sub.cholesky()?.solve(&rhs);
            for (r, &i) in free.iter().enumerate() {
                d[i] = step[r];
            }
            let Some((lo, hi)) = &self.bounds else {
                return Some(d);
            };
            let mut left = false;
            for &i in &free {
                let target = x[i] + d[i];
                if target < lo[i] || target > hi[i] {
                    d[i] = target.clamp(lo[i], hi[i]) - x[i];
                    held[i] = true;
                    left = true;
                }
            }
            if !left {
                return Some(d);
            }
        }
        Some(d)
    }
}

/// The reduction of the sum of squares `|r|^2` that the linear model `r + J d` predicts for
/// the step `d`: `-(2 g.d + d.(J^T J).d)` with `g = J^T r`.
fn predicted_gain(jtj: &DMatrix<f64>, g: &DVector<f64>, d: &DVector<f64>) -> f64 {
    -(2.0 * g.dot(d) + d.dot(&(jtj * d)))
}

impl<O> Solver<O, LmState> for LevenbergMarquardt
where
    O: Operator<Param = DVector<f64>, Output = DVector<f64>> + Jacobian<Param = DVector<f64>, Jacobian = DMatrix<f64>>,
{
    fn name(&self) -> &str {
        "Levenberg-Marquardt"
    }

    fn init(&mut self, problem: &mut Problem<O>, mut state: LmState) -> Result<(LmState, Option<KV>), Error> {
        let x = state.take_param().ok_or_else(|| Error::msg("Levenberg-Marquardt needs a start"))?;
        let x = self.project(x);
        let r = problem.apply(&x)?;
        let cost = r.norm_squared();
        self.residual = Some(r);
        Ok((state.param(x).cost(cost), None))
    }

    /// One iteration: the undamped step's stopping test, then damped trials. About 90
    /// lines, a third of them the stopping rule's reasoning, kept whole so that the rule
    /// reads in the order it is applied.
    fn next_iter(&mut self, problem: &mut Problem<O>, mut state: LmState) -> Result<(LmState, Option<KV>), Error> {
        let x = state.take_param().ok_or_else(|| Error::msg("Levenberg-Marquardt lost its parameters"))?;
        let r = match self.residual.take() {
            Some(r) => r,
            None => problem.apply(&x)?,
        };
        let cost = r.norm_squared();
        let j = problem.jacobian(&x)?;
        let jt = j.transpose();
        let jtj = &jt * &j;
        let g = &jt * &r;
        let n = x.len();
        let diag_floor = 1e-12 * (0..n).map(|i| jtj[(i, i)]).fold(0.0, f64::max).max(1e-300);
        // Parameters on a bound with the descent direction -g pointing out of the box.
        let on_bound: Vec<bool> = (0..n)
            .map(|i| match &self.bounds {
                Some((lo, hi)) => (x[i] <= lo[i] && g[i] > 0.0) || (x[i] >= hi[i] && g[i] < 0.0),
                None => false,
            })
            .collect();
        let tries = if on_bound.iter().all(|&b| b) { 0 } else { MAX_DAMPING_TRIES };
        // The standard stop before paying for damped trials: when even the undamped
        // (Gauss–Newton) step, the largest gain the linear model offers from here, would
        // reduce the sum of squares by no more than the tolerance, the solve ends. A damped
        // step cannot serve for this test (it is short without being near a minimum), and
        // this close to the minimum a trial's actual gain is rounding, which used to cost
        // a string of rejected trials. The step is still taken, to end at the model's
        // minimum: without an evaluation when it is tiny (the linear model is then exact
        // to far below the tolerance), else after one evaluation that must not raise the
        // sum of squares.
        if tries > 0 {
            let mut a = jtj.clone();
            for i in 0..n {
                a[(i, i)] += diag_floor;
            }
            let mut held = on_bound.clone();
            // Only a step that no bound cut is the model's minimum on the free face (a cut
            // step's predicted gain can even be negative), so only such a step decides.
            let step = self.bounded_step(&a, &g, &x, &mut held).filter(|_| held == on_bound);
            if let Some(step) = step {
                let gain = predicted_gain(&jtj, &g, &step);
                if gain <= self.relative_tolerance * cost {
                    self.converged = true;
                    let trial = self.project(&x + &step);
                    let tiny = step.iter().zip(x.iter()).all(|(d, v)| d.abs() <= TINY_STEP * (1.0 + v.abs()));
                    if tiny && gain > 0.0 {
                        self.residual = Some(&r + &j * &step);
                        return Ok((state.param(trial).cost(cost - gain), None));
                    }
                    let r_trial = problem.apply(&trial)?;
                    let c_trial = r_trial.norm_squared();
                    let state = if c_trial.is_finite() && c_trial < cost {
                        self.residual = Some(r_trial);
                        state.param(trial).cost(c_trial)
                    } else {
                        self.residual = Some(r);
                        state.param(x).cost(cost)
                    };
                    return Ok((state, None));
                }
            }
        }
        for _ in 0..tries {
            let mut a = jtj.clone();
            for i in 0..n {
                a[(i, i)] += self.damping * jtj[(i, i)].max(diag_floor);
            }
            let mut held = on_bound.clone();
            let Some(step) = self.bounded_step(&a, &g, &x, &mut held) else {
                self.damping *= 10.0;
                continue;
            };
            let trial = self.project(&x + &step);
            let r_trial = problem.apply(&trial)?;
            let c_trial = r_trial.norm_squared();
            if c_trial.is_finite() && c_trial < cost {
                self.damping = (self.damping / 3.0).max(1e-12);
                // A damped step is short without being near a minimum, so only the
                // gain in the sum of squares decides convergence.
                self.converged = cost - c_trial <= self.relative_tolerance * cost;
                self.residual = Some(r_trial);
                return Ok((state.param(trial).cost(c_trial), None));
            }
            self.damping *= 4.0;
        }
        // No damping reduces the sum of squares (or every parameter is held at a bound):
        // a minimum to working precision.
        self.converged = true;
        self.residual = Some(r);
        Ok((state.param(x).cost(cost), None))
    }

    fn terminate(&mut self, _state: &LmState) -> TerminationStatus {
        if self.converged {
            TerminationStatus::Terminated(TerminationReason::SolverConverged)
        } else {
            TerminationStatus::NotTerminated
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use argmin::core::{Executor, State};

    /// Rosenbrock as least squares: r = (10 (y - x^2), 1 - x), minimum at (1, 1).
    struct Rosenbrock;

    impl Operator for Rosenbrock {
        type Param = DVector<f64>;
        type Output = DVector<f64>;
        fn apply(&self, p: &Self::Param) -> Result<Self::Output, Error> {
            Ok(DVector::from_vec(vec![10.0 * (p[1] - p[0] * p[0]), 1.0 - p[0]]))
        }
    }

    impl Jacobian for Rosenbrock {
        type Param = DVector<f64>;
        type Jacobian = DMatrix<f64>;
        fn jacobian(&self, p: &Self::Param) -> Result<Self::Jacobian, Error> {
            Ok(DMatrix::from_row_slice(2, 2, &[-20.0 * p[0], 10.0, -1.0, 0.0]))
        }
    }

    /// Runs `solver` on Rosenbrock from the classic start `(-1.2, 1)`; returns the
    /// best point after checking that the solver reports convergence.
    fn run_from_classic_start(solver: LevenbergMarquardt) -> DVector<f64> {
        let res = Executor::new(Rosenbrock, solver)
            .configure(|s| s.param(DVector::from_vec(vec![-1.2, 1.0])).max_iters(200))
            .ctrlc(false)
            .timer(false)
            .run()
            .expect("runs");
        assert_eq!(res.state.get_termination_reason(), Some(&TerminationReason::SolverConverged));
        res.state.get_best_param().expect("param").clone()
    }

    #[test]
    fn solves_rosenbrock_from_the_classic_start() {
        let p = run_from_classic_start(LevenbergMarquardt::new(1e-15));
        // Zero-residual problem: converges to rounding.
        assert!((p[0] - 1.0).abs() < 1e-8 && (p[1] - 1.0).abs() < 1e-8, "{p:?}");
    }

    /// With `x <= 0.5` the minimum lies on the bound: the first residual can be zeroed
    /// for any `x` (`y = x^2`) and the second, `1 - x`, shrinks until `x = 0.5`, so the
    /// answer is `(0.5, 0.25)` by inspection. The bounded parameter ends exactly on its
    /// bound and `y` to rounding.
    #[test]
    fn holds_a_parameter_on_its_bound() {
        let solver = LevenbergMarquardt::new(1e-15).with_bounds(vec![-2.0, -2.0], vec![0.5, 2.0]);
        let p = run_from_classic_start(solver);
        assert!(p[0] <= 0.5 && (p[0] - 0.5).abs() < 1e-15 && (p[1] - 0.25).abs() < 1e-8, "{p:?}");
    }
}
