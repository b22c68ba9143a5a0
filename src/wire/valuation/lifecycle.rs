//! A validated position as of one valuation time: where it stands in its life, how
//! many of its returns have been observed, and what has been realized so far.

use super::documents::LifecycleDoc;
use super::positions::{RealizedInput, ValidPosition};
use crate::analytics::observations::ObservationCalendar;
use crate::analytics::realized::{realized_variance, TRADING_DAYS_PER_YEAR};
use crate::analytics::seasoned_swaps::{Accrual, Accrued, SwapPosition};
use crate::wire::input::year_fraction;
use crate::wire::path::{FieldPath, Problem};
use chrono::{DateTime, Utc};

/// A position as of one valuation time, with what the document reports of it.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct DatedPosition {
    pub(super) swap: SwapPosition,
    pub(super) status: LifecycleDoc,
    /// Why a matured position has no settlement.
    pub(super) missing_settlement: Option<String>,
}

/// The realized data of the first `returns` returns of a fixings series.
fn accrued_from_fixings(closes: &[f64], returns: u32) -> Option<Accrued> {
    let closes = closes.get(..=returns as usize)?;
    let r = realized_variance(closes, TRADING_DAYS_PER_YEAR).ok()?;
    Some(Accrued { variance: r.variance, gamma_variance: Some(r.gamma_variance), start_spot: Some(r.start_spot) })
}

/// Returns of a position as of one valuation time.
#[derive(Debug, Clone, Copy)]
struct Returns {
    /// Observed by this valuation time.
    observed: u32,
    /// Observed by the valued snapshot (the same as `observed` unless explaining).
    latest: u32,
    /// From start to maturity.
    expected: u32,
}

/// The position as of `as_of`. `returns_since` is, for an earlier valuation of an
/// explanation, the observation days between it and the valued snapshot: that many
/// fewer returns have been observed.
pub(super) fn position_at(
    p: &ValidPosition,
    as_of: DateTime<Utc>,
    calendar: &ObservationCalendar,
    returns_since: Option<u32>,
    path: &FieldPath,
) -> Result<DatedPosition, Problem> {
    let (start_day, maturity_day) = (p.start.date_naive(), p.maturity.date_naive());
    let expected = calendar.count_after_through(start_day, maturity_day);
    if expected == 0 {
        return Err(Problem {
            path: path.field("maturity"),
            message: format!(
                "no observation day after the start date {start_day} up to the maturity date {maturity_day}"
            ),
        });
    }
    let status = lifecycle(p, as_of);
    let latest = returns_observed(p, as_of, status, expected, calendar, path)?;
    let observed = match returns_since {
        None => latest,
        Some(since) => latest.saturating_sub(since),
    };
    let returns = Returns { observed, latest, expected };
    let (realized, missing_settlement) = realized_so_far(p, status, returns, returns_since.is_some(), path)?;
    let swap = SwapPosition {
        kind: p.kind,
        side: p.side,
        strike: p.strike,
        variance_notional: p.variance_notional,
        start: year_fraction(as_of, p.start),
        maturity: year_fraction(as_of, p.maturity),
        accrual: Accrual { observed: if status == LifecycleDoc::Matured { expected } else { observed }, expected },
        realized,
    };
    Ok(DatedPosition { swap, status, missing_settlement })
}

/// Where a position stands in its life at `as_of`.
fn lifecycle(p: &ValidPosition, as_of: DateTime<Utc>) -> LifecycleDoc {
    if p.maturity <= as_of {
        LifecycleDoc::Matured
    } else if p.start > as_of {
        LifecycleDoc::NotStarted
    } else if p.maturity.date_naive() == as_of.date_naive() {
        LifecycleDoc::MaturesToday
    } else {
        LifecycleDoc::Accruing
    }
}

/// Returns observed by `as_of`: as the position gives them (`realized.returns`, or the
/// fixings less the one at start), else counted on the calendar (all of them once
/// matured). An error names the field when that is more than the `expected` returns.
fn returns_observed(
    p: &ValidPosition,
    as_of: DateTime<Utc>,
    status: LifecycleDoc,
    expected: u32,
    calendar: &ObservationCalendar,
    path: &FieldPath,
) -> Result<u32, Problem> {
    let (start_day, maturity_day) = (p.start.date_naive(), p.maturity.date_naive());
    let by_date = if status == LifecycleDoc::Matured {
        expected
    } else {
        calendar.observed_before(start_day, as_of.date_naive())
    };
    let given = match &p.realized {
        RealizedInput::None => None,
        RealizedInput::Given { returns, .. } => *returns,
        RealizedInput::Fixings(closes) => Some((closes.len() - 1) as u32),
    };
    let latest = given.unwrap_or(by_date);
    if latest > expected {
        let field = if matches!(p.realized, RealizedInput::Fixings(_)) { "fixings" } else { "realized" };
        return Err(Problem {
            path: path.field(field),
            message: format!(
                "{latest} returns observed, but the swap has {expected} from {start_day} to {maturity_day}"
            ),
        });
    }
    Ok(latest)
}

/// What has been realized over the `observed` returns, and why a matured position has
/// no settlement when it has none. `explaining` is true for the earlier valuation of an
/// explanation, which needs the realized data at that date (fixings, not `realized`).
fn realized_so_far(
    p: &ValidPosition,
    status: LifecycleDoc,
    returns: Returns,
    explaining: bool,
    path: &FieldPath,
) -> Result<(Option<Accrued>, Option<String>), Problem> {
    let Returns { observed, latest, expected } = returns;
    let mut missing_settlement = None;
    let realized = match &p.realized {
        RealizedInput::None => None,
        RealizedInput::Given { accrued, .. } => {
            if explaining && observed != latest {
                return Err(Problem {
                    path: path.field("realized"),
                    message: "explaining across observation days needs the realized variance at both dates: give \
                              fixings instead of realized"
                        .into(),
                });
            }
            Some(*accrued)
        }
        RealizedInput::Fixings(closes) => {
            if status == LifecycleDoc::Matured && observed < expected {
                missing_settlement =
                    Some(format!("fixings cover {observed} of the {expected} returns: settlement needs them all"));
            }
            accrued_from_fixings(closes, observed)
        }
    };
    if status == LifecycleDoc::Matured && realized.is_none() && missing_settlement.is_none() {
        missing_settlement = Some("matured: give realized or fixings for its settlement amount".into());
    }
    Ok((realized, missing_settlement))
}
