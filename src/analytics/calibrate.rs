//! Calibration of rough Heston or classical Heston to a leverage swap term
//! structure (MATH.md section 7), and the volatility-swap convexity a fitted model
//! implies once a vol-of-vol is supplied.
//!
//! The free parameters are fitted in their natural units by Levenberg–Marquardt with
//! the bounds handled directly (an active set, [`super::numerics::levenberg`]), running in
//! argmin's executor and started from the best point of a small grid. MATH.md
//! section 7 suggests mapping the bounds to the real line; we do not: the demo
//! snapshot's mean reversion sits on its zero bound, and through a logistic map the
//! solver spent most of its iterations creeping towards it (8 iterations against 5
//! here, same cost to 1e-14 relative; `tests/calibration_recovery.rs` checks both
//! interior and bound solutions). If the model cannot be evaluated along the way,
//! argmin's Nelder–Mead takes over, on the cost at the point clamped into the box.
//! The outcome is data: status, iterations, evaluations, residual and active bounds.

use super::models::leverage::{LeverageCurve, LeverageParams, ModelError};
use super::numerics::levenberg::LevenbergMarquardt;
use super::numerics::quadrature::{integrate, QuadratureTolerance};
use super::special::mittag_leffler::MittagLefflerSeries;
use super::tolerances::{
    ACTIVE_BOUND_FRACTION, CALIBRATION_COST_REL_TOL, CALIBRATION_MAX_EVALUATIONS, CALIBRATION_MAX_ITERATIONS,
    CALIBRATION_TIME_BUDGET_MS,
};
use argmin::core::{CostFunction, Error as ArgminError, Executor, Jacobian, Operator, State, TerminationReason};
use argmin::solver::neldermead::NelderMead;
use nalgebra::{DMatrix, DVector};
use std::cell::{Cell, RefCell};
use std::time::{Duration, Instant};

/// Which affine forward-variance model to fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ModelKind {
    /// Rough Heston: Hurst exponent, `rho nu` and mean reversion.
    RoughHeston,
    /// Classical Heston: `rho nu` and mean reversion (Hurst exponent 1/2).
    Heston,
}

/// The three parameters by name, for reporting which are fixed or at a bound.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ParamName {
    /// Hurst exponent `H`.
    Hurst,
    /// `c = rho * nu`.
    RhoNu,
    /// Mean reversion `lambda`.
    MeanReversion,
}

impl ParamName {
    /// The name used in inputs and outputs.
    pub fn as_str(&self) -> &'static str {
        match self {
            Self::Hurst => "hurst",
            Self::RhoNu => "rho_nu",
            Self::MeanReversion => "mean_reversion",
        }
    }

    const ALL: [ParamName; 3] = [ParamName::Hurst, ParamName::RhoNu, ParamName::MeanReversion];

    /// Position in `ALL` (and in `[hurst, rho_nu, mean_reversion]` arrays).
    fn index(self) -> usize {
        match self {
            Self::Hurst => 0,
            Self::RhoNu => 1,
            Self::MeanReversion => 2,
        }
    }

    /// Search bounds (MATH.md section 7).
    pub fn bounds(&self) -> (f64, f64) {
        match self {
            Self::Hurst => (0.01, 0.5),
            Self::RhoNu => (-5.0, 0.5),
            Self::MeanReversion => (0.0, 20.0),
        }
    }
}

/// What to fit: the model, the parameters held fixed, and optionally the
/// vol-of-vol `nu` for the convexity report.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct FitSpec {
    /// The model.
    pub model: Option<ModelKind>,
    /// Fixed Hurst exponent.
    pub hurst: Option<f64>,
    /// Fixed `rho nu`.
    pub rho_nu: Option<f64>,
    /// Fixed mean reversion.
    pub mean_reversion: Option<f64>,
    /// Vol-of-vol `nu` (not identified by leverage swaps; supplied by the user).
    pub nu: Option<f64>,
    /// Model evaluations allowed ([`CALIBRATION_MAX_EVALUATIONS`] when `None`).
    pub max_evaluations: Option<u64>,
    /// Wall time allowed ([`CALIBRATION_TIME_BUDGET_MS`] when `None`).
    pub time_budget: Option<Duration>,
}

/// Market leverage term structure to fit.
#[derive(Debug, Clone, PartialEq)]
pub struct LeverageTarget {
    /// Expiries (years), strictly increasing.
    pub taus: Vec<f64>,
    /// Variance swap levels (annualised variance) per expiry.
    pub variance_swap: Vec<f64>,
    /// Leverage swap levels (annualised variance) per expiry.
    pub leverage_swap: Vec<f64>,
    /// One-standard-deviation uncertainty of each leverage swap level, when known.
    pub uncertainty: Option<Vec<f64>>,
}

/// How a fit ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FitStatus {
    /// The solver met its convergence criterion inside the bounds (a Hurst exponent
    /// that reached 1/2 counts as inside: that is the classical Heston model, reported
    /// in [`FitOutcome::selected_model`]).
    Converged,
    /// The solver met its convergence criterion with parameters on their bounds
    /// ([`FitOutcome::active_bounds`] names them): the best fit the bounds allow, which
    /// the data may want beyond them.
    AtBound,
    /// The iteration cap was reached first.
    MaxIterations,
    /// The evaluation or time budget ran out first (the message says which); the
    /// parameters are the best point reached.
    BudgetExhausted,
    /// No usable fit (too few expiries, or the model could not be evaluated).
    Failed,
}

/// An expiry that counts for much less than a typical one in the fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DownWeighted {
    /// Expiry (years).
    pub tau: f64,
    /// Its weight in the loss relative to an expiry of median uncertainty that fits:
    /// the robust loss's weight times `(median se / se)^2`, at most 1.
    pub weight: f64,
    /// Why.
    pub reason: DownWeightReason,
}

/// Why an expiry counts for less.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum DownWeightReason {
    /// Its leverage swap missed the model by more than the robust loss's cut, enough
    /// for a weight below [`ROBUST_REPORT_WEIGHT`].
    RobustLoss,
    /// Its leverage swap's standard error is large (weight below
    /// [`LARGE_SE_WEIGHT`] from the standard error alone).
    LargeStandardError,
}

/// Robust-loss weight below which an expiry is reported as down-weighted. Rule of
/// thumb (no source): on clean generated snapshots the near-perfect fits' tiny
/// residual spread put the shortest expiries at weights 0.42 to 0.86 without anything
/// wrong with them, while broken neighbours fell to 0.01 to 0.4; a half separates most
/// of both, and the loss applies every weight whether reported or not.
pub const ROBUST_REPORT_WEIGHT: f64 = 0.5;

/// Relative weight from the standard error below which an expiry is reported as
/// down-weighted: a standard error above 10 times the median. Rule of thumb (no
/// source): on the generated clean smiles the wing part alone puts the longest
/// expiries' standard errors at 3 to 9 times the median, and a broken expiry's
/// (a +-2.5 vol pt sawtooth) at 15 to 150 times.
pub const LARGE_SE_WEIGHT: f64 = 0.01;

/// Volatility-swap convexity at one expiry (needs `nu`).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ConvexityPoint {
    /// Expiry (years).
    pub tau: f64,
    /// Standard deviation of annualised realized variance.
    pub realized_variance_stdev: f64,
    /// Volatility swap fair strike `E[sqrt(RV)]`, annualised vol.
    pub volatility_swap: f64,
    /// `sqrt(VS) - volatility_swap`.
    pub convexity_adjustment: f64,
}

/// The outcome of a fit.
#[derive(Debug, Clone, PartialEq)]
pub struct FitOutcome {
    /// The model fitted.
    pub model: ModelKind,
    /// Fitted (or fixed) parameters.
    pub params: LeverageParams,
    /// Parameters held fixed.
    pub fixed: Vec<ParamName>,
    /// How it ended.
    pub status: FitStatus,
    /// Why, when not converged, or which fallback was used.
    pub message: Option<String>,
    /// Solver iterations.
    pub iterations: u64,
    /// Model evaluations (grid, solver and line search).
    pub evaluations: u64,
    /// Root-mean-square distance between model and market leverage swap levels.
    pub leverage_rmse: f64,
    /// Model leverage swap level per expiry (annualised variance).
    pub model_leverage_swap: Vec<f64>,
    /// Parameters that ended at a bound of their range.
    pub active_bounds: Vec<ParamName>,
    /// The model the fit ended in: [`ModelKind::Heston`] when a rough Heston fit's
    /// Hurst exponent reached 1/2.
    pub selected_model: ModelKind,
    /// Expiries that count for much less than a typical one in the fit.
    pub down_weighted: Vec<DownWeighted>,
    /// Wall time of the fit, microseconds.
    pub elapsed_us: u64,
    /// `rho = c / nu`, when `nu` was supplied.
    pub rho: Option<f64>,
    /// Volatility-swap convexity per expiry, when `nu` was supplied.
    pub convexity: Option<Vec<ConvexityPoint>>,
}

/// Expiries used to score the starting grid.
const GRID_EXPIRIES: usize = 6;

/// Which parameters are free and the values of the fixed ones. The solver works on
/// the free parameters themselves (natural units), within their bounds.
#[derive(Debug, Clone)]
struct Layout {
    /// Value per parameter: `None` when free.
    fixed: [Option<f64>; 3],
    free: Vec<ParamName>,
    /// Search bounds per parameter: [`ParamName::bounds`], with `rho_nu` held to
    /// `[-nu, nu]` when `nu` is given (so that `rho` stays a correlation).
    limits: [(f64, f64); 3],
}

impl Layout {
    /// Search bounds of `name`.
    fn limit(&self, name: ParamName) -> (f64, f64) {
        self.limits[name.index()]
    }

    /// The full parameter set from the free values `x` (in the order of `free`).
    fn to_params(&self, x: &[f64]) -> LeverageParams {
        let mut all = [0.0; 3];
        let mut next = x.iter();
        for (i, v) in all.iter_mut().enumerate() {
            *v = match self.fixed[i] {
                Some(v) => v,
                None => next.next().copied().unwrap_or(f64::NAN),
            };
        }
        LeverageParams { hurst: all[0], rho_nu: all[1], mean_reversion: all[2] }
    }

    /// The free values of `p`.
    fn to_free(&self, p: &LeverageParams) -> Vec<f64> {
        let x = [p.hurst, p.rho_nu, p.mean_reversion];
        self.free.iter().map(|name| x[name.index()]).collect()
    }

    /// Lower and upper bounds of the free parameters.
    fn bounds(&self) -> (Vec<f64>, Vec<f64>) {
        self.free.iter().map(|name| self.limit(*name)).unzip()
    }

    /// `x` clamped into the bounds.
    fn project(&self, x: &[f64]) -> Vec<f64> {
        x.iter()
            .zip(&self.free)
            .map(|(v, name)| {
                let (lo, hi) = self.limit(*name);
                v.clamp(lo, hi)
            })
            .collect()
    }
}

/// The least-squares problem handed to argmin (references only, so it is `Copy`).
#[derive(Clone, Copy)]
struct LeverageProblem<'a> {
    curve: &'a LeverageCurve,
    market_total: &'a [f64],
    /// Residual scale per expiry: `1 / (T_i * sigma_i)`.
    scale: &'a [f64],
    layout: &'a Layout,
    evaluations: &'a Cell<u64>,
    /// Residuals only rank start points: the model to about 1e-9 relative is enough.
    for_start: bool,
    /// What the solver may spend, and the best point seen (`None` for the start grid).
    budget: Option<&'a Budget>,
}

/// A fit's evaluation and time budget, and the best point its solver evaluated (to
/// return when the budget runs out mid-run).
struct Budget {
    max_evaluations: u64,
    deadline: Instant,
    /// Why it ran out, once it has.
    exhausted: Cell<Option<&'static str>>,
    /// Cost (unweighted residuals' sum of squares) and free parameters of the best
    /// point evaluated.
    best: RefCell<Option<(f64, Vec<f64>)>>,
}

impl Budget {
    /// `Err` once the budget has run out (and from then on).
    fn spend(&self, evaluations: u64) -> Result<(), ArgminError> {
        if self.exhausted.get().is_none() {
            if evaluations >= self.max_evaluations {
                self.exhausted.set(Some("evaluation"));
            } else if Instant::now() > self.deadline {
                self.exhausted.set(Some("time"));
            }
        }
        match self.exhausted.get() {
            Some(what) => Err(ArgminError::msg(format!("{what} budget exhausted"))),
            None => Ok(()),
        }
    }

    fn record(&self, x: &[f64], cost: f64) {
        let mut best = self.best.borrow_mut();
        if cost.is_finite() && best.as_ref().is_none_or(|(c, _)| cost < *c) {
            *best = Some((cost, x.to_vec()));
        }
    }
}

impl LeverageProblem<'_> {
    /// Residuals at `x` for the solver: counted against the budget, and the point kept
    /// if it is the best so far.
    fn budgeted_residuals(&self, x: &[f64]) -> Result<Vec<f64>, ArgminError> {
        if let Some(budget) = self.budget {
            budget.spend(self.evaluations.get())?;
        }
        let r = self.residuals(x).map_err(|e| ArgminError::msg(e.to_string()))?;
        if let Some(budget) = self.budget {
            budget.record(x, r.iter().map(|v| v * v).sum());
        }
        Ok(r)
    }

    fn residuals(&self, x: &[f64]) -> Result<Vec<f64>, ModelError> {
        self.evaluations.set(self.evaluations.get() + 1);
        let p = self.layout.to_params(x);
        let model =
            if self.for_start { self.curve.total_leverage_for_start(&p)? } else { self.curve.total_leverage(&p)? };
        Ok(model.iter().zip(self.market_total).zip(self.scale).map(|((m, t), s)| (m - t) * s).collect())
    }
}

impl Operator for LeverageProblem<'_> {
    type Param = DVector<f64>;
    type Output = DVector<f64>;

    fn apply(&self, u: &Self::Param) -> Result<Self::Output, ArgminError> {
        Ok(DVector::from_vec(self.budgeted_residuals(u.as_slice())?))
    }
}

impl Jacobian for LeverageProblem<'_> {
    type Param = DVector<f64>;
    type Jacobian = DMatrix<f64>;

    fn jacobian(&self, x: &Self::Param) -> Result<Self::Jacobian, ArgminError> {
        if let Some(budget) = self.budget {
            budget.spend(self.evaluations.get())?;
        }
        self.evaluations.set(self.evaluations.get() + 1);
        let p = self.layout.to_params(x.as_slice());
        let lg = self.curve.total_leverage_with_gradient(&p).map_err(|e| ArgminError::msg(e.to_string()))?;
        let n = lg.total.len();
        let free = &self.layout.free;
        Ok(DMatrix::from_fn(n, free.len(), |i, j| lg.gradient[i][free[j].index()] * self.scale[i]))
    }
}

impl CostFunction for LeverageProblem<'_> {
    type Param = Vec<f64>;
    type Output = f64;

    /// The sum of squares at `x` clamped into the bounds (Nelder–Mead has no bounds of
    /// its own; outside the box it sees the cost of the nearest point inside).
    fn cost(&self, x: &Self::Param) -> Result<f64, ArgminError> {
        let r = self.budgeted_residuals(&self.layout.project(x))?;
        Ok(r.iter().map(|x| x * x).sum())
    }
}

/// Fits the model in `spec` to the leverage term structure.
///
/// Never fails: a fit that cannot be done is reported with [`FitStatus::Failed`]
/// and a message.
pub fn fit_leverage(target: &LeverageTarget, spec: &FitSpec) -> FitOutcome {
    let started = Instant::now();
    let setup = FitSetup::new(spec);
    let nan_params = LeverageParams {
        // The held Hurst exponent: the caller's, or 1/2 of classical Heston.
        hurst: setup.layout.fixed[ParamName::Hurst.index()].unwrap_or(f64::NAN),
        rho_nu: spec.rho_nu.unwrap_or(f64::NAN),
        mean_reversion: spec.mean_reversion.unwrap_or(f64::NAN),
    };
    let failed = |message: String, params: LeverageParams| setup.failed(message, params, started);
    if let Err(message) = setup.check_fixed(spec) {
        return failed(message, nan_params);
    }
    let n = target.taus.len();
    if n < setup.layout.free.len().max(1) {
        let free = setup.layout.free.len();
        return failed(format!("{free} free parameter(s) need at least as many expiries, got {n}"), nan_params);
    }
    let xi = match forward_variances(&target.taus, &target.variance_swap) {
        Some(xi) => xi,
        None => return failed("expiries must be positive and strictly increasing".into(), nan_params),
    };
    let curve = match LeverageCurve::new(&target.taus, &xi) {
        Ok(c) => c,
        Err(e) => return failed(e.to_string(), nan_params),
    };
    let market_total: Vec<f64> = target.taus.iter().zip(&target.leverage_swap).map(|(t, l)| t * l).collect();
    let residual_scales = ResidualScales::new(target);
    let scale = &residual_scales.scale;
    let evaluations = Cell::new(0u64);
    let budget = Budget {
        max_evaluations: spec.max_evaluations.unwrap_or(CALIBRATION_MAX_EVALUATIONS),
        deadline: started + spec.time_budget.unwrap_or(Duration::from_millis(CALIBRATION_TIME_BUDGET_MS)),
        exhausted: Cell::new(None),
        best: RefCell::new(None),
    };
    let problem = LeverageProblem {
        curve: &curve,
        market_total: &market_total,
        scale,
        layout: &setup.layout,
        evaluations: &evaluations,
        for_start: false,
        budget: Some(&budget),
    };
    let (start, grid_evaluations) = grid_start(target, &market_total, &problem);
    let Some(start) = start else {
        return failed("the model could not be evaluated at any starting point".into(), nan_params);
    };
    let x0 = setup.layout.to_free(&start);
    let (run, iterations, weights) = robust_rounds(&problem, &budget, &x0, &residual_scales);
    let SolveRun { x: x_best, status, message, residual: residual_best, .. } = run;
    let params = setup.layout.to_params(&x_best);
    // The solver's residuals at its result give the model values without another
    // evaluation (after a final step taken on the linear model there is none cached).
    let model_total = match residual_best {
        Some(r) if r.len() == n => r.iter().zip(&market_total).zip(scale).map(|((r, t), s)| t + r / s).collect(),
        _ => match curve.total_leverage(&params) {
            Ok(m) => m,
            Err(e) => return failed(e.to_string(), params),
        },
    };
    let model_leverage_swap: Vec<f64> = model_total.iter().zip(&target.taus).map(|(l, t)| l / t).collect();
    let leverage_rmse =
        (model_leverage_swap.iter().zip(&target.leverage_swap).map(|(m, l)| (m - l).powi(2)).sum::<f64>() / n as f64)
            .sqrt();
    let ending = setup.bound_report(&params, status, message);
    let (rho, convexity) = match setup.nu {
        Some(nu) => (Some(params.rho_nu / nu), convexity(&curve, &target.variance_swap, &params, nu)),
        None => (None, None),
    };
    FitOutcome {
        model: setup.model,
        params,
        fixed: setup.fixed.clone(),
        status: ending.status,
        message: ending.message,
        iterations,
        evaluations: evaluations.get() + grid_evaluations,
        leverage_rmse,
        model_leverage_swap,
        active_bounds: ending.active_bounds,
        selected_model: if ending.heston_selected { ModelKind::Heston } else { setup.model },
        down_weighted: residual_scales.down_weighted(&target.taus, &weights),
        elapsed_us: started.elapsed().as_micros() as u64,
        rho,
        convexity,
    }
}

/// What a fit specification fixes before any data is seen: the model, which
/// parameters are free, their bounds, and `nu` when given.
struct FitSetup {
    model: ModelKind,
    /// The parameters the caller fixed (reported as such; not Heston's Hurst exponent).
    fixed: Vec<ParamName>,
    nu: Option<f64>,
    layout: Layout,
}

impl FitSetup {
    fn new(spec: &FitSpec) -> Self {
        let model = spec.model.unwrap_or(ModelKind::RoughHeston);
        let hurst_fixed = match model {
            ModelKind::Heston => Some(0.5),
            ModelKind::RoughHeston => spec.hurst,
        };
        let fixed_values = [hurst_fixed, spec.rho_nu, spec.mean_reversion];
        let free: Vec<ParamName> =
            ParamName::ALL.iter().zip(fixed_values).filter(|(_, v)| v.is_none()).map(|(n, _)| *n).collect();
        let fixed: Vec<ParamName> = ParamName::ALL
            .iter()
            .zip([spec.hurst, spec.rho_nu, spec.mean_reversion])
            .filter(|(n, v)| v.is_some() && !(model == ModelKind::Heston && **n == ParamName::Hurst))
            .map(|(n, _)| *n)
            .collect();
        let nu = spec.nu.filter(|nu| nu.is_finite() && *nu > 0.0);
        let mut limits = ParamName::ALL.map(|name| name.bounds());
        if let Some(nu) = nu {
            let (lo, hi) = limits[ParamName::RhoNu.index()];
            limits[ParamName::RhoNu.index()] = (lo.max(-nu), hi.min(nu));
        }
        Self { model, fixed, nu, layout: Layout { fixed: fixed_values, free, limits } }
    }

    /// Fixed parameters must lie in the same bounds as free ones: the model is only
    /// evaluated (and its cost only bounded) there. The input documents check this
    /// first; a library caller gets a failed fit naming the parameter. (Fuzzing reached
    /// the model with a fixed mean reversion of 442, `tests/regressions.rs`.)
    fn check_fixed(&self, spec: &FitSpec) -> Result<(), String> {
        for (name, value) in ParamName::ALL.iter().zip([spec.hurst, spec.rho_nu, spec.mean_reversion]) {
            if let (Some(v), false) = (value, self.model == ModelKind::Heston && *name == ParamName::Hurst) {
                let (lo, hi) = name.bounds();
                if !(v >= lo && v <= hi) {
                    return Err(format!("fixed {} must lie in [{lo}, {hi}], got {v}", name.as_str()));
                }
            }
        }
        if let (Some(nu), Some(c)) = (self.nu, spec.rho_nu) {
            if c.abs() > nu {
                return Err(format!("fixed rho_nu {c} with nu {nu} gives a correlation {} outside [-1, 1]", c / nu));
            }
        }
        Ok(())
    }

    /// The outcome of a fit that could not run.
    fn failed(&self, message: String, params: LeverageParams, started: Instant) -> FitOutcome {
        FitOutcome {
            model: self.model,
            params,
            fixed: self.fixed.clone(),
            status: FitStatus::Failed,
            message: Some(message),
            iterations: 0,
            evaluations: 0,
            leverage_rmse: f64::NAN,
            model_leverage_swap: Vec::new(),
            active_bounds: Vec::new(),
            selected_model: self.model,
            down_weighted: Vec::new(),
            elapsed_us: started.elapsed().as_micros() as u64,
            rho: None,
            convexity: None,
        }
    }

    /// Which free parameters ended on a bound, and the status and message that say so:
    /// a converged fit with a parameter held by its bound is [`FitStatus::AtBound`],
    /// except the Hurst exponent at 1/2, which selects the classical Heston model.
    fn bound_report(&self, params: &LeverageParams, status: FitStatus, message: Option<String>) -> BoundReport {
        let (layout, free) = (&self.layout, &self.layout.free);
        let (mut status, mut message) = (status, message);
        let x = [params.hurst, params.rho_nu, params.mean_reversion];
        let at = |name: ParamName| {
            let (lo, hi) = layout.limit(name);
            let margin = ACTIVE_BOUND_FRACTION * (hi - lo);
            let v = x[name.index()];
            (v <= lo + margin, v >= hi - margin)
        };
        let active_bounds: Vec<ParamName> = free.iter().filter(|name| at(**name) != (false, false)).cloned().collect();
        // H = 1/2 is the classical Heston model: a model choice, not a parameter held back.
        let heston_selected =
            self.model == ModelKind::RoughHeston && free.contains(&ParamName::Hurst) && at(ParamName::Hurst).1;
        let held: Vec<ParamName> =
            active_bounds.iter().filter(|name| !(heston_selected && **name == ParamName::Hurst)).cloned().collect();
        if status == FitStatus::Converged && !held.is_empty() {
            status = FitStatus::AtBound;
            let names: Vec<String> = held
                .iter()
                .map(|name| {
                    let (lo, hi) = layout.limit(*name);
                    let bound = if at(*name).0 { lo } else { hi };
                    let why =
                        if *name == ParamName::RhoNu && self.nu.is_some() { " (|rho| = 1 at this nu)" } else { "" };
                    format!("{} at {bound}{why}", name.as_str())
                })
                .collect();
            message = Some(format!("converged with {} on its bound", names.join(" and ")));
        }
        if heston_selected {
            let note = "the Hurst exponent reached 1/2: the classical Heston model describes these leverage swaps best";
            message = Some(match message {
                Some(m) => format!("{m}; {note}"),
                None => note.to_string(),
            });
        }
        BoundReport { status, message, active_bounds, heston_selected }
    }
}

/// How a fit ended with respect to its bounds (see [`FitSetup::bound_report`]).
struct BoundReport {
    status: FitStatus,
    message: Option<String>,
    active_bounds: Vec<ParamName>,
    heston_selected: bool,
}

/// Each expiry's residual scale `1 / (T_i sigma_i)`, with `sigma_i` the expiry's
/// standard error relative to the median one, times the levels' root mean square.
struct ResidualScales {
    rms: f64,
    /// `sigma_i` per expiry.
    sigma: Vec<f64>,
    scale: Vec<f64>,
    /// One standard error in residual units (0 without standard errors).
    sigma_unit: f64,
}

impl ResidualScales {
    fn new(target: &LeverageTarget) -> Self {
        let n = target.taus.len();
        let rms = (target.leverage_swap.iter().map(|l| l * l).sum::<f64>() / n as f64).sqrt().max(1e-6);
        // Uncertainties are used only when every expiry has a finite positive one.
        let uncertainty =
            target.uncertainty.as_ref().filter(|u| u.len() == n && u.iter().all(|x| x.is_finite() && *x > 0.0));
        let sigma: Vec<f64> = match uncertainty {
            Some(u) => {
                let med = super::numerics::stats::median(u).unwrap_or(1.0);
                u.iter().map(|x| x / med * rms).collect()
            }
            None => vec![rms; n],
        };
        let scale: Vec<f64> = target.taus.iter().zip(&sigma).map(|(t, s)| 1.0 / (t * s)).collect();
        // One standard error in residual units (residuals are in units of `rms` scaled by
        // each expiry's uncertainty over their median).
        let sigma_unit = uncertainty.map_or(0.0, |u| super::numerics::stats::median(u).unwrap_or(0.0) / rms);
        Self { rms, sigma, scale, sigma_unit }
    }

    /// Expiries that count for much less than a typical one: by the robust loss's
    /// weight or by a large standard error.
    fn down_weighted(&self, taus: &[f64], weights: &[f64]) -> Vec<DownWeighted> {
        (0..taus.len())
            .filter_map(|i| {
                let from_se = (self.rms / self.sigma[i]).powi(2).min(1.0);
                let reason = if weights[i] < ROBUST_REPORT_WEIGHT {
                    DownWeightReason::RobustLoss
                } else if from_se < LARGE_SE_WEIGHT {
                    DownWeightReason::LargeStandardError
                } else {
                    return None;
                };
                Some(DownWeighted { tau: taus[i], weight: weights[i] * from_se, reason })
            })
            .collect()
    }
}

/// The best point of a small grid over the free parameters, scored on at most
/// `GRID_EXPIRIES` expiries spread over the curve (the start only needs to be in
/// the right basin; the solver then uses every expiry), and the evaluations it took.
/// One mean reversion only: with the bounds handled in the solver, a second value
/// (1.0) changed no outcome on 48 synthetic curves (H 0.05-0.45, rho_nu -0.2 to -3,
/// mean reversion 0-10; all recovered to 1e-6) and saved 2% of the iterations (549
/// against 559), for twice the grid.
fn grid_start(
    target: &LeverageTarget,
    market_total: &[f64],
    problem: &LeverageProblem<'_>,
) -> (Option<LeverageParams>, u64) {
    let (layout, scale, n) = (problem.layout, problem.scale, target.taus.len());
    let picks: Vec<usize> = if n <= GRID_EXPIRIES {
        (0..n).collect()
    } else {
        let mut v: Vec<usize> = (0..GRID_EXPIRIES).map(|i| i * (n - 1) / (GRID_EXPIRIES - 1)).collect();
        v.dedup();
        v
    };
    let sub_taus: Vec<f64> = picks.iter().map(|&i| target.taus[i]).collect();
    let sub_vs: Vec<f64> = picks.iter().map(|&i| target.variance_swap[i]).collect();
    let sub_curve = forward_variances(&sub_taus, &sub_vs).and_then(|xi| LeverageCurve::new(&sub_taus, &xi).ok());
    let sub_market: Vec<f64> = picks.iter().map(|&i| market_total[i]).collect();
    let sub_scale: Vec<f64> = picks.iter().map(|&i| scale[i]).collect();
    let sub_evaluations = Cell::new(0u64);
    let grid_problem = match &sub_curve {
        Some(c) => LeverageProblem {
            curve: c,
            market_total: &sub_market,
            scale: &sub_scale,
            layout,
            evaluations: &sub_evaluations,
            for_start: true,
            budget: None,
        },
        None => LeverageProblem { for_start: true, budget: None, ..*problem },
    };
    let grid = |name: ParamName, fixed: Option<f64>| -> Vec<f64> {
        match fixed {
            Some(v) => vec![v],
            None => match name {
                ParamName::Hurst => vec![0.05, 0.15, 0.3, 0.45],
                ParamName::RhoNu => {
                    let (lo, hi) = layout.limit(ParamName::RhoNu);
                    vec![(-0.3f64).clamp(lo, hi), (-1.0f64).clamp(lo, hi)]
                }
                ParamName::MeanReversion => vec![0.1],
            },
        }
    };
    let mut best: Option<(f64, LeverageParams)> = None;
    for h in grid(ParamName::Hurst, layout.fixed[0]) {
        for c in grid(ParamName::RhoNu, layout.fixed[1]) {
            for l in grid(ParamName::MeanReversion, layout.fixed[2]) {
                let p = LeverageParams { hurst: h, rho_nu: c, mean_reversion: l };
                if let Ok(r) = grid_problem.residuals(&layout.to_free(&p)) {
                    let cost: f64 = r.iter().map(|x| x * x).sum();
                    if cost.is_finite() && best.as_ref().is_none_or(|b| cost < b.0) {
                        best = Some((cost, p));
                    }
                }
            }
        }
    }
    (best.map(|(_, p)| p), sub_evaluations.get())
}

/// The fit proper from `x0`, then rounds of Huber reweighting (robust loss by
/// iteratively reweighted least squares), each started from the last point. Returns
/// the last run, the iterations of all runs and the final weights.
fn robust_rounds(
    problem: &LeverageProblem<'_>,
    budget: &Budget,
    x0: &[f64],
    scales: &ResidualScales,
) -> (SolveRun, u64, Vec<f64>) {
    let n = problem.market_total.len();
    let mut run = solve(problem, x0);
    let mut iterations = run.iterations;
    let mut weights = vec![1.0; n];
    for _ in 0..ROBUST_FIT_ROUNDS {
        if run.status != FitStatus::Converged {
            break;
        }
        let params = problem.layout.to_params(&run.x);
        let Ok(model_total) = problem.curve.total_leverage(&params) else { break };
        let residual: Vec<f64> =
            model_total.iter().zip(problem.market_total).zip(&scales.scale).map(|((m, t), s)| (m - t) * s).collect();
        let next = huber_weights(&residual, scales.sigma_unit);
        if next.iter().zip(&weights).all(|(a, b)| (a - b).abs() < ROBUST_FIT_SETTLED) {
            break;
        }
        weights = next;
        let robust_scale: Vec<f64> = scales.scale.iter().zip(&weights).map(|(s, w)| s * w.sqrt()).collect();
        // The best point of a round is judged by that round's weights.
        budget.best.replace(None);
        let robust = LeverageProblem { scale: &robust_scale, ..*problem };
        let again = solve(&robust, &run.x);
        iterations += again.iterations;
        run = SolveRun { residual: None, ..again };
    }
    (run, iterations, weights)
}

/// Rounds of Huber reweighting after the first fit (two settle the weights on the
/// generated sets with a broken expiry; the cap bounds the cost).
const ROBUST_FIT_ROUNDS: usize = 3;

/// Largest change of any expiry's weight at which the reweighting has settled.
const ROBUST_FIT_SETTLED: f64 = 0.05;

/// The Huber loss's tuning constant: 95% efficiency at normal errors (Ann. Math.
/// Statist. 35(1) (1964), "Robust estimation of a location parameter").
const HUBER_K: f64 = 1.345;

/// Huber weights `min(1, k s / |r|)` of residuals `r`, with `s` the larger of their
/// robust spread (1.4826 times the median absolute deviation, which is the standard
/// deviation for normal errors) and `floor` (one standard error in residual units when
/// the levels carry standard errors: a miss within `k` standard errors is never
/// down-weighted, however well the rest fits).
fn huber_weights(residual: &[f64], floor: f64) -> Vec<f64> {
    let centre = super::numerics::stats::median(residual).unwrap_or(0.0);
    let deviations: Vec<f64> = residual.iter().map(|r| (r - centre).abs()).collect();
    let spread = 1.4826 * super::numerics::stats::median(&deviations).unwrap_or(0.0);
    let cut = HUBER_K * spread.max(floor);
    residual.iter().map(|r| if cut > 0.0 && r.abs() > cut { cut / r.abs() } else { 1.0 }).collect()
}

/// One solver run: the point, iterations, status and message, and the residuals at
/// the point when the solver has them.
struct SolveRun {
    x: Vec<f64>,
    iterations: u64,
    status: FitStatus,
    message: Option<String>,
    residual: Option<Vec<f64>>,
}

/// The best point evaluated before the budget ran out (`x0` if none was).
fn budget_stop(problem: &LeverageProblem<'_>, x0: &[f64], why: &ArgminError) -> SolveRun {
    let x = problem.budget.and_then(|b| b.best.borrow().as_ref().map(|(_, x)| x.clone())).unwrap_or(x0.to_vec());
    SolveRun {
        x,
        iterations: 0,
        status: FitStatus::BudgetExhausted,
        message: Some(format!(
            "stopped with the best point so far: {why} after {} model evaluations",
            problem.evaluations.get()
        )),
        residual: None,
    }
}

/// Levenberg-Marquardt from `x0`, and Nelder-Mead if the model cannot be evaluated
/// along the way.
fn solve(problem: &LeverageProblem<'_>, x0: &[f64]) -> SolveRun {
    if problem.layout.free.is_empty() {
        return SolveRun { x: x0.to_vec(), iterations: 0, status: FitStatus::Converged, message: None, residual: None };
    }
    match run_levenberg_marquardt(problem, x0) {
        Ok((x, iterations, reason, residual)) => {
            let converged = reason == Some(TerminationReason::SolverConverged);
            SolveRun {
                x,
                iterations,
                status: if converged { FitStatus::Converged } else { FitStatus::MaxIterations },
                message: (!converged).then(|| {
                    format!("Levenberg-Marquardt stopped after {iterations} iterations without meeting its tolerance")
                }),
                residual,
            }
        }
        Err(e) if problem.budget.and_then(|b| b.exhausted.get()).is_some() => budget_stop(problem, x0, &e),
        Err(e) => match run_nelder_mead(problem, x0) {
            Err(e2) if problem.budget.and_then(|b| b.exhausted.get()).is_some() => budget_stop(problem, x0, &e2),
            Ok((x, iterations, reason, _)) => {
                let converged = reason == Some(TerminationReason::SolverConverged);
                let how = if converged { "converged" } else { "stopped at its iteration cap" };
                SolveRun {
                    x: problem.layout.project(&x),
                    iterations,
                    status: if converged { FitStatus::Converged } else { FitStatus::MaxIterations },
                    message: Some(format!("Levenberg-Marquardt failed ({e}); Nelder-Mead {how}")),
                    residual: None,
                }
            }
            Err(e2) => SolveRun {
                x: x0.to_vec(),
                iterations: 0,
                status: FitStatus::Failed,
                message: Some(format!("Levenberg-Marquardt failed ({e}); Nelder-Mead failed ({e2})")),
                residual: None,
            },
        },
    }
}

/// The point reached, iterations, why the run ended, and the residuals at the point
/// when the solver has them.
type SolverRun = Result<(Vec<f64>, u64, Option<TerminationReason>, Option<Vec<f64>>), ArgminError>;

fn run_levenberg_marquardt(problem: &LeverageProblem<'_>, x0: &[f64]) -> SolverRun {
    let (lower, upper) = problem.layout.bounds();
    let solver = LevenbergMarquardt::new(CALIBRATION_COST_REL_TOL).with_bounds(lower, upper);
    let res = Executor::new(*problem, solver)
        .configure(|s| s.param(DVector::from_vec(x0.to_vec())).max_iters(CALIBRATION_MAX_ITERATIONS))
        .ctrlc(false)
        .timer(false)
        .run()?;
    let iters = res.state.get_iter();
    let reason = res.state.get_termination_reason().cloned();
    let best = res.state.get_best_param();
    // The solver's residuals belong to its last point, which is the best one unless the
    // last iteration did not improve.
    let residual = res.solver.residual().filter(|_| best == res.state.get_param()).map(|r| r.as_slice().to_vec());
    let x = best.map(|p| p.as_slice().to_vec()).unwrap_or_else(|| x0.to_vec());
    Ok((x, iters, reason, residual))
}

fn run_nelder_mead(problem: &LeverageProblem<'_>, x0: &[f64]) -> SolverRun {
    // Start simplex: a tenth of each range away from the start, towards the interior.
    let mut simplex = vec![x0.to_vec()];
    for (i, name) in problem.layout.free.iter().enumerate() {
        let (lo, hi) = problem.layout.limit(*name);
        let step = 0.1 * (hi - lo);
        let mut v = x0.to_vec();
        v[i] += if v[i] + step <= hi { step } else { -step };
        simplex.push(v);
    }
    let solver = NelderMead::new(simplex).with_sd_tolerance(1e-20)?;
    let res = Executor::new(*problem, solver).configure(|s| s.max_iters(2000)).ctrlc(false).timer(false).run()?;
    let iters = res.state.get_iter();
    let reason = res.state.get_termination_reason().cloned();
    let x = res.state.get_best_param().cloned().unwrap_or_else(|| x0.to_vec());
    Ok((x, iters, reason, None))
}

/// Piecewise-constant forward variance from variance swap levels (MATH.md
/// section 4): `xi_j = (T_j VS_j - T_{j-1} VS_{j-1}) / (T_j - T_{j-1})`.
/// `None` when expiries are not positive and strictly increasing.
pub fn forward_variances(taus: &[f64], variance_swap: &[f64]) -> Option<Vec<f64>> {
    if taus.len() != variance_swap.len() {
        return None;
    }
    let mut prev_t = 0.0;
    let mut prev_total = 0.0;
    let mut out = Vec::with_capacity(taus.len());
    for (&t, &vs) in taus.iter().zip(variance_swap) {
        if !(t > prev_t) || !t.is_finite() {
            return None;
        }
        let total = t * vs;
        out.push((total - prev_total) / (t - prev_t));
        prev_t = t;
        prev_total = total;
    }
    Some(out)
}

/// Variance of total realized variance `Int_0^T xi_0(s) K(T-s)^2 ds`,
/// `K(t) = nu t^a E_{a,a+1}(-lambda t^a)` (MATH.md section 5), and the
/// volatility-swap convexity correction `E[sqrt V] ~ sqrt(E V) - Var V / (8 (E V)^1.5)`
/// (Brockhaus & Long 2000, "Volatility swaps made simple", Risk).
///
/// With `xi` piecewise constant the variance needs `G(t) = Int_0^t K(u)^2 du` at every
/// expiry gap `T_i - T_{j-1}` (and at `T_i - T_j`, the same gaps one `j` later, or zero).
/// `G` is integrated once, cumulatively, over the curve's sorted distinct gaps
/// ([`LeverageCurve::distinct_gaps`]; one Gauss–Kronrod panel set per step between
/// consecutive gaps), with one Mittag-Leffler evaluator for `(a, a + 1)`: the cost grows
/// with the number of distinct gaps, not with gaps times the kernel's sharpness.
/// (Integrating `[0, gap]` afresh for each gap, with a new evaluator per kernel value,
/// took 7.5 s for 35 expiries at `lambda = 20`; found by fuzzing, see
/// `tests/regressions.rs`.)
fn convexity(curve: &LeverageCurve, vs: &[f64], p: &LeverageParams, nu: f64) -> Option<Vec<ConvexityPoint>> {
    let a = p.hurst + 0.5;
    let lambda = p.mean_reversion;
    let kernel_ml = MittagLefflerSeries::new(a, a + 1.0).ok()?;
    let kernel_sq = |t: f64| -> [f64; 1] {
        if t <= 0.0 {
            return [0.0];
        }
        let t_a = t.powf(a);
        let k = nu * t_a * kernel_ml.eval(-lambda * t_a);
        [k * k]
    };
    let taus = curve.taus();
    let xi = curve.forward_variances();
    // The step integrals are summed into G, so each needs the same absolute accuracy as
    // the total: relative 1e-12 of its own size is at least as strict. 2,000 evaluations a
    // step bound the work when the kernel is sharp (large lambda).
    let tol = QuadratureTolerance { relative: 1e-12, absolute: 1e-300, max_evaluations: 2000 };
    let mut g_at_gap = Vec::with_capacity(curve.distinct_gaps().len());
    let (mut total, mut from) = (0.0, 0.0);
    for &gap in curve.distinct_gaps() {
        total += integrate(kernel_sq, &[from, gap], tol).value[0];
        g_at_gap.push(total);
        from = gap;
    }
    let mut out = Vec::with_capacity(taus.len());
    for i in 0..taus.len() {
        let mut var_total = 0.0;
        for j in 0..=i {
            let g_hi = g_at_gap[curve.gap_index(i, j)];
            // T_i - T_j is the gap of (i, j + 1); zero for j = i
            let g_lo = if j < i { g_at_gap[curve.gap_index(i, j + 1)] } else { 0.0 };
            var_total += xi[j].max(0.0) * (g_hi - g_lo);
        }
        let t = taus[i];
        let var_rv = var_total / (t * t);
        let level = vs[i];
        if !(level > 0.0) || !var_rv.is_finite() {
            return None;
        }
        let vol_swap = level.sqrt() - var_rv / (8.0 * level.powf(1.5));
        out.push(ConvexityPoint {
            tau: t,
            realized_variance_stdev: var_rv.sqrt(),
            volatility_swap: vol_swap,
            convexity_adjustment: level.sqrt() - vol_swap,
        });
    }
    Some(out)
}
