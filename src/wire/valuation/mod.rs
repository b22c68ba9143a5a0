//! Swap books and closes as users write them, their validation, and the valuation,
//! P&L explanation and realized-variance documents returned.
//!
//! Units are the desk's (MATH.md section 8): `variance_notional` in currency per vol
//! point squared, `vega_notional` in currency per vol point (`variance_notional =
//! vega_notional / (2 K)` with `K` the strike in vol points), payoffs in vol points
//! squared; strikes stay decimal in the input as everywhere else in the API. Every
//! valuation document states them in its `conventions`.
//!
//! The parts: `documents` (what users write and what they get back), `positions`
//! (a book's positions validated, independent of the valuation time), `lifecycle` (a
//! position as of one valuation time: status, returns observed, realized so far),
//! `pricing` (one position valued on one snapshot, with vega), `book` (every position
//! and the totals), `explain` (the change of value since an earlier snapshot) and
//! `realized` (realized variance of closes).

mod book;
mod documents;
mod explain;
mod lifecycle;
mod positions;
mod pricing;
mod realized;

pub use book::value_book;
pub use documents::{
    BookDoc, ClosesDoc, ConventionsDoc, ExpiryMoveDoc, ExplainDoc, ExplainPartsDoc, KindDoc, LifecycleDoc, PositionDoc,
    PositionExplainDoc, PositionValueDoc, RealizedDoc, RealizedOutDoc, SideDoc, SkippedDoc, TotalDoc, TotalsDoc,
    ValuationDoc, VegaBucketDoc,
};
pub use realized::realized_doc;

/// Vol points in one unit of decimal vol.
const VOL_POINTS_PER_VOL: f64 = 100.0;

fn positive(x: f64) -> bool {
    x.is_finite() && x > 0.0
}
