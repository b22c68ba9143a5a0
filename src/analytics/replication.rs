//! Model-free variance, gamma and leverage swap levels of one smile by log-strip
//! replication (MATH.md section 2).
//!
//! With `otm(k)` the out-of-the-money Black price (unit forward) on the fitted smile:
//! `VS = (2/tau) Int otm(k) e^-k dk` (Carr & Madan 1998; Demeterfi, Derman, Kamal &
//! Zou 1999, J. Derivatives 6(4); Neuberger 1994, J. Portfolio Mgmt.),
//! `GS = (2/tau) Int otm(k) dk`, and the leverage swap with its own integrand
//! `LS = (2/tau) Int otm(k) (1 - e^-k) dk`, so that it does not cancel.

use super::black::{mirrored_call, mirrored_calls};
use super::numerics::exp::exp;
use super::numerics::kronrod_table::GAUSS_KRONROD_21;
use super::numerics::quadrature::{
    gauss_batches_with, integrate_batches_with, KronrodRule, QuadratureTolerance, GAUSS_KRONROD_15, MAX_PANEL_NODES,
};
use super::smile::SmileShape;
use super::tolerances::{MAX_ABS_LOG_MONEYNESS, OTM_PRICE_CUTOFF, REPLICATION_ABS_TOL, REPLICATION_MAX_EVALUATIONS};

/// Annualised variance, gamma and leverage swap levels (decimal variance).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct SwapLevels {
    /// Variance swap fair strike.
    pub variance: f64,
    /// Gamma swap fair strike.
    pub gamma: f64,
    /// Leverage swap: gamma minus variance.
    pub leverage: f64,
}

/// Result of replicating one smile.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Replication {
    /// The swap levels.
    pub levels: SwapLevels,
    /// Estimated absolute integration error of each level.
    pub error: SwapLevels,
    /// Share of the variance swap that comes from beyond the quoted strikes.
    pub wing_share: f64,
    /// Log-moneyness the wings were integrated to.
    pub limits: (f64, f64),
    /// False when a wing had not decayed below the cutoff at the furthest allowed
    /// log-moneyness, or the integrator hit its evaluation cap.
    pub converged: bool,
    /// Integrand evaluations spent.
    pub evaluations: usize,
}

/// The Gauss–Kronrod pair of every replication integral (core, wings, quoted part).
const REPLICATION_RULE: KronrodRule<11> = GAUSS_KRONROD_21;

/// Growth factor of the steps of the wing walk, which finds where each wing's price
/// falls below the cutoff; in log-moneyness (monotone smiles) its points also become
/// the wings' first panels. Measured on the demo snapshot in log-moneyness (35 smiles,
/// 10/21-point Gauss–Kronrod, the error of each level against a 1e-16 reference):
/// growth 2.5 from a first step of two ATM total deviations needs 298 evaluations per
/// smile against 336 for the earlier 7/15-point rule with growth 1.6, with the levels
/// within 1e-15 relative of the reference either way.
const WING_STEP_GROWTH: f64 = 2.5;

/// First step of the wing walk, in units of the total deviation `sqrt(w)` at the end
/// of the quoted range (see [`WING_STEP_GROWTH`]).
const WING_FIRST_STEP_DEVIATIONS: f64 = 2.0;

/// Halvings of the wing walk's last step that place the wing's end near where the
/// out-of-the-money price crosses [`OTM_PRICE_CUTOFF`]. The walk's growing steps
/// overshoot the crossing by up to the whole last step; the integrand is negligible
/// there but the panels still have to span it. Beyond the crossing the price falls by
/// a factor `e` every `sqrt(w)/8.5` or so of log-moneyness (`|d1|` is near 8.5 at a price
/// of 1e-16), so what the integrals leave out is about `1e-16 sqrt(w) / 8.5`, below
/// 3e-15 of the variance swap's `w/2` for a total deviation `sqrt(w)` of 0.01 (one day
/// at 16% vol) and less for any longer expiry. Measured on the demo snapshot and 14
/// intraday snapshots (sinh variable, 10/21-point Gauss–Kronrod): 4 halvings cut the
/// evaluations per smile from 142-155 to 124-141 (8 of them the halvings' prices),
/// with every level within 3e-15 relative of before on the intraday snapshots and
/// 6e-15 on the demo snapshot; 1 halving needs more (163, the wings then bisect).
const WING_END_BISECTIONS: usize = 4;

/// Walks outward from `start` in growing steps until the out-of-the-money price
/// (and, on the put side, the put in units of the strike) is below the cutoff;
/// returns the visited points (outward order) and whether the cutoff was reached.
fn wing_points<S: SmileShape + ?Sized>(curve: &S, start: f64, direction: f64, first_step: f64) -> (Vec<f64>, bool) {
    // Room for the usual walk (5 to 8 steps) without growing.
    let mut points = Vec::with_capacity(16);
    // The call at |k| is the call itself, or on the put side the put in units of the
    // strike: the larger of the two.
    let below_cutoff = |k: f64| mirrored_call(k, curve.total_variance(k)) < OTM_PRICE_CUTOFF;
    let mut k = start;
    let mut step = first_step;
    loop {
        // A step past the furthest point stops at it, and the price is tested there:
        // a wing that decays slowly can fall below the cutoff between the walk's last
        // point and the next, far past the bound (a step of 39 from -26 on the demo
        // day's 1.4-year smile, wing slope 0.32).
        k = (k + direction * step).clamp(-MAX_ABS_LOG_MONEYNESS, MAX_ABS_LOG_MONEYNESS);
        points.push(k);
        let at_bound = k.abs() >= MAX_ABS_LOG_MONEYNESS;
        if below_cutoff(k) {
            // The crossing lies within the last step; halving it moves the wing's end
            // to within a sixteenth of the step past the crossing (WING_END_BISECTIONS).
            let (mut inside, mut outside) = (k - direction * step, k);
            for _ in 0..WING_END_BISECTIONS {
                let mid = 0.5 * (inside + outside);
                if below_cutoff(mid) {
                    outside = mid;
                } else {
                    inside = mid;
                }
            }
            if let Some(end) = points.last_mut() {
                *end = outside;
            }
            return (points, true);
        }
        if at_bound {
            return (points, false);
        }
        step *= WING_STEP_GROWTH;
    }
}

/// The points each wing's walk visits from `edges` outward ([`wing_points`], the first
/// step [`WING_FIRST_STEP_DEVIATIONS`] deviations of the edge's total variance), in
/// increasing order and with the edge included, and whether the walk reached the price
/// cutoff: `(left, reached)`, `(right, reached)`.
#[allow(clippy::type_complexity)]
fn wing_breaks<S: SmileShape + ?Sized>(curve: &S, edges: (f64, f64)) -> ((Vec<f64>, bool), (Vec<f64>, bool)) {
    let first_step = |k: f64| WING_FIRST_STEP_DEVIATIONS * curve.total_variance(k).max(1e-8).sqrt().clamp(0.02, 1.0);
    let (left, left_ok) = wing_points(curve, edges.0, -1.0, first_step(edges.0));
    let (right, right_ok) = wing_points(curve, edges.1, 1.0, first_step(edges.1));
    let mut left_breaks: Vec<f64> = Vec::with_capacity(left.len() + 1);
    left_breaks.extend(left.iter().rev().cloned());
    left_breaks.push(edges.0);
    let mut right_breaks = Vec::with_capacity(right.len() + 1);
    right_breaks.push(edges.1);
    right_breaks.extend(right.iter().cloned());
    ((left_breaks, left_ok), (right_breaks, right_ok))
}

/// From this `|k|` on, the leverage weight `1 - e^-k` is computed as written: the
/// difference then loses at most a factor `e^0.5 / (e^0.5 - 1) < 2.6` in relative
/// accuracy (a few ulps). Below it one `expm1` gives both `1 - e^-k` and `e^-k`.
const DIRECT_LEVERAGE_WEIGHT_FROM: f64 = 0.5;

/// Equal panels each piece of the quoted range (between its ends, zero and the
/// curve's kinks) starts with when integrating in log-moneyness: with the 10/21-point
/// rule two panels per piece meet the tolerance on the demo snapshot without
/// bisection, one panel gets bisected (which costs more than starting split), five
/// are more than needed.
const CORE_PANELS_PER_PIECE: usize = 2;

/// `breaks` with every interval split into equal panels, `parts_of(width)` of them
/// for an interval of that width.
fn subdivide(breaks: &[f64], parts_of: impl Fn(f64) -> usize) -> Vec<f64> {
    // Counted twice (a division and a rounding each) rather than kept in a second vector.
    let mut out = Vec::with_capacity(breaks.windows(2).map(|pair| parts_of(pair[1] - pair[0])).sum::<usize>() + 1);
    for pair in breaks.windows(2) {
        let parts = parts_of(pair[1] - pair[0]);
        out.extend((0..parts).map(|i| pair[0] + (pair[1] - pair[0]) * i as f64 / parts as f64));
    }
    out.extend(breaks.last());
    out
}

/// Widest panel, in the sinh variable `u` of [`Variable::SinhAroundVertex`], that a
/// piece is split into before the integrator's own bisection. Measured on the demo
/// snapshot and eight intraday snapshots (10/21-point Gauss–Kronrod, levels against a
/// dense 1e-16 reference): panels of width 2 meet the tolerance with at most one
/// bisection per smile, 142 to 152 evaluations per smile; width 1.6 needs 150 to 161,
/// 2.4 needs 151 to 161 (more bisections), and the levels agree with the reference to
/// within 1e-14 relative in every case.
const MAX_SINH_PANEL_WIDTH: f64 = 2.0;

/// Most panels one piece is split into: a bound for a curve with a vertex width near
/// [`MIN_SINH_VERTEX_WIDTH`], where the pieces are longest in `u` (about 46 over the
/// whole line).
const MAX_SINH_PANELS_PER_PIECE: f64 = 64.0;

/// Narrowest vertex, in log-moneyness, that the sinh variable is used for; below it
/// the curve is a kink to working precision and log-moneyness serves as well.
const MIN_SINH_VERTEX_WIDTH: f64 = 1e-8;

/// The variable the replication integrals run over.
///
/// An SVI smile's total variance `a + b (rho (k - m) + sqrt((k - m)^2 + s^2))` is
/// analytic, but its square root has branch points at `k = m +- i s`, at a distance
/// `s` from the real line: a panel much wider than `s` around the vertex converges
/// slowly, and on short expiries `s` is a few hundredths of log-moneyness. With
/// `k = m + s sinh(u)` the root is `s cosh(u)`, entire in `u`, and the branch points
/// move to `u = +-i pi/2`; the same change of variable spaces the wings' points
/// logarithmically in `|k - m|`. (The sinh change of variable for nearly singular
/// integrands: J. Comput. Appl. Math., 2007, "Error analysis for a sinh
/// transformation used in evaluating nearly singular boundary element integrals".)
#[derive(Debug, Clone, Copy)]
enum Variable {
    /// Log-moneyness `k` itself: for curves with kinks (the monotone cubic).
    LogMoneyness,
    /// `u` with `k = centre + width sinh(u)`, around an analytic curve's vertex.
    SinhAroundVertex { centre: f64, width: f64 },
}

impl Variable {
    fn for_curve<S: SmileShape + ?Sized>(curve: &S) -> Self {
        match curve.vertex() {
            Some((centre, width)) if centre.is_finite() && width.is_finite() && width >= MIN_SINH_VERTEX_WIDTH => {
                Self::SinhAroundVertex { centre, width }
            }
            _ => Self::LogMoneyness,
        }
    }

    /// The variable at log-moneyness `k`.
    fn of(self, k: f64) -> f64 {
        match self {
            Self::LogMoneyness => k,
            Self::SinhAroundVertex { centre, width } => ((k - centre) / width).asinh(),
        }
    }

    /// Log-moneyness at `u` and `dk/du` there.
    fn moneyness_and_jacobian(self, u: f64) -> (f64, f64) {
        match self {
            Self::LogMoneyness => (u, 1.0),
            Self::SinhAroundVertex { centre, width } => {
                let grow = exp(u);
                let shrink = 1.0 / grow;
                (centre + width * 0.5 * (grow - shrink), width * 0.5 * (grow + shrink))
            }
        }
    }

    /// [`Variable::moneyness_and_jacobian`] at each `u[i]` into `k[i]` and `jacobian[i]`.
    fn moneyness_and_jacobians(self, u: &[f64], k: &mut [f64], jacobian: &mut [f64]) {
        for ((u, k), jacobian) in u.iter().zip(k.iter_mut()).zip(jacobian.iter_mut()) {
            (*k, *jacobian) = self.moneyness_and_jacobian(*u);
        }
    }

    /// Panel ends, in this variable, over the pieces between the sorted log-moneyness
    /// breakpoints `breaks` (the quoted range's ends, zero and the curve's kinks).
    fn core_panels(self, breaks: &[f64]) -> Vec<f64> {
        match self {
            Self::LogMoneyness => subdivide(breaks, |_| CORE_PANELS_PER_PIECE),
            Self::SinhAroundVertex { .. } => self.split_to_width(breaks),
        }
    }

    /// Panel ends, in this variable, of a wing whose walk visited the sorted points
    /// `walk`: the walk's points themselves in log-moneyness, and in the sinh variable
    /// only its two ends (the wing is one piece there).
    fn wing_panels(self, walk: &[f64]) -> Vec<f64> {
        match self {
            Self::LogMoneyness => walk.to_vec(),
            Self::SinhAroundVertex { .. } => self.split_to_width(&[walk[0], walk[walk.len() - 1]]),
        }
    }

    /// `breaks` in this variable, each piece split into equal panels no wider than
    /// [`MAX_SINH_PANEL_WIDTH`].
    fn split_to_width(self, breaks: &[f64]) -> Vec<f64> {
        let us: Vec<f64> = breaks.iter().map(|k| self.of(*k)).collect();
        subdivide(&us, |width| (width / MAX_SINH_PANEL_WIDTH).ceil().clamp(1.0, MAX_SINH_PANELS_PER_PIECE) as usize)
    }
}

/// The three integrands at `k` from the call at `|k|`: `[otm e^-k, otm, otm (1 - e^-k)]`.
#[inline(always)]
fn swap_weights(k: f64, call: f64) -> [f64; 3] {
    // With c the call at |k| and q = e^-|k|: for k >= 0, otm = c and
    // otm e^-k = c q; for k < 0, otm = c q (put-call symmetry) and otm e^-k = c.
    // The leverage weight otm (1 - e^-k) is sign(k) c (1 - q) on both sides.
    let k_abs = k.abs();
    // 1 - q through expm1 near k = 0, where the difference would cancel, and q from
    // it (one call instead of two; q >= e^-0.5 there, so 1 - (1 - q) rounds to within
    // an ulp of q).
    let (q, one_minus_q) = if k_abs < DIRECT_LEVERAGE_WEIGHT_FROM {
        let one_minus_q = -(-k_abs).exp_m1();
        (1.0 - one_minus_q, one_minus_q)
    } else {
        let q = exp(-k_abs);
        (q, 1.0 - q)
    };
    if k >= 0.0 {
        [call * q, call, call * one_minus_q]
    } else {
        [call, call * q, -(call * one_minus_q)]
    }
}

/// Replicates the swap levels of `curve` for an expiry `tau` years away. `quoted`
/// is the range of quoted log-moneyness; what lies beyond it counts as wing.
pub fn replicate<S: SmileShape + ?Sized>(curve: &S, quoted: (f64, f64), tau: f64) -> Replication {
    let relative = curve.relative_tolerance();
    let variable = Variable::for_curve(curve);
    // The integrand at a panel's nodes, in stages over all of them (see
    // `mirrored_calls`): log-moneyness and dk/du, total variance, calls, weights.
    let integrand = |u: &[f64], out: &mut [[f64; 3]]| {
        let n = u.len().min(out.len()).min(MAX_PANEL_NODES);
        let mut k = [0.0; MAX_PANEL_NODES];
        let mut jacobian = [0.0; MAX_PANEL_NODES];
        variable.moneyness_and_jacobians(&u[..n], &mut k[..n], &mut jacobian[..n]);
        let mut w = [0.0; MAX_PANEL_NODES];
        curve.total_variances(&k[..n], &mut w[..n]);
        let mut call = [0.0; MAX_PANEL_NODES];
        mirrored_calls(&k[..n], &w[..n], &mut call[..n]);
        for i in 0..n {
            out[i] = swap_weights(k[i], call[i]).map(|x| x * jacobian[i]);
        }
    };
    let (k_lo, k_hi) = (quoted.0.min(0.0), quoted.1.max(0.0));
    let ((left_breaks, left_ok), (right_breaks, right_ok)) = wing_breaks(curve, (k_lo, k_hi));

    let mut core_breaks: Vec<f64> = Vec::with_capacity(curve.kinks().len() + 3);
    core_breaks.extend(curve.kinks().iter().cloned().filter(|k| *k > k_lo && *k < k_hi));
    core_breaks.push(k_lo);
    core_breaks.push(k_hi);
    core_breaks.push(0.0);
    core_breaks.sort_by(f64::total_cmp);
    core_breaks.dedup();
    let tol =
        QuadratureTolerance { relative, absolute: REPLICATION_ABS_TOL, max_evaluations: REPLICATION_MAX_EVALUATIONS };
    let core = integrate_batches_with(&REPLICATION_RULE, integrand, &variable.core_panels(&core_breaks), tol);
    // Wings are held to the accuracy of the total, not to their own (small) size.
    let wing_tol = QuadratureTolerance {
        relative,
        absolute: (relative * core.value[1].abs().min(core.value[0].abs())).max(REPLICATION_ABS_TOL),
        max_evaluations: REPLICATION_MAX_EVALUATIONS,
    };
    let left_q = integrate_batches_with(&REPLICATION_RULE, integrand, &variable.wing_panels(&left_breaks), wing_tol);
    let right_q = integrate_batches_with(&REPLICATION_RULE, integrand, &variable.wing_panels(&right_breaks), wing_tol);

    // Quoted range may not reach zero; what lies between it and zero counts as wing.
    let quoted_core = if quoted.0 > k_lo || quoted.1 < k_hi {
        let mut inner: Vec<f64> = curve.kinks().iter().cloned().filter(|k| *k > quoted.0 && *k < quoted.1).collect();
        inner.push(quoted.0);
        inner.push(quoted.1);
        if quoted.0 < 0.0 && quoted.1 > 0.0 {
            inner.push(0.0);
        }
        inner.sort_by(f64::total_cmp);
        integrate_batches_with(&REPLICATION_RULE, integrand, &variable.core_panels(&inner), tol).value[0]
    } else {
        core.value[0]
    };

    let scale = 2.0 / tau;
    let total: [f64; 3] = std::array::from_fn(|c| left_q.value[c] + core.value[c] + right_q.value[c]);
    let err: [f64; 3] = std::array::from_fn(|c| left_q.error[c] + core.error[c] + right_q.error[c]);
    let wing_share = if total[0] > 0.0 { ((total[0] - quoted_core) / total[0]).clamp(0.0, 1.0) } else { 0.0 };
    Replication {
        levels: SwapLevels { variance: scale * total[0], gamma: scale * total[1], leverage: scale * total[2] },
        error: SwapLevels { variance: scale * err[0], gamma: scale * err[1], leverage: scale * err[2] },
        wing_share,
        limits: (left_breaks[0], right_breaks[right_breaks.len() - 1]),
        converged: left_ok && right_ok && core.converged && left_q.converged && right_q.converged,
        evaluations: core.evaluations + left_q.evaluations + right_q.evaluations,
    }
}

/// The three levels' contributions from beyond `edges` (below the first, above the
/// second) under each of the curves `curves` (at most [`MAX_BEYOND_CURVES`]), for an
/// expiry `tau` years away: what a change of wing rule beyond those log-moneyness
/// values changes. The curves share one walk (the first curve's) and the 7-point
/// Gauss rule on each of its panels, without bisection: an error bar needs a few
/// digits, and the rule's error, about the same for every curve on the same nodes,
/// largely cancels from their differences (measured against the adaptive 7/15-point
/// rule at 1e-5 relative on the demo day, every smile set of the four seed sets and
/// the bench sets: no standard error moved by more than 2e-6 of itself).
pub fn levels_beyond<S: SmileShape>(curves: &[S], edges: (f64, f64), tau: f64) -> Vec<[f64; 3]> {
    let curves = &curves[..curves.len().min(MAX_BEYOND_CURVES)];
    let Some(first) = curves.first() else { return Vec::new() };
    let integrand = |k: &[f64], out: &mut [[f64; 3 * MAX_BEYOND_CURVES]]| {
        let n = k.len().min(out.len()).min(MAX_PANEL_NODES);
        let mut w = [0.0; MAX_PANEL_NODES];
        let mut call = [0.0; MAX_PANEL_NODES];
        for (c, curve) in curves.iter().enumerate() {
            curve.total_variances(&k[..n], &mut w[..n]);
            mirrored_calls(&k[..n], &w[..n], &mut call[..n]);
            for i in 0..n {
                out[i][3 * c..3 * c + 3].copy_from_slice(&swap_weights(k[i], call[i]));
            }
        }
    };
    let ((left_breaks, _), (right_breaks, _)) = wing_breaks(first, edges);
    let left = gauss_batches_with(&GAUSS_KRONROD_15, integrand, &left_breaks);
    let right = gauss_batches_with(&GAUSS_KRONROD_15, integrand, &right_breaks);
    (0..curves.len()).map(|c| std::array::from_fn(|l| 2.0 / tau * (left[3 * c + l] + right[3 * c + l]))).collect()
}

/// Most curves [`levels_beyond`] takes at once.
pub const MAX_BEYOND_CURVES: usize = 4;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytics::smile::svi::SviParams;
    use crate::analytics::smile::SmileCurve;

    #[test]
    fn flat_smile_gives_equal_variance_and_gamma_and_zero_leverage() {
        // Identity (MATH.md section 2): flat smile, VS = GS = vol^2, LS = 0.
        for &(vol, tau) in &[(0.2, 0.05), (0.35, 1.0), (0.8, 3.0)] {
            let flat = SmileCurve::Svi(SviParams { a: vol * vol * tau, b: 0.0, rho: 0.0, m: 0.0, sigma: 0.1 });
            let r = replicate(&flat, (-0.3, 0.3), tau);
            let v2 = vol * vol;
            // Tolerance: 1e-12 relative, the integration target of the issue.
            assert!((r.levels.variance - v2).abs() < 1e-12 * v2, "VS {} vs {v2}", r.levels.variance);
            assert!((r.levels.gamma - v2).abs() < 1e-12 * v2, "GS {} vs {v2}", r.levels.gamma);
            assert!(r.levels.leverage.abs() < 1e-12 * v2, "LS {}", r.levels.leverage);
            assert!(r.converged);
        }
    }

    #[test]
    fn wing_ends_leave_out_nothing_a_far_wider_integral_sees() {
        // Definition check (MATH.md section 2): the three integrals of otm(k) from
        // black::otm_price, integrated independently in log-moneyness with the 7/15-point
        // rule out to twice as far as the wing walk ends, on panels growing 15% at a time
        // from an eighth of the ATM deviation. Tolerance 1e-12 relative to the variance
        // swap: both sides are held to 1e-13 and the part beyond the walk's end is below
        // 3e-15 of it (see WING_END_BISECTIONS).
        use crate::analytics::black::otm_price;
        use crate::analytics::numerics::quadrature::integrate;
        let cases = [
            (SviParams { a: 1.7e-4, b: 0.0124, rho: -0.743, m: 0.0146, sigma: 0.0134 }, 0.0192, (-0.08, 0.06)),
            (SviParams { a: 0.01, b: 0.08, rho: -0.5, m: 0.05, sigma: 0.15 }, 0.5, (-0.6, 0.6)),
            (SviParams { a: 0.04, b: 0.2, rho: -0.7, m: 0.1, sigma: 0.3 }, 3.0, (-1.5, 0.8)),
        ];
        for (params, tau, quoted) in cases {
            let curve = SmileCurve::Svi(params);
            let fast = replicate(&curve, quoted, tau);
            assert!(fast.converged, "{params:?}");
            let reach = 2.0 * fast.limits.0.abs().max(fast.limits.1.abs());
            let first = curve.total_variance(0.0).sqrt() / 8.0;
            let mut breaks = vec![0.0];
            let mut x = first;
            while x < reach * 1.15 {
                breaks.push(x.min(reach));
                breaks.push(-x.min(reach));
                x *= 1.15;
            }
            breaks.sort_by(f64::total_cmp);
            breaks.dedup();
            let tol = QuadratureTolerance { relative: 1e-14, absolute: 1e-20, max_evaluations: 1_000_000 };
            let wide = integrate(
                |k| {
                    let otm = otm_price(k, curve.total_variance(k));
                    [otm * (-k).exp(), otm, -otm * (-k).exp_m1()]
                },
                &breaks,
                tol,
            );
            let scale = 2.0 / tau;
            let vs = scale * wide.value[0];
            for (got, want) in [
                (fast.levels.variance, vs),
                (fast.levels.gamma, scale * wide.value[1]),
                (fast.levels.leverage, scale * wide.value[2]),
            ] {
                assert!((got - want).abs() <= 1e-12 * vs, "{params:?}: {got} vs {want}");
            }
        }
    }

    /// The same curve without its vertex: replication then runs in log-moneyness.
    struct WithoutVertex<'a>(&'a SmileCurve);

    impl SmileShape for WithoutVertex<'_> {
        fn total_variance(&self, k: f64) -> f64 {
            self.0.total_variance(k)
        }
        fn kinks(&self) -> &[f64] {
            &[]
        }
    }

    #[test]
    fn sinh_variable_agrees_with_log_moneyness_on_hard_svi_shapes() {
        // Two layouts of the same integrals must agree: each is held to
        // REPLICATION_REL_TOL (1e-13), so 1e-12 relative to the variance swap leaves
        // room for both errors and rounding. Shapes: the demo's shortest expiry (vertex
        // width 0.013 inside the quoted range), a near-kink (width 1e-5), a vertex far
        // from the money, a flat smile with a wide vertex on a short expiry, and a
        // long expiry.
        let cases = [
            (SviParams { a: 1.7e-4, b: 0.0124, rho: -0.743, m: 0.0146, sigma: 0.0134 }, 0.0192, (-0.08, 0.06)),
            (SviParams { a: 0.002, b: 0.02, rho: -0.5, m: 0.01, sigma: 1e-5 }, 0.05, (-0.1, 0.1)),
            (SviParams { a: 0.002, b: 0.02, rho: -0.5, m: 0.2, sigma: 1e-3 }, 0.05, (-0.1, 0.1)),
            (SviParams { a: 0.0004, b: 0.0005, rho: -0.2, m: 0.0, sigma: 2.0 }, 0.01, (-0.1, 0.1)),
            (SviParams { a: 0.04, b: 0.2, rho: -0.7, m: 0.1, sigma: 0.3 }, 3.0, (-1.5, 0.8)),
        ];
        for (params, tau, quoted) in cases {
            let curve = SmileCurve::Svi(params);
            let sinh = replicate(&curve, quoted, tau);
            let plain = replicate(&WithoutVertex(&curve), quoted, tau);
            assert!(sinh.converged && plain.converged, "{params:?}");
            let scale = plain.levels.variance;
            for (got, want) in [
                (sinh.levels.variance, plain.levels.variance),
                (sinh.levels.gamma, plain.levels.gamma),
                (sinh.levels.leverage, plain.levels.leverage),
            ] {
                assert!((got - want).abs() <= 1e-12 * scale, "{params:?}: {got} vs {want}");
            }
            assert!((sinh.wing_share - plain.wing_share).abs() <= 1e-12, "{params:?}: wing share");
        }
    }
}
