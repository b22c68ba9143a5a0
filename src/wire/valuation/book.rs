//! A book valued on a snapshot: every position, the totals by kind and for the book,
//! and with an earlier snapshot the explanation of each position's change of value.

use super::documents::{
    BookDoc, ConventionsDoc, KindDoc, PositionValueDoc, TotalDoc, TotalsDoc, ValuationDoc, VegaBucketDoc,
};
use super::explain::explain_book;
use super::lifecycle::position_at;
use super::positions::validate_book;
use super::pricing::{risk_problem, value_position, Priced};
use crate::analytics::analysis::Analysis;
use crate::analytics::seasoned_swaps::{ShiftedLevels, VOL_POINT};
use crate::wire::input::ValidSnapshot;
use crate::wire::path::{FieldPath, InputErrors};

/// Adds a position of `kind` to the totals of its kind and of the book.
fn add_to_totals(totals: &mut TotalsDoc, kind: KindDoc, position: &PositionValueDoc) {
    let kind_total = match kind {
        KindDoc::Variance => &mut totals.variance,
        KindDoc::Gamma => &mut totals.gamma,
        KindDoc::Leverage => &mut totals.leverage,
    };
    add_buckets(kind_total.get_or_insert_with(TotalDoc::default), &position.vega_buckets, position);
    add_buckets(&mut totals.book, &position.vega_buckets, position);
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
    let (calendar, valid) = validate_book(book)?;
    let mut problems = Vec::new();
    let root = FieldPath::root().field("positions");
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
        add_to_totals(&mut totals, doc.kind, &position);
        out.push(position);
    }
    let explain = since.map(|(earlier_snapshot, earlier_analysis)| {
        let earlier = Priced::new(earlier_snapshot, earlier_analysis);
        explain_book(book, &valid, &calendar, &earlier, &priced, &mut problems)
    });
    if !problems.is_empty() {
        return Err(InputErrors::from_problems(problems));
    }
    // Expiries a position has no vega to (beyond its maturity, or all of them once it
    // has matured) are left out of its buckets, and so of the totals' where no position
    // has any.
    for position in &mut out {
        position.vega_buckets.retain(|b| b.vega != 0.0);
    }
    for total in [totals.variance.as_mut(), totals.gamma.as_mut(), totals.leverage.as_mut(), Some(&mut totals.book)]
        .into_iter()
        .flatten()
    {
        total.vega_buckets.retain(|b| b.vega != 0.0);
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
