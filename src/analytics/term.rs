//! Term structure of swap levels: forward variance and interpolation between
//! expiries (MATH.md section 4).
//!
//! Total variance `tau * VS` (and `tau * GS`) is interpolated linearly in `tau`,
//! consistent with a piecewise-constant forward variance, from `(0, 0)` to the last
//! expiry. Beyond the last expiry the curve is not extrapolated: a query there is an error.

/// Swap levels per expiry, ready for interpolation.
#[derive(Debug, Clone, PartialEq)]
pub struct TermStructure {
    taus: Vec<f64>,
    total_variance: Vec<f64>,
    total_gamma: Vec<f64>,
}

/// Why a term-structure query failed.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum TermError {
    /// Expiries not positive and strictly increasing, or lengths differ.
    #[error("expiries must be positive, strictly increasing and match the levels")]
    BadCurve,
    /// The query lies beyond the last expiry (no extrapolation).
    #[error("time {requested} years is beyond the last expiry {last} years")]
    BeyondLastExpiry {
        /// Requested time (years).
        requested: f64,
        /// Last expiry (years).
        last: f64,
    },
    /// A negative or non-finite time.
    #[error("time must be finite and non-negative, got {0}")]
    BadTime(f64),
}

impl TermStructure {
    /// From expiries (years) and variance and gamma swap levels (annualised variance).
    ///
    /// # Errors
    /// [`TermError::BadCurve`] for unsorted or mismatched input.
    pub fn new(taus: &[f64], variance_swap: &[f64], gamma_swap: &[f64]) -> Result<Self, TermError> {
        if taus.is_empty() || taus.len() != variance_swap.len() || taus.len() != gamma_swap.len() {
            return Err(TermError::BadCurve);
        }
        let mut prev = 0.0;
        for &t in taus {
            if !(t.is_finite() && t > prev) {
                return Err(TermError::BadCurve);
            }
            prev = t;
        }
        Ok(Self {
            taus: taus.to_vec(),
            total_variance: taus.iter().zip(variance_swap).map(|(t, v)| t * v).collect(),
            total_gamma: taus.iter().zip(gamma_swap).map(|(t, g)| t * g).collect(),
        })
    }

    /// Forward variance on each period `(T_{j-1}, T_j]`; a negative value is
    /// calendar arbitrage.
    pub fn forward_variances(&self) -> Vec<f64> {
        let mut prev = (0.0, 0.0);
        self.taus
            .iter()
            .zip(&self.total_variance)
            .map(|(&t, &tv)| {
                let xi = (tv - prev.1) / (t - prev.0);
                prev = (t, tv);
                xi
            })
            .collect()
    }

    fn interpolate(&self, totals: &[f64], tau: f64) -> Result<f64, TermError> {
        if !(tau.is_finite() && tau >= 0.0) {
            return Err(TermError::BadTime(tau));
        }
        let last = self.taus[self.taus.len() - 1];
        if tau > last {
            return Err(TermError::BeyondLastExpiry { requested: tau, last });
        }
        let i = self.taus.partition_point(|&t| t < tau);
        let (t0, v0) = if i == 0 { (0.0, 0.0) } else { (self.taus[i - 1], totals[i - 1]) };
        let (t1, v1) = (self.taus[i], totals[i]);
        Ok(v0 + (v1 - v0) * (tau - t0) / (t1 - t0))
    }

    /// Total variance `tau * VS(tau)` at any time up to the last expiry.
    ///
    /// # Errors
    /// [`TermError`] beyond the last expiry or for a bad time.
    pub fn total_variance(&self, tau: f64) -> Result<f64, TermError> {
        self.interpolate(&self.total_variance, tau)
    }

    /// Total gamma-weighted variance `tau * GS(tau)`.
    ///
    /// # Errors
    /// [`TermError`] beyond the last expiry or for a bad time.
    pub fn total_gamma(&self, tau: f64) -> Result<f64, TermError> {
        self.interpolate(&self.total_gamma, tau)
    }

    /// Annualised variance swap level for the forward-starting period `[t1, t2]`.
    ///
    /// # Errors
    /// [`TermError`] when `t2` lies beyond the last expiry or `t2 <= t1`.
    pub fn forward_variance_swap(&self, t1: f64, t2: f64) -> Result<f64, TermError> {
        if !(t2 > t1) {
            return Err(TermError::BadTime(t2));
        }
        Ok((self.total_variance(t2)? - self.total_variance(t1)?) / (t2 - t1))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interpolates_total_variance_linearly_and_refuses_extrapolation() {
        let ts = TermStructure::new(&[0.5, 1.0], &[0.04, 0.05], &[0.039, 0.048]).expect("valid");
        let xi = ts.forward_variances();
        assert!((xi[0] - 0.04).abs() < 1e-15 && (xi[1] - 0.06).abs() < 1e-15, "{xi:?}");
        let mid = ts.total_variance(0.75).expect("inside");
        assert!((mid - 0.035).abs() < 1e-15);
        assert!((ts.forward_variance_swap(0.5, 1.0).expect("inside") - 0.06).abs() < 1e-14);
        assert!(matches!(ts.total_variance(1.5), Err(TermError::BeyondLastExpiry { .. })));
    }
}
