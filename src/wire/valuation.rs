//! Swap books and closes as users write them, their validation, and the valuation
//! and realized-variance documents returned.

use super::input::{year_fraction, ValidSnapshot};
use super::path::{FieldPath, InputErrors, Problem};
use crate::analytics::analysis::Analysis;
use crate::analytics::realized::{realized_variance, RealizedError, TRADING_DAYS_PER_YEAR};
use crate::analytics::risk::{
    market_of, shifted_levels, swap_vega, value_swap, Accrued, RiskError, Side, SwapKind, SwapPosition, VOL_POINT,
};
use chrono::{DateTime, Utc};
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

/// Realized so far, annualised variance.
#[derive(Debug, Clone, Copy, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct RealizedDoc {
    /// Realized variance since `start`.
    pub variance: f64,
    /// Gamma-weighted realized variance since `start` (gamma and leverage swaps).
    #[serde(default)]
    pub gamma_variance: Option<f64>,
    /// Level of the underlying at `start` (gamma and leverage swaps).
    #[serde(default)]
    pub start_spot: Option<f64>,
}

/// A swap position.
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PositionDoc {
    /// Your identifier, unique in the book.
    pub id: String,
    /// `variance`, `gamma` or `leverage`.
    pub kind: KindDoc,
    /// Start of the realized period, RFC 3339.
    pub start: String,
    /// Maturity, RFC 3339; must not lie beyond the snapshot's last expiry.
    pub maturity: String,
    /// Strike, annualised variance (or give `strike_vol`).
    #[serde(default)]
    pub strike: Option<f64>,
    /// Strike as a vol, decimal (variance and gamma swaps).
    #[serde(default)]
    pub strike_vol: Option<f64>,
    /// Currency per unit of annualised variance (or give `vega_notional`).
    #[serde(default)]
    pub variance_notional: Option<f64>,
    /// Currency per vol point at the strike: `variance_notional = vega_notional / (2 strike_vol)`
    /// with vols in decimal, as quoted per 1.00 of vol (variance and gamma swaps).
    #[serde(default)]
    pub vega_notional: Option<f64>,
    /// `long` or `short`.
    pub side: SideDoc,
    /// Realized so far (or give `fixings`); may be omitted at inception.
    #[serde(default, deserialize_with = "super::strict::optional_object")]
    pub realized: Option<RealizedDoc>,
    /// Daily closes since `start`, the first at `start`.
    #[serde(default)]
    pub fixings: Option<Vec<f64>>,
}

/// A book of positions (`logstrip value --book`).
#[derive(Debug, Clone, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct BookDoc {
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
    /// Change of value for +1 vol point on this expiry's smile, currency.
    pub vega: f64,
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
    /// Value: `accrued_leg + remaining_leg - N D K`.
    pub value: f64,
    /// Discounted realized part.
    pub accrued_leg: f64,
    /// Discounted implied part.
    pub remaining_leg: f64,
    /// Implied level of the remaining period, annualised variance (absent once expired).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub implied_level: Option<f64>,
    /// Discount factor to maturity.
    pub discount: f64,
    /// Variance notional used.
    pub variance_notional: f64,
    /// Vega by expiry.
    pub vega_buckets: Vec<VegaBucketDoc>,
    /// Change of value for +1 vol point on every smile.
    pub parallel_vega: f64,
}

/// A total over positions.
#[derive(Debug, Clone, Serialize, ToSchema, Default)]
pub struct TotalDoc {
    /// Sum of values.
    pub value: f64,
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

/// The valuation of a book.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct ValuationDoc {
    /// Underlying of the snapshot.
    pub underlying: String,
    /// Valuation time, RFC 3339.
    pub as_of: String,
    /// Per position, in input order.
    pub positions: Vec<PositionValueDoc>,
    /// Totals.
    pub totals: TotalsDoc,
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

/// Validates one position into the analytics type.
fn position(
    doc: &PositionDoc,
    as_of: DateTime<Utc>,
    path: &FieldPath,
    problems: &mut Vec<Problem>,
) -> Option<SwapPosition> {
    let before = problems.len();
    let mut push = |field: &str, message: String| problems.push(Problem { path: path.field(field), message });
    if doc.id.trim().is_empty() {
        push("id", "must not be empty".into());
    }
    let leverage = doc.kind == KindDoc::Leverage;
    let strike = match (doc.strike, doc.strike_vol) {
        (Some(_), Some(_)) => {
            push("strike_vol", "give strike or strike_vol, not both".into());
            None
        }
        (None, None) => {
            push("strike", "give strike (variance) or strike_vol".into());
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
    };
    let notional = match (doc.variance_notional, doc.vega_notional, strike) {
        (Some(_), Some(_), _) => {
            push("vega_notional", "give variance_notional or vega_notional, not both".into());
            None
        }
        (None, None, _) => {
            push("variance_notional", "give variance_notional or vega_notional".into());
            None
        }
        (Some(n), None, _) if !positive(n) => {
            push("variance_notional", format!("must be positive, got {n}"));
            None
        }
        (Some(n), None, _) => Some(n),
        (None, Some(_), _) if leverage => {
            push("vega_notional", "a leverage swap has no vega notional: give variance_notional".into());
            None
        }
        (None, Some(v), _) if !positive(v) => {
            push("vega_notional", format!("must be positive, got {v}"));
            None
        }
        (None, Some(v), Some(k)) => Some(v / (2.0 * k.sqrt())),
        (None, Some(_), None) => None,
    };
    let start = parse_time(&doc.start, path.field("start"), problems);
    let maturity = parse_time(&doc.maturity, path.field("maturity"), problems);
    if let (Some(s), Some(m)) = (start, maturity) {
        if m <= s {
            problems
                .push(Problem { path: path.field("maturity"), message: format!("must be after start {}", doc.start) });
        }
    }
    let realized = match (&doc.realized, &doc.fixings) {
        (Some(_), Some(_)) => {
            problems
                .push(Problem { path: path.field("fixings"), message: "give realized or fixings, not both".into() });
            None
        }
        (None, None) => None,
        (Some(r), None) => {
            let rp = path.field("realized");
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
            Some(Accrued { variance: r.variance, gamma_variance: r.gamma_variance, start_spot: r.start_spot })
        }
        (None, Some(closes)) => match realized_variance(closes, TRADING_DAYS_PER_YEAR) {
            Ok(r) => Some(Accrued {
                variance: r.variance,
                gamma_variance: Some(r.gamma_variance),
                start_spot: Some(r.start_spot),
            }),
            Err(RealizedError::BadClose { index, value }) => {
                problems.push(Problem {
                    path: path.field("fixings").index(index),
                    message: format!("must be a positive close, got {value}"),
                });
                None
            }
            Err(e) => {
                problems.push(Problem { path: path.field("fixings"), message: e.to_string() });
                None
            }
        },
    };
    if problems.len() > before {
        return None;
    }
    Some(SwapPosition {
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
        start: year_fraction(as_of, start?),
        maturity: year_fraction(as_of, maturity?),
        realized,
    })
}

/// The field a valuation error points to.
fn risk_problem(e: &RiskError, path: &FieldPath) -> Problem {
    let field = match e {
        RiskError::BeyondLastExpiry { .. } | RiskError::MaturityBeforeStart => path.field("maturity"),
        RiskError::NeedsRealized => path.field("realized"),
        RiskError::NeedsGammaVariance => path.field("realized").field("gamma_variance"),
        RiskError::NeedsSpot(what) if what.starts_with("realized") => path.field("realized").field("start_spot"),
        RiskError::NeedsSpot(_) => FieldPath::root().field("snapshot").field("spot"),
        RiskError::ForwardStartGamma => path.field("start"),
        RiskError::NotFinite(_) | RiskError::Market(_) => path.clone(),
    };
    Problem { path: field, message: e.to_string() }
}

fn add_buckets(total: &mut TotalDoc, buckets: &[VegaBucketDoc], value: f64, parallel: f64) {
    if total.vega_buckets.is_empty() {
        total.vega_buckets = buckets.iter().map(|b| VegaBucketDoc { vega: 0.0, ..b.clone() }).collect();
    }
    for (t, b) in total.vega_buckets.iter_mut().zip(buckets) {
        t.vega += b.vega;
    }
    total.value += value;
    total.parallel_vega += parallel;
}

/// Values every position of `book` on an analysed snapshot, with bucketed and parallel
/// vega and totals.
///
/// # Errors
/// [`InputErrors`] with paths `positions[i].<field>` for invalid positions and for
/// positions that cannot be valued on this snapshot (maturity beyond the last expiry,
/// missing realized data).
pub fn value_book(snapshot: &ValidSnapshot, analysis: &Analysis, book: &BookDoc) -> Result<ValuationDoc, InputErrors> {
    let mut problems = Vec::new();
    let root = FieldPath::root().field("positions");
    if book.positions.is_empty() {
        problems.push(Problem { path: root.clone(), message: "needs at least one position".into() });
    }
    let mut positions = Vec::new();
    for (i, doc) in book.positions.iter().enumerate() {
        let path = root.index(i);
        if book.positions[..i].iter().any(|p| p.id == doc.id) {
            problems.push(Problem { path: path.field("id"), message: format!("{:?} appears twice", doc.id) });
        }
        if let Some(p) = position(doc, snapshot.as_of, &path, &mut problems) {
            positions.push((i, p));
        }
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    let market = market_of(&analysis.slices, snapshot.spot);
    let (shifted_variance, shifted_gamma) = shifted_levels(&analysis.slices, VOL_POINT);
    let expiry_of =
        |s: &crate::analytics::analysis::SliceAnalysis| snapshot.expiries.get(s.input_index).cloned().flatten();
    let mut out = Vec::new();
    let mut totals = TotalsDoc { variance: None, gamma: None, leverage: None, book: TotalDoc::default() };
    for (i, p) in positions {
        let doc = &book.positions[i];
        let valued = value_swap(&p, &market)
            .and_then(|v| swap_vega(&p, &market, &shifted_variance, &shifted_gamma).map(|vega| (v, vega)));
        let (value, vega) = match valued {
            Ok(x) => x,
            Err(e) => {
                problems.push(risk_problem(&e, &root.index(i)));
                continue;
            }
        };
        let buckets: Vec<VegaBucketDoc> = analysis
            .slices
            .iter()
            .zip(&vega.buckets)
            .map(|(s, v)| VegaBucketDoc { tau: s.tau, expiry: expiry_of(s), vega: *v })
            .collect();
        let kind_total = match doc.kind {
            KindDoc::Variance => &mut totals.variance,
            KindDoc::Gamma => &mut totals.gamma,
            KindDoc::Leverage => &mut totals.leverage,
        };
        add_buckets(kind_total.get_or_insert_with(TotalDoc::default), &buckets, value.value, vega.parallel);
        add_buckets(&mut totals.book, &buckets, value.value, vega.parallel);
        out.push(PositionValueDoc {
            id: doc.id.clone(),
            kind: doc.kind,
            side: doc.side,
            value: value.value,
            accrued_leg: value.accrued_leg,
            remaining_leg: value.remaining_leg,
            implied_level: value.implied_level,
            discount: value.discount,
            variance_notional: p.variance_notional,
            vega_buckets: buckets,
            parallel_vega: vega.parallel,
        });
    }
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    Ok(ValuationDoc {
        underlying: snapshot.underlying.clone(),
        as_of: snapshot.as_of.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        positions: out,
        totals,
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
