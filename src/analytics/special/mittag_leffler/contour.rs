//! The optimal parabolic contour of Garrappa (2015), "Numerical evaluation of two and
//! three parameter Mittag-Leffler functions", SIAM J. Numer. Anal. 53(3): the Laplace
//! transform `s^{a-b} / (s^a - z)` inverted by the trapezoid rule on a parabola, with the
//! residue of the pole at `s = z^{1/a}` for positive `z`.

use super::{GARRAPPA_EPS, GARRAPPA_MAX_NODES, LN_MACHINE_EPS};
use num_complex::Complex64;
use std::f64::consts::PI;

/// Result of the contour integral: the value and the size of the summed integrand, whose
/// product with `GARRAPPA_EPS` estimates the absolute error.
#[derive(Debug, Clone, Copy)]
pub(super) struct Contour {
    pub(super) value: f64,
    pub(super) scale: f64,
}

impl Contour {
    pub(super) fn rel_err_estimate(&self) -> f64 {
        if self.value == 0.0 {
            return f64::INFINITY;
        }
        GARRAPPA_EPS * self.scale / self.value.abs()
    }
}

/// Parameters `(mu, h, N)` of the parabola `s(u) = mu (1 + i u)^2`, `u = h k`, `|k| <= N`.
#[derive(Debug, Clone, Copy)]
pub(super) struct ContourParams {
    pub(super) mu: f64,
    pub(super) h: f64,
    pub(super) n: f64,
}

/// Parameters in a region bounded on the right by the singularity with `phi = phi_j1`
/// (Garrappa 2015, section on right-bounded regions; `phi(s) = (Re s + |s|)/2`). `p_j`, `q_j`
/// are the strengths of the singularities on the left and right.
fn optimal_param_rb(phi_j: f64, phi_j1: f64, p_j: f64, q_j: f64, ln_eps: f64) -> Option<ContourParams> {
    const FAC: f64 = 1.01;
    let f_max = (ln_eps - LN_MACHINE_EPS).exp();
    let sq_j = phi_j.sqrt();
    let threshold = 2.0 * (ln_eps - LN_MACHINE_EPS).sqrt();
    let sq_j1 = phi_j1.sqrt().min(threshold - sq_j);
    let small = 1.0e-14;
    let (sqbar_j, sqbar_j1, f_bar) = if p_j < small && q_j < small {
        (sq_j, sq_j1, 1.0)
    } else if p_j < small {
        let f_min = if sq_j > 0.0 { FAC * (sq_j / (sq_j1 - sq_j)).powf(q_j) } else { FAC };
        if f_min >= f_max {
            return None;
        }
        let f_bar = f_min + f_min / f_max * (f_max - f_min);
        let fq = f_bar.powf(-1.0 / q_j);
        (sq_j, (2.0 * sq_j1 - fq * sq_j) / (2.0 + fq), f_bar)
    } else if q_j < small {
        let f_min = FAC * (sq_j1 / (sq_j1 - sq_j)).powf(p_j);
        if f_min >= f_max {
            return None;
        }
        let f_bar = f_min + f_min / f_max * (f_max - f_min);
        let fp = f_bar.powf(-1.0 / p_j);
        ((2.0 * sq_j + fp * sq_j1) / (2.0 - fp), sq_j1, f_bar)
    } else {
        let mut f_min = FAC * (sq_j + sq_j1) / (sq_j1 - sq_j).powf(p_j.max(q_j));
        if f_min >= f_max {
            return None;
        }
        f_min = f_min.max(1.5);
        let f_bar = f_min + f_min / f_max * (f_max - f_min);
        let fp = f_bar.powf(-1.0 / p_j);
        let fq = f_bar.powf(-1.0 / q_j);
        let w = -phi_j1 / ln_eps;
        let den = 2.0 + w - (1.0 + w) * fp + fq;
        (
            ((2.0 + w + fq) * sq_j + fp * sq_j1) / den,
            (-(1.0 + w) * fq * sq_j + (2.0 + w - (1.0 + w) * fp) * sq_j1) / den,
            f_bar,
        )
    };
    let ln_eps = ln_eps - f_bar.ln();
    let w = -sqbar_j1 * sqbar_j1 / ln_eps;
    let mu = (((1.0 + w) * sqbar_j + sqbar_j1) / (2.0 + w)).powi(2);
    let h = -2.0 * PI / ln_eps * (sqbar_j1 - sqbar_j) / ((1.0 + w) * sqbar_j + sqbar_j1);
    let n = ((1.0 - ln_eps / mu).sqrt() / h).ceil();
    if mu.is_finite() && h.is_finite() && h > 0.0 && mu > 0.0 && n.is_finite() {
        Some(ContourParams { mu, h, n })
    } else {
        None
    }
}

/// Parameters in the region right of the singularity with `phi = phi_j` (unbounded on the
/// right), singularity strength `p_j` (Garrappa 2015, right-unbounded regions).
fn optimal_param_ru(phi_j: f64, p_j: f64, ln_eps: f64) -> Option<ContourParams> {
    let sq_phi = phi_j.sqrt();
    let mut phibar = if phi_j > 0.0 { phi_j * 1.01 } else { 0.01 };
    let mut sq_phibar = phibar.sqrt();
    let (f_min, f_max, f_tar) = (1.0_f64, 10.0_f64, 5.0_f64);
    let mut n;
    let mut a_big;
    let mut sq_mu;
    let mut iterations = 0;
    loop {
        let phi_t = phibar;
        let ln_eps_phi_t = ln_eps / phi_t;
        n = (phi_t / PI * (1.0 - 1.5 * ln_eps_phi_t + (1.0 - 2.0 * ln_eps_phi_t).sqrt())).ceil();
        a_big = PI * n / phi_t;
        sq_mu = sq_phibar * (4.0 - a_big).abs() / (7.0 - (1.0 + 12.0 * a_big).sqrt()).abs();
        let fbar = ((sq_phibar - sq_phi) / sq_mu).powf(-p_j);
        iterations += 1;
        let stop = p_j < 1.0e-14 || (f_min < fbar && fbar < f_max) || iterations > 50;
        if stop {
            break;
        }
        sq_phibar = f_tar.powf(-1.0 / p_j) * sq_mu + sq_phi;
        phibar = sq_phibar * sq_phibar;
    }
    let mut mu = sq_mu * sq_mu;
    let mut h = (-3.0 * a_big - 2.0 + 2.0 * (1.0 + 12.0 * a_big).sqrt()) / (4.0 - a_big) / n;
    // keep the round-off e^mu * eps below the target
    let threshold = ln_eps - LN_MACHINE_EPS;
    if mu > threshold {
        let q = if p_j.abs() < 1.0e-14 { 0.0 } else { f_tar.powf(-1.0 / p_j) * mu.sqrt() };
        let phibar = (q + sq_phi).powi(2);
        if phibar < threshold {
            let w = (LN_MACHINE_EPS / (LN_MACHINE_EPS - ln_eps)).sqrt();
            let u = (-phibar / LN_MACHINE_EPS).sqrt();
            mu = threshold;
            n = (w * ln_eps / (2.0 * PI * (u * w - 1.0))).ceil();
            h = w / n;
        } else {
            return None;
        }
    }
    if mu.is_finite() && h.is_finite() && h > 0.0 && mu > 0.0 && n.is_finite() && n >= 1.0 {
        Some(ContourParams { mu, h, n })
    } else {
        None
    }
}

/// `E_{a,b}(z)` for real `z != 0` by the optimal parabolic contour (t = 1).
pub(super) fn garrappa(a: f64, b: f64, z: f64) -> Contour {
    let Some((params, add_residue)) = contour_choice(a, b, z) else {
        return Contour { value: f64::NAN, scale: f64::INFINITY };
    };
    let ContourParams { mu, h, n } = params;
    let n = n.min(4.0 * GARRAPPA_MAX_NODES) as usize;
    let s_star = if z > 0.0 { Some(z.powf(1.0 / a)) } else { None };
    let zc = Complex64::new(z, 0.0);
    let amb = a - b;
    // integrand at u: e^s s^{a-b} / (s^a - z) * s'(u), s = mu (1 + iu)^2, s' = 2 i mu (1 + iu)
    let term = |u: f64| -> Complex64 {
        let one_iu = Complex64::new(1.0, u);
        let s = one_iu * one_iu * mu;
        let ds = Complex64::new(0.0, 2.0 * mu) * one_iu;
        let ln_s = s.ln();
        let s_a = (ln_s * a).exp();
        let s_amb = (ln_s * amb).exp();
        s.exp() * s_amb / (s_a - zc) * ds
    };
    // By symmetry T(-u) = -conj(T(u)), so the sum is i (Im T(0) + 2 sum_{k>=1} Im T(k h)).
    let t0 = term(0.0);
    let mut sum = t0.im;
    let mut abs_sum = t0.norm();
    for k in 1..=n {
        let t = term(h * k as f64);
        sum += 2.0 * t.im;
        abs_sum += 2.0 * t.norm();
    }
    let mut value = h * sum / (2.0 * PI);
    let scale = h * abs_sum / (2.0 * PI);
    if add_residue {
        if let Some(s) = s_star {
            // residue of e^s s^{a-b}/(s^a - z) at s*: s*^{1-b} e^{s*} / a
            value += s.powf(1.0 - b) * s.exp() / a;
        }
    }
    Contour { value, scale }
}

/// The parabola `(mu, h, N)` for `E_{a,b}(z)` and whether the pole's residue is added.
/// For `z < 0` it depends on `(a, b)` only, which [`shared_contour`]
/// uses to share one set of nodes among many `z`.
pub(super) fn contour_choice(a: f64, b: f64, z: f64) -> Option<(ContourParams, bool)> {
    // Singularities of s^{a-b}/(s^a - z) that matter: the branch point at 0 (phi = 0) and,
    // for z > 0, the pole s* = z^{1/a} on the positive axis (for 0 < a <= 1 it is the only
    // pole on the principal sheet; for z < 0 there is none, or for a = 1 one on the negative
    // axis, which every parabola encloses).
    let p0 = (-2.0 * (a - b + 1.0)).max(0.0);
    let mut ln_eps = GARRAPPA_EPS.ln();
    let s_star = if z > 0.0 { Some(z.powf(1.0 / a)) } else { None };
    let admissible_limit = |ln_eps: f64| ln_eps - LN_MACHINE_EPS;
    let mut chosen: Option<(ContourParams, bool)> = None; // (params, add residue)
    for _ in 0..4 {
        let mut best: Option<(ContourParams, bool)> = None;
        let mut consider = |cand: Option<ContourParams>, residue: bool| {
            if let Some(c) = cand {
                if best.is_none_or(|(b, _)| c.n < b.n) {
                    best = Some((c, residue));
                }
            }
        };
        match s_star {
            None => consider(optimal_param_ru(0.0, p0, ln_eps), false),
            Some(s) => {
                // region between 0 and s*: pole outside the contour, add its residue
                consider(optimal_param_rb(0.0, s, p0, 1.0, ln_eps), true);
                // region right of s*: admissible only if s* is small enough for round-off
                if s < admissible_limit(ln_eps) {
                    consider(optimal_param_ru(s, 1.0, ln_eps), false);
                }
            }
        }
        match best {
            Some((c, r)) if c.n <= GARRAPPA_MAX_NODES => {
                chosen = Some((c, r));
                break;
            }
            other => {
                chosen = other;
                ln_eps += std::f64::consts::LN_10;
            }
        }
    }
    chosen
}
