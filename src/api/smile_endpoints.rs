//! `GET /v1/snapshots/{id}/expiries/{index}/smile.svg`: one expiry of a stored
//! snapshot, its smile against its quotes, drawn by [`crate::smile_drawing`].
//!
//! The smile is fitted again from the stored input (the fit is deterministic, so it is
//! the stored one while the service's version is the same; where the stored analysis
//! carries `quote_fit` and the refit differs from it, the chart says so).

use super::chart_endpoints::svg_response;
use super::error::{ApiError, ProblemDetails};
use super::query::query_params;
use super::state::AppState;
use super::timestamps::rfc3339;
use crate::analytics::analysis::SliceAnalysis;
use crate::smile_drawing::{smile_svg, MarkedQuote, QuoteMark, SmileView};
use crate::store::{Store, StoredSnapshot};
use crate::wire::{self, SnapshotFormat, ValidSnapshot};
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::http::HeaderValue;
use axum::response::Response;
use serde::Deserialize;
use utoipa::IntoParams;

/// Default chart width, pixels.
pub const DEFAULT_SMILE_WIDTH: u32 = 880;
/// Points on the drawn smile.
const CURVE_SAMPLES: usize = 240;
/// The drawn smile reaches this share of the quoted log-moneyness span beyond the
/// outermost quotes.
const WING_REACH: f64 = 0.12;
/// A refit further than this from the stored fitted vols (decimal) is noted on the
/// chart: the stored values are rounded to 1e-5 (half of it lost at most).
const REFIT_TOLERANCE: f64 = 1e-5;

/// Query of the smile chart.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct SmileQuery {
    /// Chart width in pixels, 320 to 2400 (default 880); the text keeps its size, so
    /// ask for the width it is shown at.
    #[param(value_type = Option<u16>, minimum = 320, maximum = 2400, example = 880)]
    pub width: Option<String>,
}

/// The expiry position: a whole number (its place in the analysis's `curve`, from 0).
fn parse_index(text: &str) -> Result<usize, ApiError> {
    let digits = !text.is_empty() && text.len() <= 10 && text.bytes().all(|b| b.is_ascii_digit());
    text.parse::<usize>().ok().filter(|_| digits).ok_or_else(|| ApiError::PathValue {
        name: "index",
        message: format!("must be the expiry's position in the analysis's curve (0, 1, ...), got {text:?}"),
    })
}

/// One expiry's smile against its quotes as an SVG chart.
#[utoipa::path(
    get, path = "/v1/snapshots/{id}/expiries/{index}/smile.svg", tag = "charts",
    params(
        ("id" = i64, Path, description = "Snapshot id", example = 1),
        ("index" = u32, Path, description = "Position of the expiry in the analysis's `curve`, from 0", example = 0),
        SmileQuery
    ),
    responses(
        (status = 200, description = "Quotes with bid/ask bars, the fitted smile (dashed where extrapolated beyond \
the outermost kept quotes), left-out and suspect quotes marked and listed, and quote minus fit in vol points against \
the half spread", body = String, content_type = "image/svg+xml",
         headers(("ETag" = String, description = "Entity tag of the snapshot and width drawn"))),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No such snapshot, or no expiry at this position", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "An expiry position that is not a whole number", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_smile_chart(
    State(state): State<AppState>,
    Path((id, index)): Path<(String, String)>,
    query: Result<Query<SmileQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    let width = super::query::chart_width(query_params(query)?.width.as_deref(), DEFAULT_SMILE_WIDTH)?;
    let index = parse_index(&index)?;
    let not_found = || ApiError::NotFound(format!("no snapshot with id {id:?}"));
    let numeric: i64 = id.parse().map_err(|_| not_found())?;
    let record =
        state.store().get(numeric, true).await.map_err(|e| state.store_failed("get", e))?.ok_or_else(not_found)?;
    let svg = tokio::task::spawn_blocking(move || draw_stored_smile(&record, index, width))
        .await
        .map_err(|e| ApiError::Internal(format!("smile chart task failed: {e}")))??;
    Ok(svg_response(svg, HeaderValue::from_str(&format!("\"{numeric}-{index}-{width}\"")).ok()))
}

/// Refits the stored input's smiles (no model fit) and draws the expiry at `index`.
fn draw_stored_smile(record: &StoredSnapshot, index: usize, width: u32) -> Result<String, ApiError> {
    let internal = |what: String| ApiError::Internal(format!("stored snapshot {}: {what}", record.id));
    let (media_type, text) = record.input.as_ref().ok_or_else(|| internal("no input stored".into()))?;
    let format =
        SnapshotFormat::from_media_type(media_type).ok_or_else(|| internal(format!("media type {media_type:?}")))?;
    let mut snapshot = wire::parse_snapshot_as(text, &format).map_err(|e| internal(e.to_string()))?;
    snapshot.options.fit = None;
    let (snapshot, analysis) = wire::analyze_valid(snapshot).map_err(|e| internal(e.to_string()))?;
    let count = analysis.slices.len();
    let slice = analysis.slices.get(index).ok_or_else(|| {
        ApiError::NotFound(format!(
            "snapshot {} has {count} expiries (index 0 to {}), no index {index}",
            record.id,
            count - 1
        ))
    })?;
    let stored = stored_fitted_vols(&record.analysis, index);
    let view = smile_view(record, &snapshot, slice, stored.as_deref());
    smile_svg(&view, width).map_err(|e| internal(e.to_string()))
}

/// `curve[index].quote_fit.fitted_vol` of a stored analysis, when it has one.
fn stored_fitted_vols(analysis: &str, index: usize) -> Option<Vec<f64>> {
    let value: serde_json::Value = serde_json::from_str(analysis).ok()?;
    serde_json::from_value(value.get("curve")?.get(index)?.get("quote_fit")?.get("fitted_vol")?.clone()).ok()
}

/// What the chart shows of one analysed expiry.
fn smile_view(
    record: &StoredSnapshot,
    snapshot: &ValidSnapshot,
    s: &SliceAnalysis,
    stored: Option<&[f64]>,
) -> SmileView {
    let slice = &snapshot.slices[s.input_index];
    let (strikes, quotes) = (slice.strikes(), slice.quotes());
    let mark_of = |i: usize| {
        s.flagged_quotes.iter().find(|f| f.index == i).map_or(QuoteMark::Kept, |f| match f.reason {
            crate::analytics::analysis::FlagReason::LeftOut => QuoteMark::LeftOut,
            crate::analytics::analysis::FlagReason::Suspect => QuoteMark::Suspect,
        })
    };
    let marked: Vec<MarkedQuote> = (0..quotes.len())
        .map(|i| MarkedQuote {
            strike: strikes[i],
            vol: quotes[i].vol,
            half_spread: quotes[i].half_spread,
            fitted_vol: s.fitted_vols[i],
            mark: mark_of(i),
        })
        .collect();
    let kept: Vec<f64> = marked.iter().filter(|q| q.mark != QuoteMark::LeftOut).map(|q| q.strike).collect();
    let kept_range = (kept.first().copied().unwrap_or(f64::NAN), kept.last().copied().unwrap_or(f64::NAN));
    let (k_lo, k_hi) = s.smile.quoted_range;
    let reach = WING_REACH * (k_hi - k_lo);
    let curve = (0..=CURVE_SAMPLES)
        .map(|i| {
            let k = k_lo - reach + (k_hi - k_lo + 2.0 * reach) * i as f64 / CURVE_SAMPLES as f64;
            let w = s.smile.curve.total_variance(k);
            // A negative total variance has no vol: a gap in the line, not a zero.
            (s.forward * k.exp(), if w >= 0.0 { (w / s.tau).sqrt() } else { f64::NAN })
        })
        .collect();
    let mut notes = Vec::new();
    if let Some(stored) = stored.filter(|v| v.len() == s.fitted_vols.len()) {
        let gap = stored.iter().zip(&s.fitted_vols).map(|(a, b)| (a - b).abs()).fold(0.0, f64::max);
        if gap > REFIT_TOLERANCE {
            notes.push(format!(
                "note: refitted by this version of the service; differs from the stored fit by up to {:.4} vol points",
                100.0 * gap
            ));
        }
    }
    let expiry =
        snapshot.expiries.get(s.input_index).cloned().flatten().map(|e| e.chars().take(10).collect::<String>());
    // The expiry's arbitrage warnings, beside the flagged quotes the chart lists.
    notes.extend(s.warnings.iter().filter(|w| w.starts_with("butterfly") || w.starts_with("calendar")).cloned());
    SmileView {
        title: format!("{} smile, expiry {}", snapshot.underlying, expiry.unwrap_or_else(|| "not dated".into())),
        subtitle: vec![
            format!("as of {}, snapshot {}", rfc3339(record.as_of), record.id),
            format!("{:.3} years to expiry, forward {:.2}", s.tau, s.forward),
        ],
        forward: s.forward,
        quotes: marked,
        curve,
        kept_range,
        notes,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn widths_and_indices_are_checked() {
        let width = |text| super::super::query::chart_width(text, DEFAULT_SMILE_WIDTH);
        assert_eq!(width(None).unwrap(), DEFAULT_SMILE_WIDTH);
        assert_eq!(width(Some("420")).unwrap(), 420);
        for bad in ["", "319", "2401", "+500", "5e2", " 500", "99999999999"] {
            assert!(width(Some(bad)).is_err(), "{bad:?} taken as a width");
        }
        assert_eq!(parse_index("12").unwrap(), 12);
        assert_eq!(parse_index("4294967295").unwrap(), 4294967295);
        for bad in ["", "-1", "x", "1.0", "12345678901"] {
            assert!(parse_index(bad).is_err(), "{bad:?} taken as an index");
        }
    }
}
