//! Seasoned variance, gamma and leverage swaps against today's term structure, and
//! their vega by expiry (MATH.md section 8).
//!
//! For a swap started at `t0`, maturing at `T`, struck at `K` (annualised variance),
//! with variance notional `N`, valued at `t` with realized variance `RV` over
//! `[t0, t]` and the implied level `VS(t, T)` of the remaining period (MATH.md
//! section 4: total variance linear in time between expiries):
//!
//! `value = N D(T) [ (t - t0)/(T - t0) RV + (T - t)/(T - t0) VS(t, T) - K ]`.
//!
//! Gamma swaps use the gamma-weighted realized variance and weight the future leg by
//! `S_t / S_t0`; a leverage swap is the gamma legs minus the variance legs. Vega
//! notional converts as `N = N_vega / (2 sqrt(K))`. Times are years from the
//! valuation time (negative: in the past).

use super::analysis::SliceAnalysis;
use super::replication::replicate;
use super::smile::VolShifted;
use super::term::{TermError, TermStructure};

/// One vol point, the bump of bucketed vega (decimal vol).
pub const VOL_POINT: f64 = 0.01;

/// Swap type.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum SwapKind {
    /// Pays realized variance.
    Variance,
    /// Pays gamma-weighted realized variance.
    Gamma,
    /// Pays gamma minus variance legs.
    Leverage,
}

/// Direction.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Side {
    /// Receives realized, pays the strike.
    Long,
    /// Pays realized, receives the strike.
    Short,
}

impl Side {
    /// +1 long, -1 short.
    pub fn sign(self) -> f64 {
        match self {
            Self::Long => 1.0,
            Self::Short => -1.0,
        }
    }
}

/// What has been realized since the start (annualised variances).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Accrued {
    /// Realized variance over `[t0, t]`.
    pub variance: f64,
    /// Gamma-weighted realized variance over `[t0, t]` (gamma and leverage swaps).
    pub gamma_variance: Option<f64>,
    /// Level of the underlying at `t0` (gamma and leverage swaps).
    pub start_spot: Option<f64>,
}

/// A swap position.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwapPosition {
    /// Type.
    pub kind: SwapKind,
    /// Direction.
    pub side: Side,
    /// Strike, annualised variance (may be negative for a leverage swap).
    pub strike: f64,
    /// Variance notional: currency per unit of annualised variance.
    pub variance_notional: f64,
    /// Start, years from the valuation time (negative when started).
    pub start: f64,
    /// Maturity, years from the valuation time (not positive when expired).
    pub maturity: f64,
    /// Realized so far; needed once the swap has started.
    pub realized: Option<Accrued>,
}

/// Today's market: swap levels and discount factors by expiry, and spot.
#[derive(Debug, Clone, PartialEq)]
pub struct SwapMarket {
    /// Expiries, years, increasing.
    pub expiries: Vec<f64>,
    /// Variance swap levels per expiry.
    pub variance_swap: Vec<f64>,
    /// Gamma swap levels per expiry.
    pub gamma_swap: Vec<f64>,
    /// Discount factors per expiry.
    pub discount: Vec<f64>,
    /// Spot, needed for seasoned gamma and leverage swaps.
    pub spot: Option<f64>,
}

/// A position's value and its parts (currency; signed by side).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwapValue {
    /// `accrued_leg + remaining_leg - strike leg`.
    pub value: f64,
    /// Discounted realized part.
    pub accrued_leg: f64,
    /// Discounted implied part.
    pub remaining_leg: f64,
    /// The implied level of the remaining period (variance, gamma or leverage swap
    /// level, annualised variance); `None` once expired.
    pub implied_level: Option<f64>,
    /// Discount factor to maturity (1 once matured).
    pub discount: f64,
}

/// Why a position cannot be valued.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RiskError {
    /// Maturity beyond the last expiry: no extrapolation.
    #[error("maturity {maturity:.6} years is beyond the last expiry {last:.6} years; no extrapolation")]
    BeyondLastExpiry {
        /// Maturity, years.
        maturity: f64,
        /// Last expiry, years.
        last: f64,
    },
    /// Maturity not after start.
    #[error("maturity must be after start")]
    MaturityBeforeStart,
    /// Started but no realized variance given.
    #[error("the swap has started: give realized (or fixings)")]
    NeedsRealized,
    /// A gamma or leverage swap needs the gamma-weighted realized variance.
    #[error("gamma and leverage swaps need realized.gamma_variance")]
    NeedsGammaVariance,
    /// A seasoned gamma or leverage swap needs the spot at start and today.
    #[error("a seasoned gamma or leverage swap needs {0}")]
    NeedsSpot(&'static str),
    /// Forward-starting gamma and leverage swaps are not valued.
    #[error("forward-starting gamma and leverage swaps are not supported (start is after the valuation time)")]
    ForwardStartGamma,
    /// Bad number.
    #[error("{0} must be finite")]
    NotFinite(&'static str),
    /// Bad market.
    #[error("market: {0}")]
    Market(#[from] TermError),
}

/// Discount factor at `tau` years: log-linear in `tau` between expiries from
/// `D(0) = 1` (a piecewise-constant forward rate).
fn discount_at(expiries: &[f64], discounts: &[f64], tau: f64) -> f64 {
    if tau <= 0.0 {
        return 1.0;
    }
    let i = expiries.partition_point(|&t| t < tau).min(expiries.len() - 1);
    let (t0, l0) = if i == 0 { (0.0, 0.0) } else { (expiries[i - 1], discounts[i - 1].ln()) };
    let (t1, l1) = (expiries[i], discounts[i].ln());
    (l0 + (l1 - l0) * (tau - t0) / (t1 - t0)).exp()
}

/// Values one swap.
///
/// # Errors
/// [`RiskError`] for a maturity beyond the last expiry, missing realized data or spot,
/// or a forward-starting gamma or leverage swap.
pub fn value_swap(position: &SwapPosition, market: &SwapMarket) -> Result<SwapValue, RiskError> {
    let p = position;
    for (name, x) in
        [("strike", p.strike), ("notional", p.variance_notional), ("start", p.start), ("maturity", p.maturity)]
    {
        if !x.is_finite() {
            return Err(RiskError::NotFinite(name));
        }
    }
    if !(p.maturity > p.start) {
        return Err(RiskError::MaturityBeforeStart);
    }
    let term = TermStructure::new(&market.expiries, &market.variance_swap, &market.gamma_swap)?;
    let last = market.expiries[market.expiries.len() - 1];
    if p.maturity > last {
        return Err(RiskError::BeyondLastExpiry { maturity: p.maturity, last });
    }
    let length = p.maturity - p.start;
    let elapsed = (-p.start).clamp(0.0, length);
    let past_weight = elapsed / length;
    let future_weight = 1.0 - past_weight;
    let gamma_like = p.kind != SwapKind::Variance;
    if gamma_like && p.start > 0.0 {
        return Err(RiskError::ForwardStartGamma);
    }
    let realized = match (elapsed > 0.0, p.realized) {
        (false, r) => r.unwrap_or(Accrued { variance: 0.0, gamma_variance: Some(0.0), start_spot: None }),
        (true, Some(r)) => r,
        (true, None) => return Err(RiskError::NeedsRealized),
    };
    let realized_gamma = if gamma_like { realized.gamma_variance.ok_or(RiskError::NeedsGammaVariance)? } else { 0.0 };
    let expired = p.maturity <= 0.0;
    let discount = discount_at(&market.expiries, &market.discount, p.maturity);
    // Levels of the remaining period and the gamma leg's spot ratio.
    let (variance_level, gamma_level, spot_ratio) = if expired {
        (0.0, 0.0, 1.0)
    } else {
        let from = p.start.max(0.0);
        let variance_level = term.forward_variance_swap(from, p.maturity)?;
        let gamma_level = (term.total_gamma(p.maturity)? - term.total_gamma(from)?) / (p.maturity - from);
        let spot_ratio = if gamma_like && elapsed > 0.0 {
            let spot = market.spot.ok_or(RiskError::NeedsSpot("the snapshot's spot"))?;
            let start_spot = realized.start_spot.ok_or(RiskError::NeedsSpot("realized.start_spot"))?;
            spot / start_spot
        } else {
            1.0
        };
        (variance_level, gamma_level, spot_ratio)
    };
    let (accrued, remaining, implied_level) = match p.kind {
        SwapKind::Variance => (realized.variance, variance_level, variance_level),
        SwapKind::Gamma => (realized_gamma, spot_ratio * gamma_level, gamma_level),
        SwapKind::Leverage => (
            realized_gamma - realized.variance,
            spot_ratio * gamma_level - variance_level,
            gamma_level - variance_level,
        ),
    };
    let scale = p.side.sign() * p.variance_notional * discount;
    let accrued_leg = scale * past_weight * accrued;
    let remaining_leg = scale * future_weight * remaining;
    Ok(SwapValue {
        value: accrued_leg + remaining_leg - scale * p.strike,
        accrued_leg,
        remaining_leg,
        implied_level: (!expired).then_some(implied_level),
        discount,
    })
}

/// Vega of a position: change of value for +1 vol point on each expiry's smile, and
/// on all at once.
#[derive(Debug, Clone, PartialEq)]
pub struct Vega {
    /// Per expiry of the market, currency per vol point.
    pub buckets: Vec<f64>,
    /// All smiles shifted together, currency per vol point.
    pub parallel: f64,
}

/// Vega of `position` given the market and the swap levels of each expiry with its
/// smile shifted up by one vol point (`shifted_variance`, `shifted_gamma`). The value
/// is linear in each expiry's levels, so the buckets add up to the parallel vega up to
/// rounding.
///
/// # Errors
/// As [`value_swap`].
pub fn swap_vega(
    position: &SwapPosition,
    market: &SwapMarket,
    shifted_variance: &[f64],
    shifted_gamma: &[f64],
) -> Result<Vega, RiskError> {
    let base = value_swap(position, market)?.value;
    let mut bumped = market.clone();
    let mut buckets = Vec::with_capacity(market.expiries.len());
    for j in 0..market.expiries.len() {
        bumped.variance_swap[j] = shifted_variance[j];
        bumped.gamma_swap[j] = shifted_gamma[j];
        buckets.push(value_swap(position, &bumped)?.value - base);
        bumped.variance_swap[j] = market.variance_swap[j];
        bumped.gamma_swap[j] = market.gamma_swap[j];
    }
    let parallel_market =
        SwapMarket { variance_swap: shifted_variance.to_vec(), gamma_swap: shifted_gamma.to_vec(), ..market.clone() };
    let parallel = value_swap(position, &parallel_market)?.value - base;
    Ok(Vega { buckets, parallel })
}

/// The market of an analysed snapshot.
pub fn market_of(slices: &[SliceAnalysis], spot: Option<f64>) -> SwapMarket {
    SwapMarket {
        expiries: slices.iter().map(|s| s.tau).collect(),
        variance_swap: slices.iter().map(|s| s.replication.levels.variance).collect(),
        gamma_swap: slices.iter().map(|s| s.replication.levels.gamma).collect(),
        discount: slices.iter().map(|s| s.discount).collect(),
        spot,
    }
}

/// Variance and gamma swap levels of every expiry with its fitted smile shifted by
/// `shift` (decimal vol), replicated as the unshifted ones were.
pub fn shifted_levels(slices: &[SliceAnalysis], shift: f64) -> (Vec<f64>, Vec<f64>) {
    slices
        .iter()
        .map(|s| {
            let shifted = VolShifted { base: &s.smile.curve, shift, tau: s.tau };
            let levels = replicate(&shifted, s.smile.quoted_range, s.tau).levels;
            (levels.variance, levels.gamma)
        })
        .unzip()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn market() -> SwapMarket {
        SwapMarket {
            expiries: vec![0.25, 0.5, 1.0],
            variance_swap: vec![0.04, 0.045, 0.05],
            gamma_swap: vec![0.039, 0.043, 0.047],
            discount: vec![0.99, 0.98, 0.96],
            spot: Some(105.0),
        }
    }

    fn swap(kind: SwapKind, start: f64, maturity: f64, realized: Option<Accrued>) -> SwapPosition {
        SwapPosition { kind, side: Side::Long, strike: 0.042, variance_notional: 1e6, start, maturity, realized }
    }

    #[test]
    fn at_inception_a_variance_swap_is_worth_n_d_vs_minus_k() {
        // Hand-computed: maturity on the 0.5 expiry, VS = 0.045, D = 0.98.
        let v = value_swap(&swap(SwapKind::Variance, 0.0, 0.5, None), &market()).expect("values");
        let expected = 1e6 * 0.98 * (0.045 - 0.042);
        assert!((v.value - expected).abs() < 1e-9, "{v:?}");
        assert_eq!(v.implied_level, Some(0.045));
        assert!(v.accrued_leg.abs() < 1e-300);
    }

    #[test]
    fn an_expired_swap_is_worth_n_rv_minus_k_and_short_flips_sign() {
        let realized = Some(Accrued { variance: 0.05, gamma_variance: None, start_spot: None });
        let mut p = swap(SwapKind::Variance, -1.0, 0.0, realized);
        let v = value_swap(&p, &market()).expect("values");
        assert!((v.value - 1e6 * (0.05 - 0.042)).abs() < 1e-9, "{v:?}");
        assert_eq!((v.discount, v.implied_level), (1.0, None));
        p.side = Side::Short;
        assert!((value_swap(&p, &market()).expect("values").value + 1e6 * 0.008).abs() < 1e-9);
    }

    #[test]
    fn a_seasoned_variance_swap_blends_realized_and_implied() {
        // Started 0.5 y ago, 0.25 y left: weights 2/3 realized, 1/3 implied (VS 0.04).
        let realized = Some(Accrued { variance: 0.06, gamma_variance: None, start_spot: None });
        let v = value_swap(&swap(SwapKind::Variance, -0.5, 0.25, realized), &market()).expect("values");
        let expected = 1e6 * 0.99 * (2.0 / 3.0 * 0.06 + 1.0 / 3.0 * 0.04 - 0.042);
        assert!((v.value - expected).abs() < 1e-8, "{v:?} vs {expected}");
    }

    #[test]
    fn seasoned_gamma_and_leverage_weight_the_future_by_spot_over_start_spot() {
        let realized = Some(Accrued { variance: 0.05, gamma_variance: Some(0.052), start_spot: Some(100.0) });
        let g = value_swap(&swap(SwapKind::Gamma, -0.25, 0.25, realized), &market()).expect("values");
        let expected_gamma = 1e6 * 0.99 * (0.5 * 0.052 + 0.5 * 1.05 * 0.039 - 0.042);
        assert!((g.value - expected_gamma).abs() < 1e-8, "{g:?}");
        let mut lev = swap(SwapKind::Leverage, -0.25, 0.25, realized);
        lev.strike = -0.001;
        let l = value_swap(&lev, &market()).expect("values");
        let expected_leverage = 1e6 * 0.99 * (0.5 * 0.002 + 0.5 * (1.05 * 0.039 - 0.04) + 0.001);
        assert!((l.value - expected_leverage).abs() < 1e-8, "{l:?}");
    }

    #[test]
    fn no_extrapolation_and_missing_data_are_errors() {
        let m = market();
        assert!(matches!(
            value_swap(&swap(SwapKind::Variance, 0.0, 1.5, None), &m),
            Err(RiskError::BeyondLastExpiry { .. })
        ));
        assert_eq!(value_swap(&swap(SwapKind::Variance, -0.1, 0.5, None), &m), Err(RiskError::NeedsRealized));
        assert_eq!(value_swap(&swap(SwapKind::Gamma, 0.1, 0.5, None), &m), Err(RiskError::ForwardStartGamma));
    }

    #[test]
    fn buckets_sum_to_the_parallel_vega() {
        let m = market();
        let shifted_v: Vec<f64> = m.variance_swap.iter().map(|v| (v.sqrt() + VOL_POINT).powi(2)).collect();
        let shifted_g: Vec<f64> = m.gamma_swap.iter().map(|v| (v.sqrt() + VOL_POINT).powi(2)).collect();
        let realized = Some(Accrued { variance: 0.05, gamma_variance: Some(0.052), start_spot: Some(100.0) });
        for p in [swap(SwapKind::Variance, -0.2, 0.75, realized), swap(SwapKind::Leverage, -0.1, 0.4, realized)] {
            let vega = swap_vega(&p, &m, &shifted_v, &shifted_g).expect("vega");
            let sum: f64 = vega.buckets.iter().sum();
            assert!((sum - vega.parallel).abs() <= 1e-12 * vega.parallel.abs(), "{vega:?}");
        }
        // A maturity between the 0.5 and 1.0 expiries has vega on those two only.
        let vega = swap_vega(&swap(SwapKind::Variance, 0.0, 0.75, None), &m, &shifted_v, &shifted_g).expect("vega");
        assert!(vega.buckets[0].abs() < 1e-300 && vega.buckets[1] > 0.0 && vega.buckets[2] > 0.0, "{vega:?}");
    }
}
