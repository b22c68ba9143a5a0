//! Levenberg–Marquardt least squares as an argmin solver.
//!
//! argmin (0.11) ships Gauss–Newton with a line search but no damped method, and
//! Gauss–Newton fails where a bounded parameter runs into its bound (the logistic
//! map flattens, the normal matrix turns singular and the undamped step explodes).
//! Marquardt's damping (J. Soc. Indust. Appl. Math. 11(2), 1963, "An algorithm for
//! least-squares estimation of nonlinear parameters") interpolates between
//! Gauss–Newton and scaled gradient descent and handles that case. It runs inside
//! argmin's `Executor`, so iteration caps, counts and termination reasons are argmin's.

use argmin::core::{
    Error, IterState, Jacobian, Operator, Problem, Solver, State, TerminationReason, TerminationStatus, KV,
};
use nalgebra::{DMatrix, DVector};

/// The argmin state this solver works on.
pub type LmState = IterState<DVector<f64>, (), DMatrix<f64>, (), (), f64>;

/// Damped Gauss–Newton (Levenberg–Marquardt) with Marquardt's diagonal scaling.
#[derive(Debug, Clone)]
pub struct LevenbergMarquardt {
    damping: f64,
    relative_tolerance: f64,
    /// Residuals at the current point, reused by the next iteration.
    residual: Option<DVector<f64>>,
    /// Set when an iteration met a convergence criterion.
    converged: bool,
}

/// Damping steps tried per iteration before the point is declared a minimum to
/// working precision.
const MAX_DAMPING_TRIES: usize = 30;

impl LevenbergMarquardt {
    /// A solver that stops when an accepted step reduces the sum of squares by less
    /// than `relative_tolerance` of itself, or when no damping reduces it at all.
    pub fn new(relative_tolerance: f64) -> Self {
        Self { damping: 1e-3, relative_tolerance, residual: None, converged: false }
    }
}

impl<O> Solver<O, LmState> for LevenbergMarquardt
where
    O: Operator<Param = DVector<f64>, Output = DVector<f64>> + Jacobian<Param = DVector<f64>, Jacobian = DMatrix<f64>>,
{
    fn name(&self) -> &str {
        "Levenberg-Marquardt"
    }

    fn init(&mut self, problem: &mut Problem<O>, state: LmState) -> Result<(LmState, Option<KV>), Error> {
        let x = state.get_param().cloned().ok_or_else(|| Error::msg("Levenberg-Marquardt needs a start"))?;
        let r = problem.apply(&x)?;
        let cost = r.norm_squared();
        self.residual = Some(r);
        Ok((state.cost(cost), None))
    }

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
        for _ in 0..MAX_DAMPING_TRIES {
            let mut a = jtj.clone();
            for i in 0..n {
                a[(i, i)] += self.damping * jtj[(i, i)].max(diag_floor);
            }
            let Some(chol) = a.cholesky() else {
                self.damping *= 10.0;
                continue;
            };
            let step = -chol.solve(&g);
            let trial = &x + &step;
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
        // No damping reduces the sum of squares: a minimum to working precision.
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
    use argmin::core::Executor;

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

    #[test]
    fn solves_rosenbrock_from_the_classic_start() {
        let res = Executor::new(Rosenbrock, LevenbergMarquardt::new(1e-15))
            .configure(|s| s.param(DVector::from_vec(vec![-1.2, 1.0])).max_iters(200))
            .ctrlc(false)
            .timer(false)
            .run()
            .expect("runs");
        let p = res.state.get_best_param().expect("param");
        // Zero-residual problem: converges to rounding.
        assert!((p[0] - 1.0).abs() < 1e-8 && (p[1] - 1.0).abs() < 1e-8, "{p:?}");
        assert_eq!(res.state.get_termination_reason(), Some(&TerminationReason::SolverConverged));
    }
}
