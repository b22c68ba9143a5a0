//! Swap books and closes as users write them, their validation, and the valuation,
//! P&L explanation and realized-variance documents returned.
//!
//! Units are the desk's (MATH.md section 8): `variance_notional` in currency per vol
//! point squared, `vega_notional` in currency per vol point (`variance_notional =
//! vega_notional / (2 K)` with `K` the strike in vol points), payoffs in vol points
//! squared; strikes stay decimal in the input as everywhere else in the API. Every
//! valuation document states them in its `conventions`.

use super::input::{year_fraction, ValidSnapshot};
use super::path::{FieldPath, InputErrors, Problem};
use crate::analytics::analysis::Analysis;
use crate::analytics::observations::ObservationCalendar;
use crate::analytics::realized::{realized_variance, TRADING_DAYS_PER_YEAR};
use crate::analytics::seasoned_swaps::{
    explain, market_of, swap_vega, value_swap, Accrual, Accrued, RiskError, ShiftedLevels, Side, SwapKind, SwapMarket,
    SwapPosition, VOL_POINT,
};
use chrono::{DateTime, NaiveDate, Utc};
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

/// Vol points in one unit of decimal vol.
const VOL_POINTS_PER_VOL: f64 = 100.0;

/// Swap type names.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum KindDoc {
    /// Variance swap.
    Variance,
    /// Gamma swap.
    Gamma,
    /// Leverage swap (gamma minus variance legs).
    Leverage,
}

/// Side names.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum SideDoc {
    /// Receives realized.
    Long,
    /// Pays realized.
    Short,
}

/// Realized so far, annualised decimal variance (0.0441 for 21 vol).
#[derive(Debug, Clone, Copy, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RealizedDoc {
    /// Realized variance over the returns observed since `start`, annualised by 252
    /// returns per year.
    pub variance: f64,
    /// Gamma-weighted realized variance since `start` (gamma and leverage swaps).
    #[serde(default)]
    pub gamma_variance: Option<f64>,
    /// Level of the underlying at `start` (gamma and leverage swaps).
    #[serde(default)]
    pub start_spot: Option<f64>,
    /// Daily returns observed so far; by default the observation days after `start` and
    /// before the valuation date (weekdays less the book's holidays).
    #[serde(default)]
    #[schema(minimum = 0)]
    pub returns: Option<u32>,
}

/// A swap position.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PositionDoc {
    /// Your identifier, unique in the book.
    pub id: String,
    /// `variance`, `gamma` or `leverage`.
    pub kind: KindDoc,
    /// Start of the realized period, RFC 3339; the close of its date is the initial level.
    pub start: String,
    /// Maturity, RFC 3339; must not lie beyond the snapshot's last expiry. The close of
    /// its date is the last observation.
    pub maturity: String,
    /// Strike, annualised decimal variance (0.0676 for 26 vol), or give `strike_vol`.
    #[serde(default)]
    pub strike: Option<f64>,
    /// Strike as a decimal vol (0.26 for 26 vol; variance and gamma swaps).
    #[serde(default)]
    pub strike_vol: Option<f64>,
    /// Currency per vol point squared: the swap pays `variance_notional (sigma^2 - K^2)`
    /// with vols in vol points (or give `vega_notional`).
    #[serde(default)]
    pub variance_notional: Option<f64>,
    /// Currency per vol point: `variance_notional = vega_notional / (2 K)` with `K` the
    /// strike in vol points (variance and gamma swaps).
    #[serde(default)]
    pub vega_notional: Option<f64>,
    /// `long` or `short`.
    pub side: SideDoc,
    /// Realized so far (or give `fixings`); may be omitted before the first return.
    #[serde(default, deserialize_with = "super::strict::optional_object")]
    pub realized: Option<RealizedDoc>,
    /// Daily closes on the observation days since `start`, the first at `start`: their
    /// count less one is the number of returns observed.
    #[serde(default)]
    pub fixings: Option<Vec<f64>>,
    /// Cap on the realized vol as a multiple of the strike vol (2.5 is common practice
    /// for single names). Not valued yet: a capped position is refused (422), because its
    /// value needs the distribution of realized variance, not only its mean.
    #[serde(default)]
    pub cap_multiple: Option<f64>,
}

/// A book of positions (`logstrip value --book`).
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BookDoc {
    /// Dates (`YYYY-MM-DD`) without an observation besides weekends; by default every
    /// weekday observes.
    #[serde(default)]
    pub holidays: Option<Vec<String>>,
    /// The positions.
    #[serde(deserialize_with = "super::strict::objects")]
    pub positions: Vec<PositionDoc>,
}

/// Closes for realized variance.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ClosesDoc {
    /// Daily closes in time order; `null` marks a gap (an error).
    pub closes: Vec<Option<f64>>,
    /// Returns per year, default 252.
    #[serde(default)]
    pub annualization: Option<f64>,
}

/// Realized variance of a series of closes.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct RealizedOutDoc {
    /// `A/N sum r^2`, annualised variance (mean not subtracted).
    pub variance: f64,
    /// `sqrt(variance)`.
    pub volatility: f64,
    /// `A/N sum (S_i/S_0) r^2`, annualised variance.
    pub gamma_variance: f64,
    /// Number of returns used.
    pub returns: usize,
    /// Returns per year used.
    pub annualization: f64,
    /// First close.
    pub start_spot: f64,
    /// Last close.
    pub end_spot: f64,
}

/// Vega of one expiry.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct VegaBucketDoc {
    /// Expiry, years.
    pub tau: f64,
    /// Expiry as given, when given as a date.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub expiry: Option<String>,
    /// Currency per vol point: half the change of value between this expiry's
    /// variance-swap and gamma-swap vols moved up and down by one vol point.
    pub vega: f64,
}

/// Where a position stands in its life at the valuation time.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum LifecycleDoc {
    /// Starts after the valuation time: the whole payoff is implied.
    NotStarted,
    /// Between start and maturity.
    Accruing,
    /// Matures later on the valuation date: one return left to observe.
    MaturesToday,
    /// Past maturity: settled at `settlement`, not valued, no vega.
    Matured,
}

/// One position's valuation (currency; signed by side).
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct PositionValueDoc {
    /// The position's id.
    pub id: String,
    /// Swap type.
    pub kind: KindDoc,
    /// Side.
    pub side: SideDoc,
    /// Where the position stands in its life.
    pub status: LifecycleDoc,
    /// Present value, `accrued_leg + remaining_leg - variance_notional D K^2` (vol
    /// points); absent for a matured position (see `settlement`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub value: Option<f64>,
    /// A matured position's amount due, `variance_notional (sigma_R^2 - K^2)` in vol
    /// points, undiscounted; absent before maturity, and at maturity when the realized
    /// variance of the whole life is not given.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub settlement: Option<f64>,
    /// Discounted realized part.
    pub accrued_leg: f64,
    /// Discounted implied part.
    pub remaining_leg: f64,
    /// Implied level of the remaining period, annualised decimal variance (absent once
    /// matured).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub implied_level: Option<f64>,
    /// Discount factor to maturity (1 once matured).
    pub discount: f64,
    /// Currency per vol point squared.
    pub variance_notional: f64,
    /// Currency per vol point at the strike, `2 K variance_notional` with `K` in vol
    /// points (variance and gamma swaps).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub vega_notional: Option<f64>,
    /// Daily returns observed so far.
    pub observed_returns: u32,
    /// Daily returns from start to maturity.
    pub expected_returns: u32,
    /// Vega by expiry (all zero once matured).
    pub vega_buckets: Vec<VegaBucketDoc>,
    /// Currency per vol point, every expiry's swap vols moved together.
    pub parallel_vega: f64,
    /// Why a value or settlement is missing, when it is.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub note: Option<String>,
}

/// A total over positions.
#[derive(Debug, Clone, Serialize, ToSchema, Default)]
pub struct TotalDoc {
    /// Sum of the values of positions not matured.
    pub value: f64,
    /// Sum of the settlement amounts of matured positions (not in `value`).
    pub settlement: f64,
    /// Sum of parallel vegas.
    pub parallel_vega: f64,
    /// Sum of vegas by expiry.
    pub vega_buckets: Vec<VegaBucketDoc>,
}

/// Totals by kind (present kinds only) and for the book.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct TotalsDoc {
    /// Variance swaps.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub variance: Option<TotalDoc>,
    /// Gamma swaps.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub gamma: Option<TotalDoc>,
    /// Leverage swaps.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub leverage: Option<TotalDoc>,
    /// Every position.
    pub book: TotalDoc,
}

/// The units and conventions behind every number of a valuation.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ConventionsDoc {
    /// Unit of values, settlements and P&L.
    pub value_unit: &'static str,
    /// Unit of `variance_notional`.
    pub variance_notional_unit: &'static str,
    /// Unit of `vega_notional`, and its relation to `variance_notional`.
    pub vega_notional_unit: &'static str,
    /// What a swap pays.
    pub payoff: &'static str,
    /// How strikes and levels are written in this API.
    pub strike_input: &'static str,
    /// Unit and definition of vega.
    pub vega_unit: &'static str,
    /// How the realized leg accrues.
    pub accrual: &'static str,
    /// Which days observe a return.
    pub observation_days: String,
    /// Returns per year of realized variance.
    pub annualization: f64,
}

impl ConventionsDoc {
    fn new(calendar: &ObservationCalendar) -> Self {
        Self {
            value_unit: "currency",
            variance_notional_unit: "currency per vol point squared",
            vega_notional_unit: "currency per vol point; variance_notional = vega_notional / (2 K), K the strike in vol points",
            payoff: "variance_notional * (sigma_R^2 - K^2), vols in vol points (26 for 26%)",
            strike_input: "decimal: strike_vol 0.26, strike (variance) 0.0676",
            vega_unit: "currency per vol point of the variance-swap (and gamma-swap) vols: half the change of value between them moved up and down one point",
            accrual: "by observations: the realized leg weighs observed_returns / expected_returns, the implied leg the rest",
            observation_days: match calendar.holiday_count() {
                0 => "weekdays".to_string(),
                n => format!("weekdays less {n} holidays"),
            },
            annualization: TRADING_DAYS_PER_YEAR,
        }
    }
}

/// One expiry's part of the vega term of a P&L explanation.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ExpiryMoveDoc {
    /// Expiry of the later snapshot, years from its `as_of`.
    pub tau: f64,
    /// Expiry as given, when given as a date.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub expiry: Option<String>,
    /// Change of this expiry's variance-swap vol, vol points: the later level against
    /// the earlier snapshot's forward level from the later time to the expiry (absent
    /// when the expiry lies beyond the earlier snapshot).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub variance_swap_vol_change: Option<f64>,
    /// The same for the gamma-swap vol.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub gamma_swap_vol_change: Option<f64>,
    /// P&L from this expiry's levels, currency.
    pub pnl: f64,
}

/// A change of value between two snapshots split into its causes (currency).
#[derive(Debug, Clone, Serialize, ToSchema, Default)]
pub struct ExplainPartsDoc {
    /// Value (or settlement) against the earlier snapshot.
    pub earlier_value: f64,
    /// Value (or settlement) against the later snapshot.
    pub later_value: f64,
    /// `later_value - earlier_value`.
    pub change: f64,
    /// Returns observed between the two snapshots.
    pub realized_accrual: f64,
    /// The implied leg losing the elapsed period, at the earlier snapshot's levels.
    pub time_decay: f64,
    /// Gamma legs: the change of spot over start spot.
    pub spot: f64,
    /// Sum of `vega_by_expiry`.
    pub vega: f64,
    /// Change of the discount factor to maturity.
    pub discounting: f64,
    /// `change` less every part above.
    pub unexplained: f64,
}

/// One position's P&L explanation.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct PositionExplainDoc {
    /// The position's id.
    pub id: String,
    /// The parts.
    #[serde(flatten)]
    pub parts: ExplainPartsDoc,
    /// The vega part by expiry of the later snapshot.
    pub vega_by_expiry: Vec<ExpiryMoveDoc>,
}

/// A position left out of the explanation, and why.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct SkippedDoc {
    /// The position's id.
    pub id: String,
    /// Why.
    pub reason: String,
}

/// The P&L explanation of a book between an earlier and the valued snapshot.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ExplainDoc {
    /// Valuation time of the earlier snapshot, RFC 3339.
    pub since_as_of: String,
    /// Per position explained, in input order.
    pub positions: Vec<PositionExplainDoc>,
    /// Positions without a value on either snapshot.
    pub skipped: Vec<SkippedDoc>,
    /// Sums over the positions explained.
    pub book: ExplainPartsDoc,
}

/// The valuation of a book.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ValuationDoc {
    /// Underlying of the snapshot.
    pub underlying: String,
    /// Valuation time, RFC 3339.
    pub as_of: String,
    /// Units and conventions of every number below.
    pub conventions: ConventionsDoc,
    /// Per position, in input order.
    pub positions: Vec<PositionValueDoc>,
    /// Totals.
    pub totals: TotalsDoc,
    /// The change since an earlier snapshot, when one is given.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub explain: Option<ExplainDoc>,
}

fn parse_time(text: &str, path: FieldPath, problems: &mut Vec<Problem>) -> Option<DateTime<Utc>> {
    match DateTime::parse_from_rfc3339(text) {
        Ok(t) => Some(t.with_timezone(&Utc)),
        Err(e) => {
            problems.push(Problem { path, message: format!("must be an RFC 3339 time ({e}), got {text:?}") });
            None
        }
    }
}

fn positive(x: f64) -> bool {
    x.is_finite() && x > 0.0
}

/// What a position says has been realized.
#[derive(Debug, Clone, PartialEq)]
enum RealizedInput {
    None,
    Given { accrued: Accrued, returns: Option<u32> },
    Fixings(Vec<f64>),
}

/// A validated position, independent of the valuation time.
#[derive(Debug, Clone, PartialEq)]
struct ValidPosition {
    kind: SwapKind,
    side: Side,
    /// Annualised decimal variance.
    strike: f64,
    /// Currency per vol point squared.
    variance_notional: f64,
    start: DateTime<Utc>,
    maturity: DateTime<Utc>,
    realized: RealizedInput,
}

/// A position as of one valuation time, with what the document reports of it.
#[derive(Debug, Clone, PartialEq)]
struct DatedPosition {
    swap: SwapPosition,
    status: LifecycleDoc,
    /// Why a matured position has no settlement.
    missing_settlement: Option<String>,
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

/// The realized data of the first `returns` returns of a fixings series.
fn accrued_from_fixings(closes: &[f64], returns: u32) -> Option<Accrued> {
    let closes = closes.get(..=returns as usize)?;
    let r = realized_variance(closes, TRADING_DAYS_PER_YEAR).ok()?;
    Some(Accrued { variance: r.variance, gamma_variance: Some(r.gamma_variance), start_spot: Some(r.start_spot) })
}

/// The position as of `as_of`. `returns_since` is, for an earlier valuation of an
/// explanation, the observation days between it and the valued snapshot: that many
/// fewer returns have been observed.
fn position_at(
    p: &ValidPosition,
    as_of: DateTime<Utc>,
    calendar: &ObservationCalendar,
    returns_since: Option<u32>,
    path: &FieldPath,
) -> Result<DatedPosition, Problem> {
    let (start_day, maturity_day, today) = (p.start.date_naive(), p.maturity.date_naive(), as_of.date_naive());
    let expected = calendar.count_after_through(start_day, maturity_day);
    if expected == 0 {
        return Err(Problem {
            path: path.field("maturity"),
            message: format!(
                "no observation day after the start date {start_day} up to the maturity date {maturity_day}"
            ),
        });
    }
    let status = if p.maturity <= as_of {
        LifecycleDoc::Matured
    } else if p.start > as_of {
        LifecycleDoc::NotStarted
    } else if maturity_day == today {
        LifecycleDoc::MaturesToday
    } else {
        LifecycleDoc::Accruing
    };
    let by_date = if status == LifecycleDoc::Matured { expected } else { calendar.observed_before(start_day, today) };
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
    let observed = match returns_since {
        None => latest,
        Some(since) => latest.saturating_sub(since),
    };
    let mut missing_settlement = None;
    let realized = match &p.realized {
        RealizedInput::None => None,
        RealizedInput::Given { accrued, .. } => {
            if returns_since.is_some() && observed != latest {
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

/// The field a valuation error points to.
fn risk_problem(e: &RiskError, path: &FieldPath) -> Problem {
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

fn add_buckets(total: &mut TotalDoc, buckets: &[VegaBucketDoc], doc: &PositionValueDoc) {
    if total.vega_buckets.is_empty() {
        total.vega_buckets = buckets.iter().map(|b| VegaBucketDoc { vega: 0.0, ..b.clone() }).collect();
    }
    for (t, b) in total.vega_buckets.iter_mut().zip(buckets) {
        t.vega += b.vega;
    }
    total.value += doc.value.unwrap_or(0.0);
    total.settlement += doc.settlement.unwrap_or(0.0);
    total.parallel_vega += doc.parallel_vega;
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

/// A snapshot and its analysis, ready to value against.
struct Priced<'a> {
    snapshot: &'a ValidSnapshot,
    analysis: &'a Analysis,
    market: SwapMarket,
}

impl<'a> Priced<'a> {
    fn new(snapshot: &'a ValidSnapshot, analysis: &'a Analysis) -> Self {
        Self { snapshot, analysis, market: market_of(&analysis.slices, snapshot.spot) }
    }

    fn expiry_of(&self, j: usize) -> Option<String> {
        let s = &self.analysis.slices[j];
        self.snapshot.expiries.get(s.input_index).cloned().flatten()
    }
}

fn value_position(
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

/// Explains each position's change of value from `earlier` to `later`.
fn explain_book(
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
    if elapsed < 0.0 {
        problems.push(Problem {
            path: FieldPath::root().field("since_snapshot").field("as_of"),
            message: format!("the earlier snapshot's as_of {t_e} is after the valued snapshot's {t_l}"),
        });
    }
    // Observation days from the earlier valuation date up to the day before the later.
    let between = t_l
        .date_naive()
        .pred_opt()
        .and_then(|last| Some(calendar.count_after_through(t_e.date_naive().pred_opt()?, last)))
        .unwrap_or(0);
    let mut out = ExplainDoc {
        since_as_of: t_e.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        positions: Vec::new(),
        skipped: Vec::new(),
        book: ExplainPartsDoc::default(),
    };
    if elapsed < 0.0 {
        return out;
    }
    for (i, p) in valid {
        let (doc, path) = (&book.positions[*i], root.index(*i));
        let dated = position_at(p, t_l, calendar, None, &path)
            .and_then(|l| Ok((position_at(p, t_e, calendar, Some(between), &path)?, l)));
        let (e, l) = match dated {
            Ok(x) => x,
            Err(problem) => {
                problems.push(problem);
                continue;
            }
        };
        if let Some(reason) = e.missing_settlement.as_ref().or(l.missing_settlement.as_ref()) {
            out.skipped.push(SkippedDoc { id: doc.id.clone(), reason: reason.clone() });
            continue;
        }
        let x = match explain(&e.swap, &earlier.market, &l.swap, &later.market, elapsed) {
            Ok(x) => x,
            Err(err) => {
                let mut problem = risk_problem(&err, &path);
                problem.message = format!("on the earlier snapshot ({t_e}): {}", problem.message);
                problems.push(problem);
                continue;
            }
        };
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
        add_parts(&mut out.book, &parts);
        out.positions.push(PositionExplainDoc { id: doc.id.clone(), parts, vega_by_expiry });
    }
    out
}

/// Values every position of `book` on an analysed snapshot, with bucketed and parallel
/// vega and totals; with `since`, an earlier snapshot, also explains each position's
/// change of value since then.
///
/// # Errors
/// [`InputErrors`] with paths `positions[i].<field>` (and `holidays[i]`) for invalid
/// positions and for positions that cannot be valued on either snapshot (maturity
/// beyond the last expiry, missing realized data, a cap).
pub fn value_book(
    snapshot: &ValidSnapshot,
    analysis: &Analysis,
    book: &BookDoc,
    since: Option<(&ValidSnapshot, &Analysis)>,
) -> Result<ValuationDoc, InputErrors> {
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
    let priced = Priced::new(snapshot, analysis);
    let up = ShiftedLevels::vols_moved(&priced.market, VOL_POINT);
    let down = ShiftedLevels::vols_moved(&priced.market, -VOL_POINT);
    let mut out = Vec::new();
    let mut totals = TotalsDoc { variance: None, gamma: None, leverage: None, book: TotalDoc::default() };
    for (i, p) in &valid {
        let (doc, path) = (&book.positions[*i], root.index(*i));
        let valued = position_at(p, snapshot.as_of, &calendar, None, &path).and_then(|dated| {
            value_position(&doc.id, doc.kind, doc.side, &dated, &priced, (&up, &down))
                .map_err(|e| risk_problem(&e, &path))
        });
        let position = match valued {
            Ok(x) => x,
            Err(problem) => {
                problems.push(problem);
                continue;
            }
        };
        let kind_total = match doc.kind {
            KindDoc::Variance => &mut totals.variance,
            KindDoc::Gamma => &mut totals.gamma,
            KindDoc::Leverage => &mut totals.leverage,
        };
        add_buckets(kind_total.get_or_insert_with(TotalDoc::default), &position.vega_buckets, &position);
        add_buckets(&mut totals.book, &position.vega_buckets, &position);
        out.push(position);
    }
    let explain = since.map(|(earlier_snapshot, earlier_analysis)| {
        let earlier = Priced::new(earlier_snapshot, earlier_analysis);
        explain_book(book, &valid, &calendar, &earlier, &priced, &mut problems)
    });
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    Ok(ValuationDoc {
        underlying: snapshot.underlying.clone(),
        as_of: snapshot.as_of.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        conventions: ConventionsDoc::new(&calendar),
        positions: out,
        totals,
        explain,
    })
}

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
