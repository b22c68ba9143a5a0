//! The valuation documents: swap books and closes as users write them, and the
//! valuation, P&L explanation and realized-variance documents returned.

use crate::analytics::observations::ObservationCalendar;
use crate::analytics::realized::TRADING_DAYS_PER_YEAR;
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

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
    #[serde(default, deserialize_with = "crate::wire::strict::optional_object")]
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
    #[serde(deserialize_with = "crate::wire::strict::objects")]
    pub positions: Vec<PositionDoc>,
}

/// Closes for realized variance.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ClosesDoc {
    /// Daily closes in time order, at least two, each positive. A `null` (a gap in the
    /// series) is read so that the error can name it, and refused.
    #[schema(schema_with = closes_schema)]
    pub closes: Vec<Option<f64>>,
    /// Returns per year, default 252.
    #[serde(default)]
    #[schema(exclusive_minimum = 0.0)]
    pub annualization: Option<f64>,
}

/// The schema of `closes`: what the service accepts (no gaps, positive values).
fn closes_schema() -> utoipa::openapi::schema::Array {
    use utoipa::openapi::schema::{ArrayBuilder, KnownFormat, ObjectBuilder, SchemaFormat, Type};
    let close = ObjectBuilder::new()
        .schema_type(Type::Number)
        .format(Some(SchemaFormat::KnownFormat(KnownFormat::Double)))
        .exclusive_minimum(Some(0.0));
    ArrayBuilder::new()
        .items(close)
        .min_items(Some(2))
        .description(Some("Daily closes in time order: at least two, each positive, no gaps."))
        .build()
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
    pub(super) fn new(calendar: &ObservationCalendar) -> Self {
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
