//! The standard tenors (1M, 3M, 6M, 1Y, 2Y) of an analysis as output documents, and
//! the changes of their figures between two snapshots (the history's
//! `change_since_previous` and `change_since_day_open`). The rules are in
//! [`crate::analytics::tenors`].

use crate::analytics::tenors::{standard_tenors, ExpiryLevels, Tenor, TenorBasis, TenorOmission};
use serde::{Deserialize, Serialize};

/// The figures a tenor carries (vols as decimals, the leverage swap in annualised
/// variance), as levels or as changes between two snapshots.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct TenorFiguresDoc {
    /// Variance swap vol, `sqrt(variance_swap)`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub variance_swap_vol: Option<f64>,
    /// At-the-money vol (implied vol at the forward).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub atm_vol: Option<f64>,
    /// 25-delta put vol minus 25-delta call vol.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub skew_25_delta: Option<f64>,
    /// `sqrt` of the forward variance from the previous standard tenor given (time 0 for
    /// the first) to this one; absent when that forward variance is negative.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub forward_vol: Option<f64>,
    /// `sqrt(gamma_swap) - sqrt(variance_swap)`: the leverage swap as a vol spread.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gamma_minus_variance_vol: Option<f64>,
    /// Leverage swap `gamma_swap - variance_swap`, annualised variance.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub leverage_swap: Option<f64>,
}

/// The names of the figures, in the order of [`TenorFiguresDoc::values`].
pub const TENOR_FIGURES: [&str; 6] =
    ["variance_swap_vol", "atm_vol", "skew_25_delta", "forward_vol", "gamma_minus_variance_vol", "leverage_swap"];

impl TenorFiguresDoc {
    /// The figures in the order of [`TENOR_FIGURES`].
    pub fn values(&self) -> [Option<f64>; 6] {
        [
            self.variance_swap_vol,
            self.atm_vol,
            self.skew_25_delta,
            self.forward_vol,
            self.gamma_minus_variance_vol,
            self.leverage_swap,
        ]
    }

    /// A figure by its name in [`TENOR_FIGURES`].
    pub fn by_name(&self, name: &str) -> Option<f64> {
        TENOR_FIGURES.iter().position(|n| *n == name).and_then(|i| self.values()[i])
    }

    /// `self - earlier`, figure by figure (absent where either is).
    pub fn minus(&self, earlier: &Self) -> Self {
        let d = |a: Option<f64>, b: Option<f64>| a.zip(b).map(|(a, b)| a - b);
        Self {
            variance_swap_vol: d(self.variance_swap_vol, earlier.variance_swap_vol),
            atm_vol: d(self.atm_vol, earlier.atm_vol),
            skew_25_delta: d(self.skew_25_delta, earlier.skew_25_delta),
            forward_vol: d(self.forward_vol, earlier.forward_vol),
            gamma_minus_variance_vol: d(self.gamma_minus_variance_vol, earlier.gamma_minus_variance_vol),
            leverage_swap: d(self.leverage_swap, earlier.leverage_swap),
        }
    }
}

/// One standard tenor of an analysis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, utoipa::ToSchema)]
#[schema(example = json!({"tenor": "3M", "tau": 0.25, "basis": "interpolated", "variance_swap_vol": 0.2113,
    "atm_vol": 0.1934, "skew_25_delta": 0.0561, "forward_vol": 0.2147, "gamma_minus_variance_vol": -0.0061,
    "leverage_swap": -0.0026, "variance_swap": 0.04465, "forward_variance": 0.0461}))]
pub struct TenorDoc {
    /// `1M`, `3M`, `6M`, `1Y` or `2Y`.
    pub tenor: String,
    /// The tenor as a time to expiry, ACT/365F years (1M = 1/12).
    pub tau: f64,
    /// `interpolated` (total variance linear in `tau` between the bracketing
    /// expiries), `before_first_expiry` (at most 1/12 year before the first expiry:
    /// flat forward variance from time 0, the first expiry's levels) or `omitted`
    /// (no figures; `omitted_reason` says why).
    pub basis: String,
    /// Why the tenor has no figures: beyond the last expiry (never extrapolated), more
    /// than 1/12 year before the first expiry, or expiries that are not a term
    /// structure.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub omitted_reason: Option<String>,
    /// The figures.
    #[serde(flatten)]
    pub figures: TenorFiguresDoc,
    /// Variance swap fair strike, annualised variance.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub variance_swap: Option<f64>,
    /// Forward variance from the previous standard tenor given to this one (may be
    /// negative: calendar arbitrage).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub forward_variance: Option<f64>,
}

/// The standard tenors of a term structure given per expiry, sorted by `tau`.
pub fn tenor_docs(expiries: &[ExpiryLevels]) -> Vec<TenorDoc> {
    standard_tenors(expiries).iter().map(tenor_doc).collect()
}

fn tenor_doc(t: &Tenor) -> TenorDoc {
    let (basis, omitted_reason, figures, variance_swap, forward_variance) = match &t.levels {
        Ok(l) => (
            match l.basis {
                TenorBasis::Interpolated => "interpolated",
                TenorBasis::BeforeFirstExpiry => "before_first_expiry",
            },
            None,
            TenorFiguresDoc {
                variance_swap_vol: l.variance_swap_vol(),
                atm_vol: l.atm_vol,
                skew_25_delta: l.skew_25_delta,
                forward_vol: l.forward_vol(),
                gamma_minus_variance_vol: l.gamma_minus_variance_vol(),
                leverage_swap: Some(l.leverage_swap),
            },
            Some(l.variance_swap),
            Some(l.forward_variance),
        ),
        Err(why) => {
            let reason = match why {
                TenorOmission::BeyondLastExpiry { last } => {
                    format!("beyond the last expiry ({last:.4} years): not extrapolated")
                }
                TenorOmission::FarBeforeFirstExpiry { first } => {
                    format!("more than 1/12 year before the first expiry ({first:.4} years)")
                }
                TenorOmission::BadExpiries => "the expiries do not form a term structure".to_string(),
            };
            ("omitted", Some(reason), TenorFiguresDoc::default(), None, None)
        }
    };
    TenorDoc {
        tenor: t.name.to_string(),
        tau: t.tau,
        basis: basis.to_string(),
        omitted_reason,
        figures,
        variance_swap,
        forward_variance,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn omitted_tenors_carry_a_reason_and_no_figures() {
        let e =
            ExpiryLevels { tau: 0.3, variance_swap: 0.04, gamma_swap: 0.039, atm_vol: Some(0.19), skew_25_delta: None };
        let docs = tenor_docs(&[e]);
        assert_eq!(docs[0].basis, "omitted");
        assert!(docs[0].omitted_reason.as_deref().is_some_and(|r| r.contains("before the first expiry")));
        assert_eq!(docs[1].basis, "before_first_expiry");
        assert!(docs[1].figures.skew_25_delta.is_none() && docs[1].figures.atm_vol.is_some());
        assert_eq!(docs[4].figures, TenorFiguresDoc::default());
        assert!(docs[4].omitted_reason.as_deref().is_some_and(|r| r.contains("not extrapolated")));
        let change = docs[1].figures.minus(&docs[1].figures);
        assert_eq!(change.by_name("variance_swap_vol"), Some(0.0));
        assert_eq!(change.by_name("skew_25_delta"), None);
    }
}
