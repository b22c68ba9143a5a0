//! The P&L explanation of a book between an earlier snapshot and the valued one, split
//! position by position into realized accrual, time decay, spot, vega by expiry and
//! discounting.

use super::documents::{BookDoc, ExpiryMoveDoc, ExplainDoc, ExplainPartsDoc, PositionExplainDoc, SkippedDoc};
use super::lifecycle::position_at;
use super::positions::ValidPosition;
use super::pricing::{risk_problem, Priced};
use super::VOL_POINTS_PER_VOL;
use crate::analytics::observations::ObservationCalendar;
use crate::analytics::seasoned_swaps::{explain, Explain};
use crate::wire::input::year_fraction;
use crate::wire::path::{FieldPath, Problem};

/// Vol points between two decimal variance levels' vols; `None` for a negative level.
fn vol_change(later: f64, earlier: Option<f64>) -> Option<f64> {
    let earlier = earlier?;
    (later >= 0.0 && earlier >= 0.0).then(|| VOL_POINTS_PER_VOL * (later.sqrt() - earlier.sqrt()))
}

fn add_parts(total: &mut ExplainPartsDoc, p: &ExplainPartsDoc) {
    total.earlier_value += p.earlier_value;
    total.later_value += p.later_value;
    total.change += p.change;
    total.realized_accrual += p.realized_accrual;
    total.time_decay += p.time_decay;
    total.spot += p.spot;
    total.vega += p.vega;
    total.discounting += p.discounting;
    total.unexplained += p.unexplained;
}

/// The two valuations an explanation compares.
struct Comparison<'c, 'a> {
    earlier: &'c Priced<'a>,
    later: &'c Priced<'a>,
    calendar: &'c ObservationCalendar,
    /// Years from the earlier valuation time to the later.
    elapsed: f64,
    /// Observation days from the earlier valuation date up to the day before the later.
    between: u32,
}

/// What became of one position in an explanation.
enum Explained {
    /// Its change of value, split into causes.
    Done(PositionExplainDoc),
    /// Left out: it has no value (a matured position without its settlement) on one of
    /// the snapshots.
    Skipped(SkippedDoc),
}

/// Explains each position's change of value from `earlier` to `later`.
pub(super) fn explain_book(
    book: &BookDoc,
    valid: &[(usize, ValidPosition)],
    calendar: &ObservationCalendar,
    earlier: &Priced<'_>,
    later: &Priced<'_>,
    problems: &mut Vec<Problem>,
) -> ExplainDoc {
    let root = FieldPath::root().field("positions");
    let (t_e, t_l) = (earlier.snapshot.as_of, later.snapshot.as_of);
    let elapsed = year_fraction(t_e, t_l);
    let mut out = ExplainDoc {
        since_as_of: t_e.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        positions: Vec::new(),
        skipped: Vec::new(),
        book: ExplainPartsDoc::default(),
    };
    if elapsed < 0.0 {
        problems.push(Problem {
            path: FieldPath::root().field("since_snapshot").field("as_of"),
            message: format!("the earlier snapshot's as_of {t_e} is after the valued snapshot's {t_l}"),
        });
        return out;
    }
    let between = t_l
        .date_naive()
        .pred_opt()
        .and_then(|last| Some(calendar.count_after_through(t_e.date_naive().pred_opt()?, last)))
        .unwrap_or(0);
    let comparison = Comparison { earlier, later, calendar, elapsed, between };
    for (i, p) in valid {
        match explain_position(&book.positions[*i].id, p, &root.index(*i), &comparison) {
            Ok(Explained::Done(position)) => {
                add_parts(&mut out.book, &position.parts);
                out.positions.push(position);
            }
            Ok(Explained::Skipped(skipped)) => out.skipped.push(skipped),
            Err(problem) => problems.push(problem),
        }
    }
    out
}

/// Explains one position's change of value, or says why it is left out.
fn explain_position(
    id: &str,
    p: &ValidPosition,
    path: &FieldPath,
    c: &Comparison<'_, '_>,
) -> Result<Explained, Problem> {
    let (t_e, t_l) = (c.earlier.snapshot.as_of, c.later.snapshot.as_of);
    let l = position_at(p, t_l, c.calendar, None, path)?;
    let e = position_at(p, t_e, c.calendar, Some(c.between), path)?;
    if let Some(reason) = e.missing_settlement.as_ref().or(l.missing_settlement.as_ref()) {
        return Ok(Explained::Skipped(SkippedDoc { id: id.to_string(), reason: reason.clone() }));
    }
    let x = explain(&e.swap, &c.earlier.market, &l.swap, &c.later.market, c.elapsed).map_err(|err| {
        let mut problem = risk_problem(&err, path);
        problem.message = format!("on the earlier snapshot ({t_e}): {}", problem.message);
        problem
    })?;
    Ok(Explained::Done(explanation_doc(id, &x, c.later)))
}

/// The document of one position's explanation, the vega part by expiry of `later`.
fn explanation_doc(id: &str, x: &Explain, later: &Priced<'_>) -> PositionExplainDoc {
    let vega_by_expiry: Vec<ExpiryMoveDoc> = x
        .vega_by_expiry
        .iter()
        .enumerate()
        .map(|(j, m)| ExpiryMoveDoc {
            tau: later.market.expiries[j],
            expiry: later.expiry_of(j),
            variance_swap_vol_change: vol_change(later.market.variance_swap[j], m.earlier_variance_swap),
            gamma_swap_vol_change: vol_change(later.market.gamma_swap[j], m.earlier_gamma_swap),
            pnl: m.pnl,
        })
        .collect();
    let parts = ExplainPartsDoc {
        earlier_value: x.earlier_value,
        later_value: x.later_value,
        change: x.later_value - x.earlier_value,
        realized_accrual: x.realized_accrual,
        time_decay: x.time_decay,
        spot: x.spot,
        vega: x.vega_by_expiry.iter().map(|m| m.pnl).sum(),
        discounting: x.discounting,
        unexplained: x.unexplained,
    };
    PositionExplainDoc { id: id.to_string(), parts, vega_by_expiry }
}
