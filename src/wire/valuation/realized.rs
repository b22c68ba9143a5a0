//! Realized variance of a series of closes, validated close by close.

use super::documents::RealizedOutDoc;
use super::positive;
use crate::analytics::realized::{realized_variance, TRADING_DAYS_PER_YEAR};
use crate::wire::path::{FieldPath, InputErrors, Problem};

/// Validates closes and computes realized variance.
///
/// # Errors
/// [`InputErrors`] naming `closes[i]` for gaps and bad closes.
pub fn realized_doc(closes: &[Option<f64>], annualization: Option<f64>) -> Result<RealizedOutDoc, InputErrors> {
    let root = FieldPath::root();
    let mut problems = Vec::new();
    for (i, c) in closes.iter().enumerate() {
        match c {
            None => problems.push(Problem {
                path: root.field("closes").index(i),
                message: "missing close (a gap in the series)".into(),
            }),
            Some(x) if !positive(*x) => problems
                .push(Problem { path: root.field("closes").index(i), message: format!("must be positive, got {x}") }),
            Some(_) => {}
        }
    }
    let a = annualization.unwrap_or(TRADING_DAYS_PER_YEAR);
    if !positive(a) {
        problems.push(Problem { path: root.field("annualization"), message: format!("must be positive, got {a}") });
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    let values: Vec<f64> = closes.iter().flatten().copied().collect();
    let r = realized_variance(&values, a).map_err(|e| InputErrors::one(root.field("closes"), e.to_string()))?;
    if !(r.variance.is_finite() && r.gamma_variance.is_finite()) {
        return Err(InputErrors::one(
            root.field("closes"),
            format!(
                "the closes and annualization give a variance beyond floating point (variance {}, gamma-weighted {})",
                r.variance, r.gamma_variance
            ),
        ));
    }
    Ok(RealizedOutDoc {
        variance: r.variance,
        volatility: r.variance.sqrt(),
        gamma_variance: r.gamma_variance,
        returns: r.returns,
        annualization: a,
        start_spot: r.start_spot,
        end_spot: r.end_spot,
    })
}
