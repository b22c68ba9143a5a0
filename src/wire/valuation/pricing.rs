//! One position valued on one analysed snapshot: value, legs, implied level and vega
//! by expiry, and the field a valuation error points to.

use super::documents::{KindDoc, LifecycleDoc, PositionValueDoc, SideDoc, VegaBucketDoc};
use super::lifecycle::DatedPosition;
use super::VOL_POINTS_PER_VOL;
use crate::analytics::analysis::Analysis;
use crate::analytics::seasoned_swaps::{market_of, swap_vega, value_swap, RiskError, ShiftedLevels, SwapMarket};
use crate::wire::input::ValidSnapshot;
use crate::wire::path::{FieldPath, Problem};

/// The field a valuation error points to.
pub(super) fn risk_problem(e: &RiskError, path: &FieldPath) -> Problem {
    let field = match e {
        RiskError::BeyondLastExpiry { .. } | RiskError::MaturityBeforeStart | RiskError::NoReturns => {
            path.field("maturity")
        }
        RiskError::NeedsRealized | RiskError::ObservedBeyondExpected { .. } => path.field("realized"),
        RiskError::NeedsGammaVariance => path.field("realized").field("gamma_variance"),
        RiskError::NeedsSpot(what) if what.starts_with("realized") => path.field("realized").field("start_spot"),
        RiskError::NeedsSpot(_) => FieldPath::root().field("snapshot").field("spot"),
        RiskError::ForwardStartGamma => path.field("start"),
        RiskError::EarlierAfterLater => FieldPath::root().field("since_snapshot"),
        RiskError::NotFinite(_) | RiskError::Market(_) => path.clone(),
    };
    Problem { path: field, message: e.to_string() }
}

/// A snapshot and its analysis, ready to value against.
pub(super) struct Priced<'a> {
    pub(super) snapshot: &'a ValidSnapshot,
    pub(super) analysis: &'a Analysis,
    pub(super) market: SwapMarket,
}

impl<'a> Priced<'a> {
    pub(super) fn new(snapshot: &'a ValidSnapshot, analysis: &'a Analysis) -> Self {
        Self { snapshot, analysis, market: market_of(&analysis.slices, snapshot.spot) }
    }

    pub(super) fn expiry_of(&self, j: usize) -> Option<String> {
        let s = &self.analysis.slices[j];
        self.snapshot.expiries.get(s.input_index).cloned().flatten()
    }
}

pub(super) fn value_position(
    id: &str,
    kind: KindDoc,
    side: SideDoc,
    dated: &DatedPosition,
    priced: &Priced<'_>,
    shifted: (&ShiftedLevels, &ShiftedLevels),
) -> Result<PositionValueDoc, RiskError> {
    let swap = &dated.swap;
    let settles = dated.status == LifecycleDoc::Matured;
    let (value, vega) = if settles && dated.missing_settlement.is_some() {
        (None, None)
    } else {
        let v = value_swap(swap, &priced.market)?;
        (Some(v), Some(swap_vega(swap, &priced.market, shifted.0, shifted.1)?))
    };
    let vega_buckets = (0..priced.market.expiries.len())
        .map(|j| VegaBucketDoc {
            tau: priced.market.expiries[j],
            expiry: priced.expiry_of(j),
            vega: vega.as_ref().map_or(0.0, |v| v.buckets[j]),
        })
        .collect();
    let amount = value.map(|v| v.value);
    Ok(PositionValueDoc {
        id: id.to_string(),
        kind,
        side,
        status: dated.status,
        value: if settles { None } else { amount },
        settlement: if settles { amount } else { None },
        accrued_leg: value.map_or(0.0, |v| v.accrued_leg),
        remaining_leg: value.map_or(0.0, |v| v.remaining_leg),
        implied_level: value.and_then(|v| v.implied_level),
        discount: value.map_or(1.0, |v| v.discount),
        variance_notional: swap.variance_notional,
        vega_notional: (kind != KindDoc::Leverage)
            .then(|| 2.0 * VOL_POINTS_PER_VOL * swap.strike.sqrt() * swap.variance_notional),
        observed_returns: swap.accrual.observed,
        expected_returns: swap.accrual.expected,
        vega_buckets,
        parallel_vega: vega.map_or(0.0, |v| v.parallel),
        note: dated.missing_settlement.clone(),
    })
}
