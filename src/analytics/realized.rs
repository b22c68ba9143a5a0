//! Realized variance from daily closes (MATH.md section 1): `A/N * sum ln(S_i/S_{i-1})^2`
//! with `A = 252` and the mean not subtracted (common practice, no source), and the
//! gamma-weighted variance `A/N * sum (S_i/S_0) ln(S_i/S_{i-1})^2` that gamma swaps pay.

/// Returns per year of daily closes (common practice, no source).
pub const TRADING_DAYS_PER_YEAR: f64 = 252.0;

/// Realized variance of a series of closes, annualised.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RealizedVariance {
    /// `A/N * sum r_i^2`, annualised variance.
    pub variance: f64,
    /// `A/N * sum (S_i/S_0) r_i^2`, annualised variance.
    pub gamma_variance: f64,
    /// Number of returns `N`.
    pub returns: usize,
    /// First close `S_0`.
    pub start_spot: f64,
    /// Last close.
    pub end_spot: f64,
}

/// Why closes cannot be used.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RealizedError {
    /// Fewer than two closes: no return.
    #[error("needs at least 2 closes, got {0}")]
    TooFew(usize),
    /// A close is missing, not finite or not positive.
    #[error("close {index} must be a positive number, got {value}")]
    BadClose {
        /// Position in the series.
        index: usize,
        /// The value.
        value: f64,
    },
    /// The annualisation factor is not positive.
    #[error("annualisation must be positive, got {0}")]
    BadAnnualization(f64),
}

/// Realized and gamma-weighted realized variance of `closes`, annualised by
/// `annualization` returns per year.
///
/// # Errors
/// [`RealizedError`] naming the first bad close.
pub fn realized_variance(closes: &[f64], annualization: f64) -> Result<RealizedVariance, RealizedError> {
    if !(annualization.is_finite() && annualization > 0.0) {
        return Err(RealizedError::BadAnnualization(annualization));
    }
    if let Some((index, &value)) = closes.iter().enumerate().find(|(_, c)| !(c.is_finite() && **c > 0.0)) {
        return Err(RealizedError::BadClose { index, value });
    }
    if closes.len() < 2 {
        return Err(RealizedError::TooFew(closes.len()));
    }
    let start = closes[0];
    let (mut plain, mut weighted) = (0.0, 0.0);
    for pair in closes.windows(2) {
        let r = (pair[1] / pair[0]).ln();
        plain += r * r;
        weighted += pair[1] / start * r * r;
    }
    let n = closes.len() - 1;
    let scale = annualization / n as f64;
    Ok(RealizedVariance {
        variance: scale * plain,
        gamma_variance: scale * weighted,
        returns: n,
        start_spot: start,
        end_spot: closes[n],
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hand_computed_series() {
        // Closes 100, 110, 99: r1 = ln 1.1, r2 = ln 0.9. Hand-computed:
        // RV = 252/2 (r1^2 + r2^2), gamma RV = 252/2 (1.1 r1^2 + 0.99 r2^2).
        let r = realized_variance(&[100.0, 110.0, 99.0], TRADING_DAYS_PER_YEAR).expect("valid");
        let (r1, r2) = (1.1f64.ln(), 0.9f64.ln());
        let rv = 126.0 * (r1 * r1 + r2 * r2);
        let gv = 126.0 * (1.1 * r1 * r1 + 0.99 * r2 * r2);
        assert!((r.variance - rv).abs() < 1e-14 * rv, "{r:?}");
        assert!((r.gamma_variance - gv).abs() < 1e-14 * gv, "{r:?}");
        assert_eq!((r.returns, r.start_spot, r.end_spot), (2, 100.0, 99.0));
    }

    #[test]
    fn constant_closes_have_zero_variance_and_bad_closes_are_named() {
        let r = realized_variance(&[50.0; 5], 252.0).expect("valid");
        assert!(r.variance.abs() < 1e-300 && r.gamma_variance.abs() < 1e-300);
        assert_eq!(realized_variance(&[1.0, 0.0, 2.0], 252.0), Err(RealizedError::BadClose { index: 1, value: 0.0 }));
        assert_eq!(realized_variance(&[1.0], 252.0), Err(RealizedError::TooFew(1)));
        assert!(realized_variance(&[1.0, f64::NAN], 252.0).is_err());
    }
}
