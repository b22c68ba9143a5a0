//! Seasoned variance, gamma and leverage swaps against a term structure of swap levels:
//! values, vega by expiry, and the explanation of a change in value between two
//! markets (MATH.md section 8).
//!
//! Units are the desk's (MATH.md section 8, common practice, no source): the variance
//! notional `N_var` is currency per vol point squared and a swap pays
//! `N_var (sigma_R^2 - K^2)` with vols in vol points (26, not 0.26). Levels and strikes
//! here are decimal variances (0.0676 for 26 vol), so every value carries the factor
//! [`VOL_POINTS_SQUARED_PER_VARIANCE`]. For a swap started at `t0`, maturing at `T`,
//! valued at `t` with `n` of its `N` daily returns observed
//! ([`super::observations`]), realized variance `RV` over those `n` returns and the
//! implied level `F(t, T)` of the remaining period (MATH.md section 4: total variance
//! linear in time between expiries):
//!
//! `value = side * N_var * 1e4 * D(T) * [ (n/N) RV + ((N - n)/N) F(t, T) - K ]`.
//!
//! Gamma swaps use the gamma-weighted realized variance and weight the future leg by
//! `S_t / S_t0`; a leverage swap is the gamma legs minus the variance legs. A swap past
//! its maturity is settled, not valued: `side * N_var * 1e4 * (RV - K)`, no discount, no
//! vega. Times are years from the valuation time (negative: in the past).

use super::analysis::SliceAnalysis;
use super::term::{TermError, TermStructure};

/// One vol point, the bump of vega (decimal vol).
pub const VOL_POINT: f64 = 0.01;

/// Vol points squared in one unit of decimal variance: `(100 vol points)^2`. A desk
/// variance notional (currency per vol point squared) times this is the notional per
/// unit of decimal variance that QuantLib's `VarianceSwap` takes.
pub const VOL_POINTS_SQUARED_PER_VARIANCE: f64 = 1e4;

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

/// What has been realized since the start (annualised decimal variances over the
/// returns observed so far).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Accrued {
    /// Realized variance over the observed returns.
    pub variance: f64,
    /// Gamma-weighted realized variance over the observed returns (gamma and leverage
    /// swaps).
    pub gamma_variance: Option<f64>,
    /// Level of the underlying at `t0` (gamma and leverage swaps).
    pub start_spot: Option<f64>,
}

/// How far the realized leg has come: daily returns observed and expected over the
/// swap's life ([`super::observations`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Accrual {
    /// Returns observed so far.
    pub observed: u32,
    /// Returns expected from start to maturity.
    pub expected: u32,
}

impl Accrual {
    /// Weight of the realized leg, `n / N`.
    pub fn past_weight(self) -> f64 {
        f64::from(self.observed) / f64::from(self.expected)
    }
}

/// A swap position as of one valuation time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwapPosition {
    /// Type.
    pub kind: SwapKind,
    /// Direction.
    pub side: Side,
    /// Strike, annualised decimal variance (may be negative for a leverage swap).
    pub strike: f64,
    /// Variance notional, currency per vol point squared.
    pub variance_notional: f64,
    /// Start, years from the valuation time (negative when started).
    pub start: f64,
    /// Maturity, years from the valuation time (not positive once matured).
    pub maturity: f64,
    /// Returns observed and expected.
    pub accrual: Accrual,
    /// Realized so far; needed once a return has been observed, and to settle.
    pub realized: Option<Accrued>,
}

/// A market: swap levels and discount factors by expiry, and spot.
#[derive(Debug, Clone, PartialEq)]
pub struct SwapMarket {
    /// Expiries, years from the valuation time, increasing.
    pub expiries: Vec<f64>,
    /// Variance swap levels per expiry (annualised decimal variance).
    pub variance_swap: Vec<f64>,
    /// Gamma swap levels per expiry (annualised decimal variance).
    pub gamma_swap: Vec<f64>,
    /// Discount factors per expiry.
    pub discount: Vec<f64>,
    /// Spot, needed for seasoned gamma and leverage swaps.
    pub spot: Option<f64>,
}

/// A position's value and its parts (currency; signed by side).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwapValue {
    /// `accrued_leg + remaining_leg - strike leg`; once matured, the settlement amount.
    pub value: f64,
    /// Discounted realized part.
    pub accrued_leg: f64,
    /// Discounted implied part.
    pub remaining_leg: f64,
    /// The implied level of the remaining period (variance, gamma or leverage swap
    /// level, annualised decimal variance); `None` once matured.
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
    /// No observation day between start and maturity.
    #[error("no return is observed between start and maturity")]
    NoReturns,
    /// More returns observed than the swap has.
    #[error("{observed} returns observed but the swap has {expected} from start to maturity")]
    ObservedBeyondExpected {
        /// Returns observed.
        observed: u32,
        /// Returns expected.
        expected: u32,
    },
    /// Returns observed or matured, but no realized variance given.
    #[error("returns have been observed: give realized (or fixings)")]
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
    /// The earlier market of an explanation is later than the later one.
    #[error("the earlier valuation time is after the later one")]
    EarlierAfterLater,
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

/// The pieces of a value, per unit of `side * N_var * 1e4`:
/// `value = discount * (past_weight * accrued + future_weight * remaining - strike)`.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Legs {
    discount: f64,
    past_weight: f64,
    future_weight: f64,
    /// Realized quantity of the kind (variance, gamma-weighted, or their difference).
    accrued: f64,
    /// Implied quantity of the remaining period, the gamma leg scaled by `spot_ratio`.
    remaining: f64,
    /// Implied level of the remaining period (unscaled); `None` once matured.
    implied_level: Option<f64>,
    /// `S_t / S_t0` of the gamma leg (1 before the start and for variance swaps).
    spot_ratio: f64,
}

impl Legs {
    fn bracket(&self, strike: f64) -> f64 {
        self.past_weight * self.accrued + self.future_weight * self.remaining - strike
    }
}

/// The remaining period's implied quantity on `term` from `from` to `to` (years in the
/// term structure's frame) and the unscaled level: variance `F`, gamma `ratio * G`,
/// leverage `ratio * G - F`.
fn remaining_quantity(
    kind: SwapKind,
    term: &TermStructure,
    from: f64,
    to: f64,
    spot_ratio: f64,
) -> Result<(f64, f64), TermError> {
    let variance = term.forward_variance_swap(from, to)?;
    if kind == SwapKind::Variance {
        return Ok((variance, variance));
    }
    let gamma = (term.total_gamma(to)? - term.total_gamma(from)?) / (to - from);
    Ok(match kind {
        SwapKind::Gamma => (spot_ratio * gamma, gamma),
        _ => (spot_ratio * gamma - variance, gamma - variance),
    })
}

fn check_position(p: &SwapPosition) -> Result<(), RiskError> {
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
    if p.accrual.expected == 0 {
        return Err(RiskError::NoReturns);
    }
    if p.accrual.observed > p.accrual.expected {
        return Err(RiskError::ObservedBeyondExpected { observed: p.accrual.observed, expected: p.accrual.expected });
    }
    Ok(())
}

fn legs(p: &SwapPosition, market: &SwapMarket) -> Result<Legs, RiskError> {
    check_position(p)?;
    let gamma_like = p.kind != SwapKind::Variance;
    let matured = p.maturity <= 0.0;
    let started = p.accrual.observed > 0 || p.start < 0.0;
    let realized = match (p.accrual.observed > 0 || matured, p.realized) {
        (_, Some(r)) => r,
        (false, None) => Accrued { variance: 0.0, gamma_variance: Some(0.0), start_spot: None },
        (true, None) => return Err(RiskError::NeedsRealized),
    };
    let realized_gamma = if gamma_like { realized.gamma_variance.ok_or(RiskError::NeedsGammaVariance)? } else { 0.0 };
    let accrued = match p.kind {
        SwapKind::Variance => realized.variance,
        SwapKind::Gamma => realized_gamma,
        SwapKind::Leverage => realized_gamma - realized.variance,
    };
    if matured {
        return Ok(Legs {
            discount: 1.0,
            past_weight: 1.0,
            future_weight: 0.0,
            accrued,
            remaining: 0.0,
            implied_level: None,
            spot_ratio: 1.0,
        });
    }
    if gamma_like && p.start > 0.0 {
        return Err(RiskError::ForwardStartGamma);
    }
    let term = TermStructure::new(&market.expiries, &market.variance_swap, &market.gamma_swap)?;
    let last = market.expiries[market.expiries.len() - 1];
    if p.maturity > last {
        return Err(RiskError::BeyondLastExpiry { maturity: p.maturity, last });
    }
    let spot_ratio = if gamma_like && started {
        let spot = market.spot.ok_or(RiskError::NeedsSpot("the snapshot's spot"))?;
        let start_spot = realized.start_spot.ok_or(RiskError::NeedsSpot("realized.start_spot"))?;
        spot / start_spot
    } else {
        1.0
    };
    let (remaining, implied_level) = remaining_quantity(p.kind, &term, p.start.max(0.0), p.maturity, spot_ratio)?;
    let past_weight = p.accrual.past_weight();
    Ok(Legs {
        discount: discount_at(&market.expiries, &market.discount, p.maturity),
        past_weight,
        future_weight: 1.0 - past_weight,
        accrued,
        remaining,
        implied_level: Some(implied_level),
        spot_ratio,
    })
}

fn notional_scale(p: &SwapPosition) -> f64 {
    p.side.sign() * p.variance_notional * VOL_POINTS_SQUARED_PER_VARIANCE
}

/// Values one swap; a matured one at its settlement amount.
///
/// # Errors
/// [`RiskError`] for a maturity beyond the last expiry, missing realized data or spot,
/// inconsistent return counts, or a forward-starting gamma or leverage swap.
pub fn value_swap(position: &SwapPosition, market: &SwapMarket) -> Result<SwapValue, RiskError> {
    Ok(value_of(position, &legs(position, market)?))
}

/// The value of `position` from its legs.
fn value_of(position: &SwapPosition, legs: &Legs) -> SwapValue {
    let scale = notional_scale(position) * legs.discount;
    let accrued_leg = scale * legs.past_weight * legs.accrued;
    let remaining_leg = scale * legs.future_weight * legs.remaining;
    SwapValue {
        value: accrued_leg + remaining_leg - scale * position.strike,
        accrued_leg,
        remaining_leg,
        implied_level: legs.implied_level,
        discount: legs.discount,
    }
}

/// Swap levels of every expiry with its swap vols moved by a vol bump.
#[derive(Debug, Clone, PartialEq)]
pub struct ShiftedLevels {
    /// Variance swap levels.
    pub variance: Vec<f64>,
    /// Gamma swap levels.
    pub gamma: Vec<f64>,
}

impl ShiftedLevels {
    /// The levels of `market` with each expiry's variance-swap and gamma-swap vols
    /// moved by `shift` (decimal vol), floored at zero vol.
    pub fn vols_moved(market: &SwapMarket, shift: f64) -> Self {
        let moved = |level: &f64| (level.max(0.0).sqrt() + shift).max(0.0).powi(2);
        Self {
            variance: market.variance_swap.iter().map(moved).collect(),
            gamma: market.gamma_swap.iter().map(moved).collect(),
        }
    }
}

/// Vega of a position, currency per vol point of the swap vols: for each expiry, half
/// the change of value between that expiry's variance-swap and gamma-swap vols moved up
/// and down by one vol point together. The risk factor is the swap vol, the level a
/// desk hedges with: for a fresh swap on an expiry the parallel vega is exactly
/// `N_vega D (sigma_fair / K)` (MATH.md section 8). The symmetric difference removes
/// the convexity of `sigma^2` that a one-sided bump would add
/// (`(sigma + 1)^2 - sigma^2 = 2 sigma + 1` in vol points: 2% at 26 vol). A leverage
/// swap's two legs offset: its vega is the gamma leg's less the variance leg's.
#[derive(Debug, Clone, PartialEq)]
pub struct Vega {
    /// Per expiry of the market.
    pub buckets: Vec<f64>,
    /// All expiries moved together.
    pub parallel: f64,
}

/// Vega of `position` from the levels of each expiry with its swap vols moved up
/// (`up`) and down (`down`) by one vol point ([`ShiftedLevels::vols_moved`]). The value is linear in each expiry's levels, so
/// the buckets add up to the parallel vega up to rounding. A matured position has none.
///
/// # Errors
/// As [`value_swap`].
pub fn swap_vega(
    position: &SwapPosition,
    market: &SwapMarket,
    up: &ShiftedLevels,
    down: &ShiftedLevels,
) -> Result<Vega, RiskError> {
    value_swap(position, market)?;
    let n = market.expiries.len();
    if position.maturity <= 0.0 {
        return Ok(Vega { buckets: vec![0.0; n], parallel: 0.0 });
    }
    let with = |levels: &ShiftedLevels, j: Option<usize>| -> Result<f64, RiskError> {
        let mut bumped = market.clone();
        match j {
            Some(j) => {
                bumped.variance_swap[j] = levels.variance[j];
                bumped.gamma_swap[j] = levels.gamma[j];
            }
            None => {
                bumped.variance_swap.clone_from(&levels.variance);
                bumped.gamma_swap.clone_from(&levels.gamma);
            }
        }
        Ok(value_swap(position, &bumped)?.value)
    };
    let mut buckets = Vec::with_capacity(n);
    for j in 0..n {
        buckets.push(0.5 * (with(up, Some(j))? - with(down, Some(j))?));
    }
    let parallel = 0.5 * (with(up, None)? - with(down, None)?);
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

/// One expiry's part of the vega term of an explanation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExpiryMove {
    /// The earlier market's variance swap level for this expiry of the later market,
    /// seen from the later time (its forward variance from the later time to the
    /// expiry); `None` when the expiry lies beyond the earlier market.
    pub earlier_variance_swap: Option<f64>,
    /// The same for the gamma swap level.
    pub earlier_gamma_swap: Option<f64>,
    /// Change of value from this expiry's levels moving to the later market's, currency.
    pub pnl: f64,
}

/// A change of value between two markets split into its causes (currency, signed by
/// side). The parts are taken in turn, each at the state the previous ones left:
/// realized accrual and time decay at the earlier discount factor, then spot (gamma
/// legs), then the levels expiry by expiry, then discounting at the later state; what
/// the parts leave is `unexplained`.
#[derive(Debug, Clone, PartialEq)]
pub struct Explain {
    /// Value against the earlier market.
    pub earlier_value: f64,
    /// Value against the later market.
    pub later_value: f64,
    /// Realized leg: returns observed between the two times.
    pub realized_accrual: f64,
    /// Implied leg of the earlier market losing the elapsed period (its weight falls
    /// from `(N - n_e)/N` to `(N - n_l)/N` and its level becomes the earlier market's
    /// forward level from the later time).
    pub time_decay: f64,
    /// Gamma legs: the change of `S_t / S_t0` (zero for variance swaps).
    pub spot: f64,
    /// Per expiry of the later market: its levels moving from the earlier market's
    /// forward levels to the later market's.
    pub vega_by_expiry: Vec<ExpiryMove>,
    /// Change of the discount factor to maturity (time and rates).
    pub discounting: f64,
    /// What the parts leave: `later - earlier - sum of the parts`.
    pub unexplained: f64,
}

/// Explains the change of value of one position between an earlier and a later market,
/// `elapsed` years apart. `earlier` and `later` are the same contract as of each time
/// (each with its own times, returns observed and realized data).
///
/// # Errors
/// [`RiskError`] when either valuation fails or `elapsed` is negative.
pub fn explain(
    earlier: &SwapPosition,
    earlier_market: &SwapMarket,
    later: &SwapPosition,
    later_market: &SwapMarket,
    elapsed: f64,
) -> Result<Explain, RiskError> {
    if !elapsed.is_finite() {
        return Err(RiskError::NotFinite("elapsed"));
    }
    if elapsed < 0.0 {
        return Err(RiskError::EarlierAfterLater);
    }
    let (e, l) = (legs(earlier, earlier_market)?, legs(later, later_market)?);
    let (earlier_value, later_value) = (value_of(earlier, &e).value, value_of(later, &l).value);
    let scale = notional_scale(later);
    let at_earlier_discount = scale * e.discount;
    let realized_accrual = at_earlier_discount * (l.past_weight * l.accrued - e.past_weight * e.accrued);
    let (time_decay, spot, vega_by_expiry) = if later.maturity > 0.0 {
        remaining_parts(later, (earlier_market, later_market), (&e, &l), elapsed, at_earlier_discount)?
    } else {
        let n = later_market.expiries.len();
        let moves = (0..n).map(|_| ExpiryMove { earlier_variance_swap: None, earlier_gamma_swap: None, pnl: 0.0 });
        (at_earlier_discount * (-e.future_weight * e.remaining), 0.0, moves.collect())
    };
    let discounting = scale * (l.discount - e.discount) * l.bracket(later.strike);
    let explained =
        realized_accrual + time_decay + spot + vega_by_expiry.iter().map(|m| m.pnl).sum::<f64>() + discounting;
    Ok(Explain {
        earlier_value,
        later_value,
        realized_accrual,
        time_decay,
        spot,
        vega_by_expiry,
        discounting,
        unexplained: later_value - earlier_value - explained,
    })
}

/// The parts of an explanation from the remaining period of a position not matured at
/// the later time: time decay, spot, and the levels expiry by expiry (`e` and `l` are
/// the position's legs on the earlier and the later market).
fn remaining_parts(
    later: &SwapPosition,
    (earlier_market, later_market): (&SwapMarket, &SwapMarket),
    (e, l): (&Legs, &Legs),
    elapsed: f64,
    at_earlier_discount: f64,
) -> Result<(f64, f64, Vec<ExpiryMove>), RiskError> {
    let earlier_term =
        TermStructure::new(&earlier_market.expiries, &earlier_market.variance_swap, &earlier_market.gamma_swap)?;
    let later_term = TermStructure::new(&later_market.expiries, &later_market.variance_swap, &later_market.gamma_swap)?;
    let from = later.start.max(0.0);
    // The earlier market's implied quantity of the later remaining period.
    let (rolled, _) =
        remaining_quantity(later.kind, &earlier_term, from + elapsed, later.maturity + elapsed, e.spot_ratio)?;
    let (later_at_earlier_spot, _) = remaining_quantity(later.kind, &later_term, from, later.maturity, e.spot_ratio)?;
    let time_decay = at_earlier_discount * (l.future_weight * rolled - e.future_weight * e.remaining);
    let spot = at_earlier_discount * l.future_weight * (l.remaining - later_at_earlier_spot);
    let rolled_levels = levels_rolled_forward(&earlier_term, earlier_market, later_market, elapsed);
    // Levels move to the later market's one expiry at a time; the value is linear in
    // the levels, so the order does not matter.
    let mut mixed = later_market.clone();
    for (j, (v, g)) in rolled_levels.iter().enumerate() {
        if let (Some(v), Some(g)) = (v, g) {
            mixed.variance_swap[j] = *v;
            mixed.gamma_swap[j] = *g;
        }
    }
    let quantity = |m: &SwapMarket| -> Result<f64, RiskError> {
        let term = TermStructure::new(&m.expiries, &m.variance_swap, &m.gamma_swap)?;
        Ok(remaining_quantity(later.kind, &term, from, later.maturity, e.spot_ratio)?.0)
    };
    let mut previous = quantity(&mixed)?;
    let mut moves = Vec::with_capacity(later_market.expiries.len());
    for (j, (v, g)) in rolled_levels.into_iter().enumerate() {
        mixed.variance_swap[j] = later_market.variance_swap[j];
        mixed.gamma_swap[j] = later_market.gamma_swap[j];
        let current = quantity(&mixed)?;
        let pnl = at_earlier_discount * l.future_weight * (current - previous);
        moves.push(ExpiryMove { earlier_variance_swap: v, earlier_gamma_swap: g, pnl });
        previous = current;
    }
    Ok((time_decay, spot, moves))
}

/// The earlier market's variance and gamma swap levels at each expiry of the later
/// market, seen from the later time (`elapsed` years on): its forward levels from then
/// to the expiry; `None` for an expiry beyond the earlier market's last.
fn levels_rolled_forward(
    earlier_term: &TermStructure,
    earlier_market: &SwapMarket,
    later_market: &SwapMarket,
    elapsed: f64,
) -> Vec<(Option<f64>, Option<f64>)> {
    let earlier_last = earlier_market.expiries[earlier_market.expiries.len() - 1];
    later_market
        .expiries
        .iter()
        .map(|&t| {
            if t + elapsed > earlier_last {
                return (None, None);
            }
            let variance = earlier_term.forward_variance_swap(elapsed, t + elapsed).ok();
            let gamma = earlier_term
                .total_gamma(t + elapsed)
                .and_then(|g| Ok((g - earlier_term.total_gamma(elapsed)?) / t))
                .ok();
            (variance, gamma)
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Values are exact products and sums of the inputs below: 1e-9 absolute on values of
    /// order 1e4 to 1e6 is rounding with a wide margin.
    const ABS_TOL: f64 = 1e-6;

    fn market() -> SwapMarket {
        SwapMarket {
            expiries: vec![0.25, 0.5, 1.0],
            variance_swap: vec![0.04, 0.045, 0.05],
            gamma_swap: vec![0.039, 0.043, 0.047],
            discount: vec![0.99, 0.98, 0.96],
            spot: Some(105.0),
        }
    }

    /// Variance notional 100 per vol point squared, so 1e6 per unit of decimal variance.
    fn swap(kind: SwapKind, start: f64, maturity: f64, accrual: (u32, u32), realized: Option<Accrued>) -> SwapPosition {
        SwapPosition {
            kind,
            side: Side::Long,
            strike: 0.042,
            variance_notional: 100.0,
            start,
            maturity,
            accrual: Accrual { observed: accrual.0, expected: accrual.1 },
            realized,
        }
    }

    #[test]
    fn at_inception_a_variance_swap_is_worth_n_d_vs_minus_k_in_vol_points() {
        // Hand-computed: maturity on the 0.5 expiry, VS = 0.045 (450 vol points squared),
        // K = 0.042 (420), D = 0.98: 100 * 0.98 * (450 - 420) = 2,940.
        let v = value_swap(&swap(SwapKind::Variance, 0.0, 0.5, (0, 126), None), &market()).expect("values");
        assert!((v.value - 2940.0).abs() < ABS_TOL, "{v:?}");
        assert_eq!(v.implied_level, Some(0.045));
        assert!(v.accrued_leg.abs() < 1e-300);
    }

    #[test]
    fn a_matured_swap_settles_at_n_rv_minus_k_and_short_flips_sign() {
        let realized = Some(Accrued { variance: 0.05, gamma_variance: None, start_spot: None });
        let mut p = swap(SwapKind::Variance, -1.0, 0.0, (252, 252), realized);
        let v = value_swap(&p, &market()).expect("values");
        assert!((v.value - 100.0 * (500.0 - 420.0)).abs() < ABS_TOL, "{v:?}");
        assert_eq!((v.discount, v.implied_level), (1.0, None));
        p.side = Side::Short;
        assert!((value_swap(&p, &market()).expect("values").value + 8000.0).abs() < ABS_TOL);
        p.realized = None;
        assert_eq!(value_swap(&p, &market()), Err(RiskError::NeedsRealized));
    }

    #[test]
    fn a_seasoned_variance_swap_weighs_realized_by_returns_observed() {
        // 120 of 180 returns observed, 0.25 y left on the 0.25 expiry (VS 0.04, D 0.99).
        let realized = Some(Accrued { variance: 0.06, gamma_variance: None, start_spot: None });
        let v = value_swap(&swap(SwapKind::Variance, -0.5, 0.25, (120, 180), realized), &market()).expect("values");
        let expected = 1e6 * 0.99 * (120.0 / 180.0 * 0.06 + 60.0 / 180.0 * 0.04 - 0.042);
        assert!((v.value - expected).abs() < ABS_TOL, "{v:?} vs {expected}");
    }

    #[test]
    fn seasoned_gamma_and_leverage_weight_the_future_by_spot_over_start_spot() {
        let realized = Some(Accrued { variance: 0.05, gamma_variance: Some(0.052), start_spot: Some(100.0) });
        let g = value_swap(&swap(SwapKind::Gamma, -0.25, 0.25, (63, 126), realized), &market()).expect("values");
        let expected_gamma = 1e6 * 0.99 * (0.5 * 0.052 + 0.5 * 1.05 * 0.039 - 0.042);
        assert!((g.value - expected_gamma).abs() < ABS_TOL, "{g:?}");
        let mut lev = swap(SwapKind::Leverage, -0.25, 0.25, (63, 126), realized);
        lev.strike = -0.001;
        let l = value_swap(&lev, &market()).expect("values");
        let expected_leverage = 1e6 * 0.99 * (0.5 * 0.002 + 0.5 * (1.05 * 0.039 - 0.04) + 0.001);
        assert!((l.value - expected_leverage).abs() < ABS_TOL, "{l:?}");
    }

    #[test]
    fn no_extrapolation_and_missing_or_inconsistent_data_are_errors() {
        let m = market();
        assert!(matches!(
            value_swap(&swap(SwapKind::Variance, 0.0, 1.5, (0, 378), None), &m),
            Err(RiskError::BeyondLastExpiry { .. })
        ));
        assert_eq!(
            value_swap(&swap(SwapKind::Variance, -0.1, 0.5, (25, 150), None), &m),
            Err(RiskError::NeedsRealized)
        );
        assert_eq!(value_swap(&swap(SwapKind::Gamma, 0.1, 0.5, (0, 100), None), &m), Err(RiskError::ForwardStartGamma));
        assert_eq!(value_swap(&swap(SwapKind::Variance, 0.0, 0.5, (0, 0), None), &m), Err(RiskError::NoReturns));
        let realized = Some(Accrued { variance: 0.05, gamma_variance: None, start_spot: None });
        assert_eq!(
            value_swap(&swap(SwapKind::Variance, -0.1, 0.5, (200, 150), realized), &m),
            Err(RiskError::ObservedBeyondExpected { observed: 200, expected: 150 })
        );
    }

    #[test]
    fn vega_is_the_symmetric_difference_and_buckets_sum_to_parallel() {
        let m = market();
        let (up, down) = (ShiftedLevels::vols_moved(&m, VOL_POINT), ShiftedLevels::vols_moved(&m, -VOL_POINT));
        let realized = Some(Accrued { variance: 0.05, gamma_variance: Some(0.052), start_spot: Some(100.0) });
        for p in [
            swap(SwapKind::Variance, -0.2, 0.75, (50, 240), realized),
            swap(SwapKind::Leverage, -0.1, 0.4, (25, 126), realized),
        ] {
            let vega = swap_vega(&p, &m, &up, &down).expect("vega");
            let sum: f64 = vega.buckets.iter().sum();
            assert!((sum - vega.parallel).abs() <= 1e-12 * vega.parallel.abs(), "{vega:?}");
        }
        // On an expiry: 1e6 * D * ((s + 0.01)^2 - (s - 0.01)^2) / 2 = 1e6 * D * 0.02 * s.
        let vega = swap_vega(&swap(SwapKind::Variance, 0.0, 0.5, (0, 126), None), &m, &up, &down).expect("vega");
        let expected = 1e6 * 0.98 * 0.02 * 0.045f64.sqrt();
        assert!((vega.parallel - expected).abs() < ABS_TOL && (vega.buckets[1] - expected).abs() < ABS_TOL, "{vega:?}");
        // Between the 0.5 and 1.0 expiries: vega on those two only.
        let vega = swap_vega(&swap(SwapKind::Variance, 0.0, 0.75, (0, 189), None), &m, &up, &down).expect("vega");
        assert!(vega.buckets[0].abs() < 1e-300 && vega.buckets[1] > 0.0 && vega.buckets[2] > 0.0, "{vega:?}");
        // Matured: none.
        let matured = swap(SwapKind::Variance, -1.0, -0.01, (252, 252), realized);
        assert!(swap_vega(&matured, &m, &up, &down).expect("vega").parallel.abs() < 1e-300);
    }

    #[test]
    fn explain_parts_add_up_and_a_level_move_is_all_vega() {
        // Same time, levels up: everything is vega, nothing unexplained.
        let earlier = market();
        let mut later = market();
        for v in later.variance_swap.iter_mut().chain(later.gamma_swap.iter_mut()) {
            *v = (v.sqrt() + VOL_POINT).powi(2);
        }
        let p = swap(SwapKind::Variance, 0.0, 0.75, (0, 189), None);
        let x = explain(&p, &earlier, &p, &later, 0.0).expect("explains");
        let vega: f64 = x.vega_by_expiry.iter().map(|m| m.pnl).sum();
        assert!((vega - (x.later_value - x.earlier_value)).abs() < ABS_TOL, "{x:?}");
        assert!(x.realized_accrual.abs() < ABS_TOL && x.time_decay.abs() < ABS_TOL && x.discounting.abs() < ABS_TOL);
        assert!(x.unexplained.abs() < ABS_TOL, "{x:?}");
        // A month on, with returns observed, a spot move and new discounting: the parts
        // add up and the rest is rounding (the later expiries are the earlier ones aged).
        let elapsed = 1.0 / 12.0;
        let mut aged = later.clone();
        aged.expiries = earlier.expiries.iter().map(|t| t - elapsed).collect();
        aged.discount = vec![0.995, 0.985, 0.965];
        aged.spot = Some(101.0);
        let realized_e = Some(Accrued { variance: 0.05, gamma_variance: Some(0.051), start_spot: Some(100.0) });
        let realized_l = Some(Accrued { variance: 0.055, gamma_variance: Some(0.056), start_spot: Some(100.0) });
        for kind in [SwapKind::Variance, SwapKind::Gamma, SwapKind::Leverage] {
            let pe = swap(kind, -0.25, 0.5, (63, 189), realized_e);
            let pl = SwapPosition {
                start: -0.25 - elapsed,
                maturity: 0.5 - elapsed,
                accrual: Accrual { observed: 84, expected: 189 },
                realized: realized_l,
                ..pe
            };
            let x = explain(&pe, &earlier, &pl, &aged, elapsed).expect("explains");
            let change = x.later_value - x.earlier_value;
            assert!(x.unexplained.abs() < 1e-9 * change.abs().max(1.0), "{kind:?}: {x:?}");
            assert!(x.realized_accrual.abs() > 0.0 && x.discounting.abs() > 0.0);
            assert_eq!(x.spot.abs() > 0.0, kind != SwapKind::Variance, "{kind:?}: {x:?}");
        }
        assert_eq!(explain(&p, &earlier, &p, &later, -0.1), Err(RiskError::EarlierAfterLater));
    }
}
