//! Adaptive Gauss–Kronrod (7/15-point) quadrature of a vector-valued integrand over panels.
//!
//! The replication integrals of one smile (variance, gamma and leverage swap) share
//! the costly part of their integrand, the out-of-the-money price, so they are
//! integrated together as one vector. General quadrature crates integrate scalar
//! functions only, which would triple the number of Black prices; that is why this
//! small integrator exists. Nodes and weights are the 15-point Kronrod extension of
//! the 7-point Gauss–Legendre rule as tabulated in QUADPACK (`qk15`).

/// Kronrod abscissae on [-1, 1], non-negative half, largest first.
const XGK: [f64; 8] = [
    0.991_455_371_120_812_6,
    0.949_107_912_342_758_5,
    0.864_864_423_359_769_1,
    0.741_531_185_599_394_4,
    0.586_087_235_467_691_1,
    0.405_845_151_377_397_2,
    0.207_784_955_007_898_5,
    0.0,
];
/// Kronrod weights matching [`XGK`].
const WGK: [f64; 8] = [
    0.022_935_322_010_529_22,
    0.063_092_092_629_978_55,
    0.104_790_010_322_250_2,
    0.140_653_259_715_525_9,
    0.169_004_726_639_267_9,
    0.190_350_578_064_785_4,
    0.204_432_940_075_298_9,
    0.209_482_141_084_727_8,
];
/// Gauss weights of the embedded 7-point rule, at `XGK[1], XGK[3], XGK[5], XGK[7]`.
const WG: [f64; 4] =
    [0.129_484_966_168_869_7, 0.279_705_391_489_276_7, 0.381_830_050_505_118_9, 0.417_959_183_673_469_4];

/// What an integration reached: the value, the error estimate per component, the
/// evaluations spent, and whether every component met its tolerance.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Quadrature<const N: usize> {
    /// Integral per component.
    pub value: [f64; N],
    /// Estimated absolute error per component (QUADPACK's scaled |Kronrod - Gauss|,
    /// summed over panels).
    pub error: [f64; N],
    /// Integrand evaluations spent.
    pub evaluations: usize,
    /// True when every component met `max(abs_tol, rel_tol * |value|)`.
    pub converged: bool,
}

/// Accuracy request: relative and absolute tolerance per component and an
/// evaluation cap.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct QuadratureTolerance {
    /// Relative tolerance on each component's total.
    pub relative: f64,
    /// Absolute tolerance on each component's total.
    pub absolute: f64,
    /// Stop subdividing after this many integrand evaluations.
    pub max_evaluations: usize,
}

#[derive(Clone, Copy)]
struct Panel<const N: usize> {
    lo: f64,
    hi: f64,
    value: [f64; N],
    error: [f64; N],
}

fn kronrod_panel<const N: usize, F: FnMut(f64) -> [f64; N]>(f: &mut F, lo: f64, hi: f64) -> Panel<N> {
    let centre = 0.5 * (lo + hi);
    let half = 0.5 * (hi - lo);
    let mut kronrod = [0.0; N];
    let mut gauss = [0.0; N];
    let fc = f(centre);
    for c in 0..N {
        kronrod[c] = WGK[7] * fc[c];
        gauss[c] = WG[3] * fc[c];
    }
    let mut samples = [([0.0; N], [0.0; N]); 7];
    for j in 0..7 {
        let dx = half * XGK[j];
        let f1 = f(centre - dx);
        let f2 = f(centre + dx);
        samples[j] = (f1, f2);
        for c in 0..N {
            let pair = f1[c] + f2[c];
            kronrod[c] += WGK[j] * pair;
            if j % 2 == 1 {
                gauss[c] += WG[j / 2] * pair;
            }
        }
    }
    // Error estimate as in QUADPACK's qk15: |K - G| scaled by the integrand's
    // variation over the panel, (200 |K - G| / resasc)^1.5, which tracks the true
    // error of the Kronrod result far better than |K - G| itself.
    let mut value = [0.0; N];
    let mut error = [0.0; N];
    for c in 0..N {
        let mean = 0.5 * kronrod[c];
        let mut resasc = WGK[7] * (fc[c] - mean).abs();
        for j in 0..7 {
            resasc += WGK[j] * ((samples[j].0[c] - mean).abs() + (samples[j].1[c] - mean).abs());
        }
        resasc *= half.abs();
        value[c] = kronrod[c] * half;
        let raw = ((kronrod[c] - gauss[c]) * half).abs();
        error[c] = if resasc > 0.0 && raw > 0.0 {
            // x^1.5 as x sqrt(x): the same number to an ulp, without a pow call.
            let ratio = 200.0 * raw / resasc;
            resasc * (ratio * ratio.sqrt()).min(1.0)
        } else {
            raw
        };
    }
    Panel { lo, hi, value, error }
}

/// Integrates `f` over `[breakpoints[0], breakpoints[last]]`, starting from one
/// panel between each pair of consecutive breakpoints (put kinks and nodes of the
/// integrand there) and bisecting the panel with the largest scaled error until
/// every component meets its tolerance or the evaluation cap is reached.
///
/// Breakpoints must be non-decreasing; empty panels are skipped. With fewer than
/// two breakpoints the integral is zero.
pub fn integrate<const N: usize, F: FnMut(f64) -> [f64; N]>(
    mut f: F,
    breakpoints: &[f64],
    tolerance: QuadratureTolerance,
) -> Quadrature<N> {
    let mut panels: Vec<Panel<N>> = breakpoints
        .windows(2)
        .filter(|pair| pair[1] > pair[0])
        .map(|pair| kronrod_panel(&mut f, pair[0], pair[1]))
        .collect();
    let mut evaluations = 15 * panels.len();
    loop {
        let mut value = [0.0; N];
        let mut error = [0.0; N];
        for panel in &panels {
            for c in 0..N {
                value[c] += panel.value[c];
                error[c] += panel.error[c];
            }
        }
        let allowed: [f64; N] = std::array::from_fn(|c| tolerance.absolute.max(tolerance.relative * value[c].abs()));
        let converged = (0..N).all(|c| error[c] <= allowed[c]);
        if converged || evaluations + 30 > tolerance.max_evaluations || panels.is_empty() {
            return Quadrature { value, error, evaluations, converged };
        }
        // Bisect the panel whose error, scaled by each component's allowance, is largest.
        let worst = panels
            .iter()
            .enumerate()
            .map(|(i, p)| {
                let score = (0..N).map(|c| p.error[c] / allowed[c]).fold(0.0, f64::max);
                (i, score)
            })
            .fold((0, f64::NEG_INFINITY), |best, cur| if cur.1 > best.1 { cur } else { best })
            .0;
        let panel = panels.swap_remove(worst);
        let mid = 0.5 * (panel.lo + panel.hi);
        if !(mid > panel.lo && mid < panel.hi) {
            // Panel is as narrow as floating point allows: keep it and stop.
            panels.push(panel);
            let mut value = [0.0; N];
            let mut error = [0.0; N];
            for p in &panels {
                for c in 0..N {
                    value[c] += p.value[c];
                    error[c] += p.error[c];
                }
            }
            return Quadrature { value, error, evaluations, converged: false };
        }
        panels.push(kronrod_panel(&mut f, panel.lo, mid));
        panels.push(kronrod_panel(&mut f, mid, panel.hi));
        evaluations += 30;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const TIGHT: QuadratureTolerance =
        QuadratureTolerance { relative: 1e-13, absolute: 1e-300, max_evaluations: 100_000 };

    /// Known integrals (closed forms from calculus), each run through the integrator.
    #[test]
    fn table_of_known_integrals() {
        type Case = (&'static str, fn(f64) -> f64, f64, f64, f64);
        let cases: [Case; 5] = [
            ("x^5 on [0,1]", |x| x.powi(5), 0.0, 1.0, 1.0 / 6.0),
            ("exp(-x) on [0,40]", |x| (-x).exp(), 0.0, 40.0, 1.0 - (-40.0_f64).exp()),
            ("sqrt(x) on [0,1]", f64::sqrt, 0.0, 1.0, 2.0 / 3.0),
            ("1/(1+x^2) on [-10,10]", |x| 1.0 / (1.0 + x * x), -10.0, 10.0, 2.0 * 10.0_f64.atan()),
            ("|x| on [-1,2]", f64::abs, -1.0, 2.0, 2.5),
        ];
        for (name, f, a, b, exact) in cases {
            let q = integrate(|x| [f(x)], &[a, b], TIGHT);
            let rel = (q.value[0] - exact).abs() / exact.abs();
            // Tolerance: requested 1e-13 plus rounding of the sum (x10 margin).
            assert!(rel < 1e-12, "{name}: got {}, expected {exact}, rel {rel:e}, tol 1e-12", q.value[0]);
            assert!(q.converged, "{name}: did not report convergence");
        }
    }

    #[test]
    fn components_are_integrated_together() {
        let q = integrate(|x| [x, x * x, 1.0], &[0.0, 0.5, 2.0], TIGHT);
        let expected = [2.0, 8.0 / 3.0, 2.0];
        for c in 0..3 {
            assert!((q.value[c] - expected[c]).abs() < 1e-13, "component {c}: {}", q.value[c]);
        }
    }

    #[test]
    fn evaluation_cap_is_reported_as_not_converged() {
        let capped = QuadratureTolerance { relative: 1e-15, absolute: 0.0, max_evaluations: 45 };
        let q = integrate(|x: f64| [x.abs().sqrt().sin()], &[-1.0, 3.0], capped);
        assert!(!q.converged);
        assert!(q.evaluations <= 45);
    }
}
