//! A book's positions validated, independent of the valuation time: strike and
//! notional in desk units, dates, what has been realized, and the book's holidays.

use super::documents::{BookDoc, KindDoc, PositionDoc, SideDoc};
use super::{positive, VOL_POINTS_PER_VOL};
use crate::analytics::observations::ObservationCalendar;
use crate::analytics::seasoned_swaps::{Accrued, Side, SwapKind};
use crate::wire::path::{FieldPath, InputErrors, Problem};
use chrono::{DateTime, NaiveDate, Utc};

/// `text` as a UTC time, or a problem at `path` ([`crate::wire::time::parse_utc`]: the
/// same rules as a snapshot's times, leap seconds refused).
pub(super) fn parse_time(text: &str, path: FieldPath, problems: &mut Vec<Problem>) -> Option<DateTime<Utc>> {
    crate::wire::time::parse_utc(text).map_err(|message| problems.push(Problem { path, message })).ok()
}

/// What a position says has been realized.
#[derive(Debug, Clone, PartialEq)]
pub(super) enum RealizedInput {
    None,
    Given { accrued: Accrued, returns: Option<u32> },
    Fixings(Vec<f64>),
}

/// A validated position, independent of the valuation time.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct ValidPosition {
    pub(super) kind: SwapKind,
    pub(super) side: Side,
    /// Annualised decimal variance.
    pub(super) strike: f64,
    /// Currency per vol point squared.
    pub(super) variance_notional: f64,
    pub(super) start: DateTime<Utc>,
    pub(super) maturity: DateTime<Utc>,
    pub(super) realized: RealizedInput,
}

fn validate_strike(doc: &PositionDoc, push: &mut impl FnMut(&str, String)) -> Option<f64> {
    let leverage = doc.kind == KindDoc::Leverage;
    match (doc.strike, doc.strike_vol) {
        (Some(_), Some(_)) => {
            push("strike_vol", "give strike or strike_vol, not both".into());
            None
        }
        (None, None) => {
            push("strike", "give strike (decimal variance, 0.0676 for 26 vol) or strike_vol (0.26)".into());
            None
        }
        (Some(k), None) if !k.is_finite() || (!leverage && k <= 0.0) => {
            push("strike", format!("must be {}, got {k}", if leverage { "finite" } else { "positive" }));
            None
        }
        (Some(k), None) => Some(k),
        (None, Some(_)) if leverage => {
            push("strike_vol", "a leverage swap strike is a variance level: give strike".into());
            None
        }
        (None, Some(v)) if !positive(v) => {
            push("strike_vol", format!("must be positive, got {v}"));
            None
        }
        (None, Some(v)) => Some(v * v),
    }
}

/// The desk variance notional (currency per vol point squared).
fn validate_notional(doc: &PositionDoc, strike: Option<f64>, push: &mut impl FnMut(&str, String)) -> Option<f64> {
    match (doc.variance_notional, doc.vega_notional, strike) {
        (Some(_), Some(_), _) => {
            push("vega_notional", "give variance_notional or vega_notional, not both".into());
            None
        }
        (None, None, _) => {
            push("variance_notional", "give variance_notional (per vol point squared) or vega_notional".into());
            None
        }
        (Some(n), None, _) if !positive(n) => {
            push("variance_notional", format!("must be positive, got {n}"));
            None
        }
        (Some(n), None, _) => Some(n),
        (None, Some(_), _) if doc.kind == KindDoc::Leverage => {
            push("vega_notional", "a leverage swap has no vega notional: give variance_notional".into());
            None
        }
        (None, Some(v), _) if !positive(v) => {
            push("vega_notional", format!("must be positive, got {v}"));
            None
        }
        // N_var = N_vega / (2 K), K in vol points (MATH.md section 8).
        (None, Some(v), Some(k)) => Some(v / (2.0 * VOL_POINTS_PER_VOL * k.sqrt())),
        (None, Some(_), None) => None,
    }
}

fn validate_realized(doc: &PositionDoc, path: &FieldPath, problems: &mut Vec<Problem>) -> Option<RealizedInput> {
    match (&doc.realized, &doc.fixings) {
        (Some(_), Some(_)) => {
            problems
                .push(Problem { path: path.field("fixings"), message: "give realized or fixings, not both".into() });
            None
        }
        (None, None) => Some(RealizedInput::None),
        (Some(r), None) => {
            let rp = path.field("realized");
            let before = problems.len();
            if !(r.variance.is_finite() && r.variance >= 0.0) {
                problems.push(Problem {
                    path: rp.field("variance"),
                    message: format!("must be non-negative, got {}", r.variance),
                });
            }
            if let Some(g) = r.gamma_variance.filter(|g| !(g.is_finite() && *g >= 0.0)) {
                problems.push(Problem {
                    path: rp.field("gamma_variance"),
                    message: format!("must be non-negative, got {g}"),
                });
            }
            if let Some(s) = r.start_spot.filter(|s| !positive(*s)) {
                problems.push(Problem { path: rp.field("start_spot"), message: format!("must be positive, got {s}") });
            }
            (problems.len() == before).then_some(RealizedInput::Given {
                accrued: Accrued { variance: r.variance, gamma_variance: r.gamma_variance, start_spot: r.start_spot },
                returns: r.returns,
            })
        }
        (None, Some(closes)) => {
            if let Some((index, value)) = closes.iter().enumerate().find(|(_, c)| !positive(**c)) {
                problems.push(Problem {
                    path: path.field("fixings").index(index),
                    message: format!("must be a positive close, got {value}"),
                });
                return None;
            }
            if closes.is_empty() {
                problems
                    .push(Problem { path: path.field("fixings"), message: "needs at least the close at start".into() });
                return None;
            }
            Some(RealizedInput::Fixings(closes.clone()))
        }
    }
}

/// Validates one position.
fn validate_position(doc: &PositionDoc, path: &FieldPath, problems: &mut Vec<Problem>) -> Option<ValidPosition> {
    let before = problems.len();
    let mut push = |field: &str, message: String| problems.push(Problem { path: path.field(field), message });
    if doc.id.trim().is_empty() {
        push("id", "must not be empty".into());
    }
    let strike = validate_strike(doc, &mut push);
    let notional = validate_notional(doc, strike, &mut push);
    match doc.cap_multiple {
        Some(c) if !(c.is_finite() && c > 1.0) => push("cap_multiple", format!("must be a multiple above 1, got {c}")),
        Some(_) => push(
            "cap_multiple",
            "capped swaps are not valued yet: a cap needs the distribution of realized variance, not only its \
             mean; remove the cap only if it is far out of reach"
                .into(),
        ),
        None => {}
    }
    let start = parse_time(&doc.start, path.field("start"), problems);
    let maturity = parse_time(&doc.maturity, path.field("maturity"), problems);
    if let (Some(s), Some(m)) = (start, maturity) {
        if m <= s {
            problems
                .push(Problem { path: path.field("maturity"), message: format!("must be after start {}", doc.start) });
        }
    }
    let realized = validate_realized(doc, path, problems);
    if problems.len() > before {
        return None;
    }
    Some(ValidPosition {
        kind: match doc.kind {
            KindDoc::Variance => SwapKind::Variance,
            KindDoc::Gamma => SwapKind::Gamma,
            KindDoc::Leverage => SwapKind::Leverage,
        },
        side: match doc.side {
            SideDoc::Long => Side::Long,
            SideDoc::Short => Side::Short,
        },
        strike: strike?,
        variance_notional: notional?,
        start: start?,
        maturity: maturity?,
        realized: realized?,
    })
}

fn parse_holidays(book: &BookDoc, problems: &mut Vec<Problem>) -> ObservationCalendar {
    let mut days = Vec::new();
    for (i, text) in book.holidays.iter().flatten().enumerate() {
        match NaiveDate::parse_from_str(text, "%Y-%m-%d") {
            Ok(d) => days.push(d),
            Err(e) => problems.push(Problem {
                path: FieldPath::root().field("holidays").index(i),
                message: format!("must be a date YYYY-MM-DD ({e}), got {text:?}"),
            }),
        }
    }
    ObservationCalendar::with_holidays(days)
}

/// Validates every position of `book` (ids unique) and its holidays: the observation
/// calendar and the valid positions with their index in the book.
///
/// # Errors
/// [`InputErrors`] with paths `positions[i].<field>` and `holidays[i]`.
pub(super) fn validate_book(book: &BookDoc) -> Result<(ObservationCalendar, Vec<(usize, ValidPosition)>), InputErrors> {
    let mut problems = Vec::new();
    let root = FieldPath::root().field("positions");
    if book.positions.is_empty() {
        problems.push(Problem { path: root.clone(), message: "needs at least one position".into() });
    }
    let calendar = parse_holidays(book, &mut problems);
    let mut valid = Vec::new();
    for (i, doc) in book.positions.iter().enumerate() {
        let path = root.index(i);
        if book.positions[..i].iter().any(|p| p.id == doc.id) {
            problems.push(Problem { path: path.field("id"), message: format!("{:?} appears twice", doc.id) });
        }
        if let Some(p) = validate_position(doc, &path, &mut problems) {
            valid.push((i, p));
        }
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    Ok((calendar, valid))
}
