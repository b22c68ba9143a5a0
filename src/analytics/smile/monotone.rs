//! Shape-preserving cubic interpolation of total variance over log-moneyness, with
//! explicit linear wings.
//!
//! Node derivatives follow SIAM J. Numer. Anal. 17(2) (1980), "Monotone piecewise
//! cubic interpolation", in
//! the weighted-harmonic-mean form (SIAM J. Sci. Stat. Comput., 1984, "A method for
//! constructing local monotone piecewise cubic interpolants"), the same choice as
//! scipy's `PchipInterpolator`: no overshoot between quotes, so total variance stays
//! positive. Beyond the quotes each wing follows `a + b|k| + c sqrt|k|`, least
//! squares on the outermost quotes: linear growth with a square-root correction is
//! the leading behaviour of total variance far out in stochastic-volatility models
//! (Math. Finance, 2010, "Asymptotic formulas with error estimates for call pricing
//! functions and the implied volatility at extreme strikes"). It is shifted to meet
//! the cubic at the last quote, and its slope must stay in `[0, MAX_WING_SLOPE]`
//! outward (Lee 2004, Math. Finance 14(3)); otherwise the wing continues linearly
//! with the end slope, clipped to that range.

use super::{rmse_vol, FittedSmile, SmileCurve, SmileError, SmilePoint, SmileQuote};
use crate::analytics::tolerances::MAX_WING_SLOPE;

/// A cubic Hermite interpolant through `(k_i, w_i)` with shape-preserving slopes.
/// Evaluating it outside its nodes is refused: the wings are a separate, explicit choice.
#[derive(Debug, Clone, PartialEq)]
pub struct MonotoneCubic {
    k: Vec<f64>,
    w: Vec<f64>,
    d: Vec<f64>,
}

impl MonotoneCubic {
    /// Builds the interpolant.
    ///
    /// # Errors
    /// [`SmileError`] with fewer than 3 nodes, unsorted or non-finite nodes.
    pub fn new(k: Vec<f64>, w: Vec<f64>) -> Result<Self, SmileError> {
        let n = k.len();
        if n < 3 || w.len() != n {
            return Err(SmileError::TooFewQuotes(n.min(w.len())));
        }
        for i in 0..n {
            if !k[i].is_finite() || !w[i].is_finite() {
                return Err(SmileError::BadValue(i));
            }
            if i > 0 && k[i] <= k[i - 1] {
                return Err(SmileError::Unsorted(i));
            }
        }
        let h: Vec<f64> = k.windows(2).map(|p| p[1] - p[0]).collect();
        let delta: Vec<f64> = (0..n - 1).map(|i| (w[i + 1] - w[i]) / h[i]).collect();
        let mut d = vec![0.0; n];
        for i in 1..n - 1 {
            if delta[i - 1] * delta[i] > 0.0 {
                let w1 = 2.0 * h[i] + h[i - 1];
                let w2 = h[i] + 2.0 * h[i - 1];
                d[i] = (w1 + w2) / (w1 / delta[i - 1] + w2 / delta[i]);
            }
        }
        d[0] = end_slope(h[0], h[1], delta[0], delta[1]);
        d[n - 1] = end_slope(h[n - 2], h[n - 3], delta[n - 2], delta[n - 3]);
        Ok(Self { k, w, d })
    }

    /// Nodes (log-moneyness).
    pub fn nodes(&self) -> &[f64] {
        &self.k
    }

    /// Slopes at the first and last node.
    pub fn end_slopes(&self) -> (f64, f64) {
        (self.d[0], self.d[self.d.len() - 1])
    }

    /// Value and derivatives at `k`, or `None` outside `[k_first, k_last]`.
    pub fn point(&self, k: f64) -> Option<SmilePoint> {
        let n = self.k.len();
        if !(k >= self.k[0] && k <= self.k[n - 1]) {
            return None;
        }
        let i = match self.k.partition_point(|&x| x <= k) {
            0 => 0,
            p => (p - 1).min(n - 2),
        };
        let h = self.k[i + 1] - self.k[i];
        let t = (k - self.k[i]) / h;
        let (y0, y1, m0, m1) = (self.w[i], self.w[i + 1], self.d[i] * h, self.d[i + 1] * h);
        let t2 = t * t;
        let t3 = t2 * t;
        let w =
            (2.0 * t3 - 3.0 * t2 + 1.0) * y0 + (t3 - 2.0 * t2 + t) * m0 + (-2.0 * t3 + 3.0 * t2) * y1 + (t3 - t2) * m1;
        let dw = ((6.0 * t2 - 6.0 * t) * y0
            + (3.0 * t2 - 4.0 * t + 1.0) * m0
            + (-6.0 * t2 + 6.0 * t) * y1
            + (3.0 * t2 - 2.0 * t) * m1)
            / h;
        let d2w =
            ((12.0 * t - 6.0) * y0 + (6.0 * t - 4.0) * m0 + (-12.0 * t + 6.0) * y1 + (6.0 * t - 2.0) * m1) / (h * h);
        Some(SmilePoint { w, dw, d2w })
    }
}

/// Three-point end slope, kept shape-preserving (as scipy's PCHIP does).
fn end_slope(h0: f64, h1: f64, m0: f64, m1: f64) -> f64 {
    let d = ((2.0 * h0 + h1) * m0 - h0 * m1) / (h0 + h1);
    if d.signum() != m0.signum() {
        0.0
    } else if m0.signum() != m1.signum() && d.abs() > 3.0 * m0.abs() {
        3.0 * m0
    } else {
        d
    }
}

/// Quotes per wing used to fit its shape.
pub const WING_FIT_QUOTES: usize = 5;

/// One wing beyond the quotes: `w(k) = w_edge + b (|k| - |k_e|) + c (sqrt|k| - sqrt|k_e|)`,
/// or linear when `c = 0`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Wing {
    /// Log-moneyness of the outermost quote.
    pub edge: f64,
    /// Total variance there.
    pub w_edge: f64,
    /// Asymptotic slope magnitude `b`.
    pub slope: f64,
    /// Square-root coefficient `c`.
    pub sqrt_coef: f64,
}

impl Wing {
    fn point(&self, k: f64) -> SmilePoint {
        let sign = if self.edge < 0.0 { -1.0 } else { 1.0 };
        let (x, x_e) = (k.abs(), self.edge.abs());
        if self.sqrt_coef == 0.0 || x <= 0.0 {
            return SmilePoint { w: self.w_edge + self.slope * (x - x_e), dw: sign * self.slope, d2w: 0.0 };
        }
        let r = x.sqrt();
        SmilePoint {
            w: self.w_edge + self.slope * (x - x_e) + self.sqrt_coef * (r - x_e.sqrt()),
            dw: sign * (self.slope + 0.5 * self.sqrt_coef / r),
            d2w: -0.25 * self.sqrt_coef / (x * r),
        }
    }

    /// Fits `a + b|k| + c sqrt|k|` to the given quotes of one side (all on the same
    /// side of zero as `edge`); `None` when the shape is not admissible.
    fn fit(k: &[f64], w: &[f64], edge: f64, w_edge: f64) -> Option<Self> {
        if k.len() < 3 || k.iter().any(|x| x * edge <= 0.0) {
            return None;
        }
        let rows = k.iter().zip(w).map(|(&x, &y)| ([1.0, x.abs(), x.abs().sqrt()], y, 1.0));
        let sol = super::least_squares3(rows)?;
        let (b, c) = (sol[1], sol[2]);
        let wing = Self { edge, w_edge, slope: b, sqrt_coef: c };
        let edge_slope = b + 0.5 * c / edge.abs().sqrt();
        let admissible = b.is_finite()
            && c.is_finite()
            && (0.0..=MAX_WING_SLOPE).contains(&b)
            && (0.0..=MAX_WING_SLOPE).contains(&edge_slope);
        admissible.then_some(wing)
    }
}

/// Monotone cubic between the quotes, explicit wings outside.
#[derive(Debug, Clone, PartialEq)]
pub struct MonotoneSmile {
    cubic: MonotoneCubic,
    left: Wing,
    right: Wing,
}

impl MonotoneSmile {
    /// Interpolant with fitted wings (see the module docs), falling back to the end
    /// slopes clipped so total variance never falls outward and the slope stays
    /// below the moment bound.
    pub fn new(cubic: MonotoneCubic) -> Self {
        let (d_first, d_last) = cubic.end_slopes();
        let n = cubic.k.len();
        let m = WING_FIT_QUOTES.min(n);
        let (k0, w0, k1, w1) = (cubic.k[0], cubic.w[0], cubic.k[n - 1], cubic.w[n - 1]);
        let left = Wing::fit(&cubic.k[..m], &cubic.w[..m], k0, w0).unwrap_or(Wing {
            edge: k0,
            w_edge: w0,
            slope: (-d_first).clamp(0.0, MAX_WING_SLOPE),
            sqrt_coef: 0.0,
        });
        let right = Wing::fit(&cubic.k[n - m..], &cubic.w[n - m..], k1, w1).unwrap_or(Wing {
            edge: k1,
            w_edge: w1,
            slope: d_last.clamp(0.0, MAX_WING_SLOPE),
            sqrt_coef: 0.0,
        });
        Self { cubic, left, right }
    }

    /// Interpolation nodes.
    pub fn nodes(&self) -> &[f64] {
        self.cubic.nodes()
    }

    /// Asymptotic wing slopes (left as a magnitude, right).
    pub fn wing_slopes(&self) -> (f64, f64) {
        (self.left.slope, self.right.slope)
    }

    /// Value and derivatives anywhere: the cubic inside, the wings outside.
    pub fn point(&self, k: f64) -> SmilePoint {
        if let Some(p) = self.cubic.point(k) {
            return p;
        }
        if k < self.cubic.k[0] {
            self.left.point(k)
        } else {
            self.right.point(k)
        }
    }
}

/// Interpolates the quotes exactly (`rmse_vol` is zero up to rounding).
///
/// # Errors
/// [`SmileError`] for unusable quotes.
pub fn fit(quotes: &[SmileQuote], tau: f64) -> Result<FittedSmile, SmileError> {
    let k: Vec<f64> = quotes.iter().map(|q| q.k).collect();
    let w: Vec<f64> = quotes.iter().map(|q| q.vol * q.vol * tau).collect();
    let range = (k[0], k[k.len() - 1]);
    let curve = SmileCurve::Monotone(MonotoneSmile::new(MonotoneCubic::new(k, w)?));
    let rmse = rmse_vol(&curve, quotes, tau, 0..quotes.len());
    Ok(FittedSmile {
        curve,
        rmse_vol: rmse,
        excluded: Vec::new(),
        suspect: Vec::new(),
        quoted_range: range,
        notes: Vec::new(),
        noise: None,
        butterfly: None,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interpolates_nodes_and_refuses_outside() {
        let c = MonotoneCubic::new(vec![-1.0, 0.0, 0.5, 2.0], vec![0.09, 0.04, 0.05, 0.2]).expect("valid");
        for (k, w) in [(-1.0, 0.09), (0.0, 0.04), (0.5, 0.05), (2.0, 0.2)] {
            let p = c.point(k).expect("inside");
            assert!((p.w - w).abs() < 1e-15, "w({k}) = {}", p.w);
        }
        assert!(c.point(-1.0001).is_none());
        assert!(c.point(2.0001).is_none());
    }

    #[test]
    fn reproduces_a_cubic_derivative_against_finite_differences() {
        let c = MonotoneCubic::new(vec![-1.0, -0.3, 0.2, 0.9, 1.5], vec![0.3, 0.1, 0.08, 0.12, 0.25]).expect("valid");
        for &k in &[-0.8, -0.1, 0.5, 1.2] {
            let h = 1e-6;
            let p = c.point(k).expect("inside");
            let fd = (c.point(k + h).expect("in").w - c.point(k - h).expect("in").w) / (2.0 * h);
            // Central difference error ~ h^2 w''' + eps/h ~ 1e-10.
            assert!((p.dw - fd).abs() < 1e-8, "k={k}: dw {} vs fd {fd}", p.dw);
        }
    }
}
