//! The standard tenors in the history: each row's tenor figures with their changes
//! since the previous snapshot and since the first snapshot of the same UTC day, and
//! the history's tenor CSV (`rows=tenors`, one row per snapshot and tenor).
//!
//! Reference snapshots are current revisions of the same underlying: the previous is
//! the latest `as_of` before the row's, the first of the day the earliest `as_of` of
//! the row's UTC day. Rows of the page serve as references where they can; otherwise
//! one store read finds each (at most two per page).

use super::error::ApiError;
use super::state::AppState;
use crate::analytics::tenors::ExpiryLevels;
use crate::store::{HistoryQuery, Revisions, Store, StoredSnapshot};
use crate::wire::tenors::{tenor_docs, TenorDoc, TenorFiguresDoc};
use chrono::{DateTime, Duration, NaiveTime, Utc};
use serde::{Deserialize, Serialize};
use utoipa::ToSchema;

/// One standard tenor of a history row: its figures (decimals, as in the analysis'
/// `tenors`) and their changes, each figure minus the reference snapshot's.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct HistoryTenor {
    /// The tenor and its figures.
    #[serde(flatten)]
    pub tenor: TenorDoc,
    /// Change since the snapshot `previous_id` of the row (absent for the first
    /// snapshot of the underlying; a figure is absent where either snapshot lacks it).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub change_since_previous: Option<TenorFiguresDoc>,
    /// Change since the snapshot `first_of_day_id` of the row (zero for that one).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub change_since_first_of_day: Option<TenorFiguresDoc>,
}

/// The tenors of a stored curve, without changes.
pub fn tenors_of_levels(expiries: &[ExpiryLevels]) -> Vec<HistoryTenor> {
    tenor_docs(expiries)
        .into_iter()
        .map(|tenor| HistoryTenor { tenor, change_since_previous: None, change_since_first_of_day: None })
        .collect()
}

/// The expiry levels a stored analysis holds (the parts of the curve the tenors use).
#[derive(Deserialize)]
struct StoredLevels {
    curve: Vec<StoredExpiry>,
}

#[derive(Deserialize)]
struct StoredExpiry {
    tau: f64,
    variance_swap: f64,
    gamma_swap: f64,
    #[serde(default)]
    atm_vol: Option<f64>,
    #[serde(default)]
    skew_25_delta: Option<f64>,
}

/// The tenor figures of a stored snapshot read from the store.
fn stored_figures(record: &StoredSnapshot) -> Result<Vec<TenorFiguresDoc>, ApiError> {
    let stored: StoredLevels = serde_json::from_str(&record.analysis)
        .map_err(|e| ApiError::Internal(format!("stored analysis {}: {e}", record.id)))?;
    let levels: Vec<ExpiryLevels> = stored
        .curve
        .iter()
        .map(|c| ExpiryLevels {
            tau: c.tau,
            variance_swap: c.variance_swap,
            gamma_swap: c.gamma_swap,
            atm_vol: c.atm_vol,
            skew_25_delta: c.skew_25_delta,
        })
        .collect();
    Ok(tenor_docs(&levels).into_iter().map(|t| t.figures).collect())
}

/// A snapshot changes are measured from: its id and tenor figures.
type Reference = (i64, Vec<TenorFiguresDoc>);

/// A history row whose tenors get their changes.
pub struct TenorRow<'a> {
    /// The stored snapshot.
    pub record: &'a StoredSnapshot,
    /// Its tenors (figures filled, changes to fill).
    pub tenors: &'a mut Vec<HistoryTenor>,
    /// Set to the id of the previous snapshot.
    pub previous_id: &'a mut Option<i64>,
    /// Set to the id of the first snapshot of the day.
    pub first_of_day_id: &'a mut Option<i64>,
}

/// Start of the UTC day of `t`.
fn day_start(t: DateTime<Utc>) -> DateTime<Utc> {
    t.date_naive().and_time(NaiveTime::MIN).and_utc()
}

/// Fills the changes of `rows` (a history page in ascending `(as_of, id)` order).
///
/// # Errors
/// A store failure, or a stored analysis that cannot be read.
pub async fn attach_changes(state: &AppState, underlying: &str, rows: &mut [TenorRow<'_>]) -> Result<(), ApiError> {
    let Some(first_as_of) = rows.first().map(|r| r.record.as_of) else {
        return Ok(());
    };
    let store_error = |e| state.store_failed("history", e);
    // Current revisions on the page, by position, with their figures.
    let figures: Vec<Vec<TenorFiguresDoc>> =
        rows.iter().map(|r| r.tenors.iter().map(|t| t.tenor.figures).collect()).collect();
    let current: Vec<usize> = (0..rows.len()).filter(|&i| rows[i].record.superseded_by.is_none()).collect();
    // The snapshot before the page, read only when a row needs it.
    let mut before_page: Option<Option<Reference>> = None;
    // The first snapshot of a day the page does not show from its start.
    let mut day_firsts: Vec<(DateTime<Utc>, Option<Reference>)> = Vec::new();
    for i in 0..rows.len() {
        let as_of = rows[i].record.as_of;
        let previous = match current.iter().rev().find(|&&j| rows[j].record.as_of < as_of) {
            Some(&j) => Some((rows[j].record.id, figures[j].clone())),
            None => {
                if before_page.is_none() {
                    let found = state.store().latest_before(underlying, first_as_of).await.map_err(store_error)?;
                    before_page = Some(found.map(|r| Ok::<_, ApiError>((r.id, stored_figures(&r)?))).transpose()?);
                }
                before_page.clone().flatten()
            }
        };
        let start = day_start(as_of);
        // A page row before the day's start means the page holds the whole day so far.
        let page_has_day_start = rows[0].record.as_of < start;
        let in_page = current.iter().find(|&&j| rows[j].record.as_of >= start);
        let first_of_day = match in_page {
            Some(&j) if page_has_day_start && rows[j].record.as_of <= as_of => {
                Some((rows[j].record.id, figures[j].clone()))
            }
            _ => {
                if !day_firsts.iter().any(|(day, _)| *day == start) {
                    let query = HistoryQuery {
                        underlying: underlying.to_string(),
                        from: Some(start),
                        to: Some(start + Duration::days(1)),
                        after: None,
                        limit: 1,
                        revisions: Revisions::Current,
                    };
                    let found = state.store().history(&query).await.map_err(store_error)?.into_iter().next();
                    let found = found.map(|r| Ok::<_, ApiError>((r.id, stored_figures(&r)?))).transpose()?;
                    day_firsts.push((start, found));
                }
                day_firsts.iter().find(|(day, _)| *day == start).and_then(|(_, found)| found.clone())
            }
        };
        let row = &mut rows[i];
        *row.previous_id = previous.as_ref().map(|p| p.0);
        *row.first_of_day_id = first_of_day.as_ref().map(|p| p.0);
        for (k, tenor) in row.tenors.iter_mut().enumerate() {
            let change = |reference: &Option<Reference>| {
                reference.as_ref().and_then(|(_, f)| f.get(k)).map(|earlier| tenor.tenor.figures.minus(earlier))
            };
            tenor.change_since_previous = change(&previous);
            tenor.change_since_first_of_day = change(&first_of_day);
        }
    }
    Ok(())
}

/// Columns of the tenor CSV (`rows=tenors`): one row per snapshot and standard tenor.
/// Vols, their spreads and changes in vol points rounded to 3 decimals; the leverage
/// swap in annualised variance (as in the expiry rows), to 12 significant digits.
pub const TENOR_CSV_HEADER: [&str; 29] = [
    "snapshot_id",
    "underlying",
    "as_of",
    "stored_at",
    "revision",
    "superseded_by",
    "previous_id",
    "first_of_day_id",
    "tenor",
    "tenor_tau",
    "basis",
    "variance_swap_vol_pts",
    "atm_vol_pts",
    "skew_25_delta_pts",
    "forward_vol_pts",
    "gamma_minus_variance_vol_pts",
    "leverage_swap",
    "variance_swap_vol_pts_change_since_previous",
    "atm_vol_pts_change_since_previous",
    "skew_25_delta_pts_change_since_previous",
    "forward_vol_pts_change_since_previous",
    "gamma_minus_variance_vol_pts_change_since_previous",
    "leverage_swap_change_since_previous",
    "variance_swap_vol_pts_change_since_first_of_day",
    "atm_vol_pts_change_since_first_of_day",
    "skew_25_delta_pts_change_since_first_of_day",
    "forward_vol_pts_change_since_first_of_day",
    "gamma_minus_variance_vol_pts_change_since_first_of_day",
    "leverage_swap_change_since_first_of_day",
];

/// A vol (decimal) in vol points to 3 decimals, written without float noise; empty
/// when absent.
pub fn vol_points_cell(x: Option<f64>) -> String {
    let text = x.filter(|v| v.is_finite()).map(|v| format!("{:.3}", 100.0 * v)).unwrap_or_default();
    if text == "-0.000" {
        "0.000".to_string()
    } else {
        text
    }
}

/// The figures of [`TENOR_CSV_HEADER`] from `variance_swap_vol` to `leverage_swap`: the
/// five vols in vol points, then the leverage swap via `variance_cell`.
fn figure_cells(f: Option<&TenorFiguresDoc>, variance_cell: &dyn Fn(Option<f64>) -> String) -> Vec<String> {
    let values = f.map(|f| f.values()).unwrap_or_default();
    let mut cells: Vec<String> = values[..5].iter().map(|v| vol_points_cell(*v)).collect();
    cells.push(variance_cell(values[5]));
    cells
}

/// One history row's identity cells, as the expiry CSV writes them.
pub struct RowIdentity<'a> {
    /// Snapshot id.
    pub id: i64,
    /// Underlying.
    pub underlying: &'a str,
    /// `as_of`, RFC 3339.
    pub as_of: &'a str,
    /// `stored_at`, RFC 3339.
    pub stored_at: &'a str,
    /// Revision.
    pub revision: i64,
    /// Id of the revision that replaced it.
    pub superseded_by: Option<i64>,
    /// Id of the previous snapshot.
    pub previous_id: Option<i64>,
    /// Id of the first snapshot of the day.
    pub first_of_day_id: Option<i64>,
}

/// Writes one CSV record per tenor of a history row; `variance_cell` writes the
/// leverage swap (the expiry CSV's number format).
///
/// # Errors
/// The CSV writer's.
pub fn write_tenor_rows<W: std::io::Write>(
    writer: &mut csv::Writer<W>,
    row: &RowIdentity,
    tenors: &[HistoryTenor],
    variance_cell: &dyn Fn(Option<f64>) -> String,
) -> Result<(), csv::Error> {
    let id_cell = |x: Option<i64>| x.map(|v| v.to_string()).unwrap_or_default();
    for t in tenors {
        let mut record = vec![
            row.id.to_string(),
            row.underlying.to_string(),
            row.as_of.to_string(),
            row.stored_at.to_string(),
            row.revision.to_string(),
            id_cell(row.superseded_by),
            id_cell(row.previous_id),
            id_cell(row.first_of_day_id),
            t.tenor.tenor.clone(),
            format!("{:.6}", t.tenor.tau),
            t.tenor.basis.clone(),
        ];
        record.extend(figure_cells(Some(&t.tenor.figures), variance_cell));
        record.extend(figure_cells(t.change_since_previous.as_ref(), variance_cell));
        record.extend(figure_cells(t.change_since_first_of_day.as_ref(), variance_cell));
        writer.write_record(&record)?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vol_points_are_rounded_for_reading() {
        assert_eq!(vol_points_cell(Some(0.2034567)), "20.346");
        assert_eq!(vol_points_cell(Some(-0.0000001)), "0.000");
        assert_eq!(vol_points_cell(Some(-0.0014000000000000054)), "-0.140");
        assert_eq!(vol_points_cell(None), "");
        assert_eq!(vol_points_cell(Some(f64::NAN)), "");
    }

    #[test]
    fn day_start_is_utc_midnight() {
        let t = DateTime::parse_from_rfc3339("2026-11-30T23:59:59+00:00").expect("time").with_timezone(&Utc);
        assert_eq!(day_start(t).to_rfc3339(), "2026-11-30T00:00:00+00:00");
    }
}
