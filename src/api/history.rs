//! `GET /v1/underlyings/{underlying}/history`: fits and term-structure points over a
//! time range, paged by an opaque cursor, as JSON or CSV (one row per snapshot and
//! expiry). The current revision of each `as_of` by default; every revision with
//! `revisions=all`.

use super::error::{ApiError, ProblemDetails};
use super::query::query_params;
use super::state::AppState;
use super::tenor_history::{
    attach_changes, vol_points_cell, write_tenor_rows, RowIdentity, TenorRow, TENOR_CSV_HEADER,
};
use super::timestamps::rfc3339;
use crate::store::{HistoryPosition, HistoryQuery, Revisions, Store, StoredSnapshot};
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::http::{header, HeaderMap, HeaderValue};
use axum::response::{IntoResponse, Response};
use axum::Json;
use chrono::DateTime;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

/// Default page size.
pub const DEFAULT_LIMIT: u32 = 100;
/// Largest page size.
pub const MAX_LIMIT: u32 = 1000;

/// Query of the history endpoint.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct HistoryParams {
    /// Inclusive start of `as_of`, RFC 3339.
    #[param(value_type = Option<String>, format = DateTime, example = "2026-11-30T09:00:00Z")]
    pub from: Option<String>,
    /// Exclusive end of `as_of`, RFC 3339.
    #[param(value_type = Option<String>, format = DateTime, example = "2026-12-01T00:00:00Z")]
    pub to: Option<String>,
    /// Snapshots per page, 1 to 1000 (default 100).
    #[param(value_type = Option<u16>, minimum = 1, maximum = 1000, example = 100)]
    pub limit: Option<String>,
    /// `next_cursor` of the previous page: the `as_of` (microseconds since 1970 in
    /// lowercase hexadecimal, `n` before it when earlier) and the id (hexadecimal) of the
    /// last snapshot on that page, joined by `-`. The page holds the snapshots after that
    /// position; a value of another form is a 400.
    #[param(value_type = Option<String>, pattern = r"^n?[0-9a-f]{1,15}-[0-9a-f]{1,15}$", example = "6618015388e00-27")]
    pub cursor: Option<String>,
    /// `json` (default) or `csv`; `Accept: text/csv` also selects CSV.
    #[param(value_type = Option<HistoryFormatDoc>, inline, example = "json")]
    pub format: Option<String>,
    /// `current` (default): the newest revision of each `as_of`; `all`: every
    /// revision, older ones with `superseded_by`.
    #[param(value_type = Option<RevisionChoice>, inline, example = "current")]
    pub revisions: Option<String>,
    /// CSV rows: `expiries` (default, one row per snapshot and expiry) or `tenors` (one
    /// row per snapshot and standard tenor, with the changes; vols in vol points).
    #[param(value_type = Option<CsvRowsDoc>, inline, example = "tenors")]
    pub rows: Option<String>,
}

/// What one CSV row of the history is.
#[derive(Debug, Clone, Copy, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum CsvRowsDoc {
    /// One row per snapshot and expiry.
    Expiries,
    /// One row per snapshot and standard tenor.
    Tenors,
}

/// Whether the CSV rows are tenors (`rows=tenors`) rather than expiries.
fn tenor_rows(text: Option<&str>) -> Result<bool, ApiError> {
    match text {
        None | Some("expiries") => Ok(false),
        Some("tenors") => Ok(true),
        Some(other) => {
            Err(ApiError::Parameter { name: "rows", message: format!("must be `expiries` or `tenors`, got {other:?}") })
        }
    }
}

/// Which revisions the history lists.
#[derive(Debug, Clone, Copy, Serialize, ToSchema)]
#[serde(rename_all = "lowercase")]
pub enum RevisionChoice {
    /// The newest revision of each `as_of`.
    Current,
    /// Every revision.
    All,
}

fn parse_revisions(text: Option<&str>) -> Result<Revisions, ApiError> {
    match text {
        None | Some("current") => Ok(Revisions::Current),
        Some("all") => Ok(Revisions::All),
        Some(other) => Err(ApiError::Parameter {
            name: "revisions",
            message: format!("must be `current` or `all`, got {other:?}"),
        }),
    }
}

/// The formats of a history page.
#[derive(Debug, Clone, Copy, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum HistoryFormatDoc {
    /// `application/json`.
    Json,
    /// `text/csv`, one row per snapshot and expiry.
    Csv,
}

/// A page of history.
#[derive(Debug, Serialize, ToSchema)]
pub struct HistoryPage {
    /// Underlying name.
    pub underlying: String,
    /// Snapshots in ascending `as_of` order.
    pub items: Vec<HistoryItem>,
    /// Pass as `cursor` for the next page; absent on the last page.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub next_cursor: Option<String>,
}

/// One stored snapshot in the history.
#[derive(Debug, Serialize, ToSchema)]
pub struct HistoryItem {
    /// Snapshot id.
    pub id: i64,
    /// Valuation time, RFC 3339.
    pub as_of: String,
    /// Commit time, RFC 3339.
    pub stored_at: String,
    /// Revision of this `as_of`, from 1 (each correction adds one).
    #[schema(minimum = 1, example = 1)]
    pub revision: i64,
    /// Id of the revision that replaced this one (only with `revisions=all`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub superseded_by: Option<i64>,
    /// The model fit, when one was made.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fit: Option<HistoryFit>,
    /// Term structure.
    pub curve: Vec<HistoryPoint>,
    /// The standard tenors (1M, 3M, 6M, 1Y, 2Y) from `curve`, by the rule of the
    /// analysis' `tenors`, with their changes since `previous_id` and `first_of_day_id`.
    pub tenors: Vec<HistoryTenor>,
    /// Id of the snapshot the `change_since_previous` figures are measured from: the
    /// current revision of the latest `as_of` before this one; absent for the first.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub previous_id: Option<i64>,
    /// Id of the snapshot the `change_since_first_of_day` figures are measured from:
    /// the current revision of the first `as_of` of the same UTC day (this one's own id
    /// for the first snapshot of the day).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub first_of_day_id: Option<i64>,
}

pub use super::tenor_history::HistoryTenor;

/// The fit of one snapshot, as stored.
#[derive(Debug, Clone, Serialize, Deserialize, ToSchema)]
pub struct HistoryFit {
    /// `rough_heston` or `heston`.
    pub model: String,
    /// `converged`, `max_iterations` or `failed`.
    pub status: String,
    /// Hurst exponent (rough Heston).
    #[serde(default)]
    pub hurst: Option<f64>,
    /// `rho * nu`.
    #[serde(default)]
    pub rho_nu: Option<f64>,
    /// Mean reversion.
    #[serde(default)]
    pub mean_reversion: Option<f64>,
    /// RMS distance between model and market leverage swaps.
    #[serde(default)]
    pub leverage_rmse: Option<f64>,
}

/// One expiry of one snapshot.
#[derive(Debug, Clone, Serialize, Deserialize, ToSchema)]
pub struct HistoryPoint {
    /// Time to expiry, years.
    pub tau: f64,
    /// Expiry, when given as a date.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub expiry: Option<String>,
    /// Variance swap level, annualised variance.
    pub variance_swap: f64,
    /// Gamma swap level.
    pub gamma_swap: f64,
    /// Leverage swap level.
    pub leverage_swap: f64,
    /// Forward variance ending at this expiry.
    #[serde(default)]
    pub forward_variance: Option<f64>,
    /// The fitted model's leverage swap.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub model_leverage_swap: Option<f64>,
    /// `sqrt(variance_swap)`, the variance swap as a vol (decimal).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub variance_swap_vol: Option<f64>,
    /// `sqrt(gamma_swap)`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gamma_swap_vol: Option<f64>,
    /// At-the-money vol (decimal), as the analysis reported it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub atm_vol: Option<f64>,
    /// 25-delta put vol minus 25-delta call vol (decimal), as the analysis reported it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub skew_25_delta: Option<f64>,
    /// The expiry's quality flags, as the analysis reported them.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub quality: Option<HistoryQuality>,
}

/// An expiry's quality flags in the history (the analysis keeps the details).
#[derive(Debug, Clone, Serialize, Deserialize, ToSchema)]
pub struct HistoryQuality {
    /// No butterfly arbitrage over the quoted strikes.
    pub butterfly_ok: bool,
    /// Total variance does not fall from the previous expiry.
    pub calendar_ok: bool,
    /// Quotes left out of the smile fit as off-market.
    pub excluded_points: u32,
}

/// The parts of a stored analysis the history shows.
#[derive(Deserialize)]
struct StoredView {
    curve: Vec<HistoryPoint>,
    #[serde(default)]
    fit: Option<StoredFitView>,
}

#[derive(Deserialize)]
struct StoredFitView {
    model: String,
    status: String,
    params: ParamsView,
    #[serde(default)]
    leverage_rmse: Option<f64>,
    #[serde(default)]
    model_leverage_swap: Vec<f64>,
}

#[derive(Deserialize)]
struct ParamsView {
    #[serde(default)]
    hurst: Option<f64>,
    #[serde(default)]
    rho_nu: Option<f64>,
    #[serde(default)]
    mean_reversion: Option<f64>,
}

/// The history view of a stored analysis.
///
/// # Errors
/// [`ApiError::Internal`] when the stored analysis cannot be read.
pub fn history_item(record: &StoredSnapshot) -> Result<HistoryItem, ApiError> {
    let view: StoredView = serde_json::from_str(&record.analysis)
        .map_err(|e| ApiError::Internal(format!("stored analysis {}: {e}", record.id)))?;
    let mut curve = view.curve;
    let fit = view.fit.map(|f| {
        for (point, model) in curve.iter_mut().zip(&f.model_leverage_swap) {
            point.model_leverage_swap = Some(*model);
        }
        HistoryFit {
            model: f.model,
            status: f.status,
            hurst: f.params.hurst,
            rho_nu: f.params.rho_nu,
            mean_reversion: f.params.mean_reversion,
            leverage_rmse: f.leverage_rmse,
        }
    });
    Ok(HistoryItem {
        id: record.id,
        as_of: rfc3339(record.as_of),
        stored_at: rfc3339(record.stored_at),
        revision: record.revision,
        superseded_by: record.superseded_by,
        fit,
        tenors: super::tenor_history::tenors_of_levels(&expiry_levels(&curve)),
        curve,
        previous_id: None,
        first_of_day_id: None,
    })
}

/// The levels of a stored curve the standard tenors are read from.
pub fn expiry_levels(curve: &[HistoryPoint]) -> Vec<crate::analytics::tenors::ExpiryLevels> {
    curve
        .iter()
        .map(|p| crate::analytics::tenors::ExpiryLevels {
            tau: p.tau,
            variance_swap: p.variance_swap,
            gamma_swap: p.gamma_swap,
            atm_vol: p.atm_vol,
            skew_25_delta: p.skew_25_delta,
        })
        .collect()
}

/// Most hexadecimal digits of each part of a cursor: 15 digits (60 bits) hold every
/// RFC 3339 time (years 0 to 9999) in microseconds and every id, so any cursor of the
/// documented form decodes.
const CURSOR_DIGITS: usize = 15;

/// The cursor: the position of the last row of a page, as the parameter documents it.
fn encode_cursor(position: HistoryPosition) -> String {
    let micros = position.as_of.timestamp_micros();
    let sign = if micros < 0 { "n" } else { "" };
    format!("{sign}{:x}-{:x}", micros.unsigned_abs(), position.id)
}

/// A lowercase hexadecimal number of 1 to [`CURSOR_DIGITS`] digits.
fn cursor_part(text: &str) -> Option<i64> {
    let digits_ok = (1..=CURSOR_DIGITS).contains(&text.len())
        && text.bytes().all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b));
    digits_ok.then(|| i64::from_str_radix(text, 16).ok()).flatten()
}

fn decode_cursor(text: &str) -> Result<HistoryPosition, ApiError> {
    let invalid = || ApiError::Parameter {
        name: "cursor",
        message: format!("must be a next_cursor returned by this endpoint (such as 6618015388e00-27), got {text:?}"),
    };
    let (negative, rest) = match text.strip_prefix('n') {
        Some(rest) => (true, rest),
        None => (false, text),
    };
    let (micros, id) = rest.split_once('-').ok_or_else(invalid)?;
    let micros = cursor_part(micros).ok_or_else(invalid)?;
    let id = cursor_part(id).ok_or_else(invalid)?;
    let micros = if negative { -micros } else { micros };
    // Every stored as_of lies between these (RFC 3339 years 0 to 9999, any offset), so a
    // cursor beyond them means "before every snapshot" or "after every snapshot"; held
    // there, it stays within what each store's time type holds.
    let (micros, id) = if micros < EARLIEST_CURSOR_MICROS {
        (EARLIEST_CURSOR_MICROS, 0)
    } else if micros > LATEST_CURSOR_MICROS {
        (LATEST_CURSOR_MICROS, i64::MAX)
    } else {
        (micros, id)
    };
    let as_of = DateTime::from_timestamp_micros(micros).ok_or_else(invalid)?;
    Ok(HistoryPosition { as_of, id })
}

/// Two days before 0000-01-01T00:00:00Z, in microseconds since 1970.
const EARLIEST_CURSOR_MICROS: i64 = (-62_167_219_200 - 2 * 86_400) * 1_000_000;
/// Two days after 9999-12-31T23:59:59Z, in microseconds since 1970.
const LATEST_CURSOR_MICROS: i64 = (253_402_300_799 + 2 * 86_400) * 1_000_000;

fn parse_limit(text: Option<&str>) -> Result<u32, ApiError> {
    let Some(text) = text else {
        return Ok(DEFAULT_LIMIT);
    };
    let digits = !text.is_empty() && text.bytes().all(|b| b.is_ascii_digit());
    match text.parse::<u32>() {
        Ok(n) if digits && (1..=MAX_LIMIT).contains(&n) => Ok(n),
        _ => Err(ApiError::Parameter { name: "limit", message: format!("must be 1 to {MAX_LIMIT}, got {text:?}") }),
    }
}

/// Whether the client asked for CSV.
fn wants_csv(format: Option<&str>, headers: &HeaderMap) -> Result<bool, ApiError> {
    match format {
        Some("csv") => Ok(true),
        Some("json") => Ok(false),
        Some(other) => {
            Err(ApiError::Parameter { name: "format", message: format!("must be `json` or `csv`, got {other:?}") })
        }
        None => Ok(headers
            .get(header::ACCEPT)
            .and_then(|v| v.to_str().ok())
            .is_some_and(|accept| accept.split(',').any(|m| m.trim().starts_with("text/csv")))),
    }
}

/// CSV columns, one row per snapshot and expiry: levels in annualised variance, vols
/// (`_pts`) in vol points to 3 decimals, as on the page and the charts.
pub const CSV_HEADER: [&str; 26] = [
    "snapshot_id",
    "underlying",
    "as_of",
    "stored_at",
    "revision",
    "superseded_by",
    "tau",
    "expiry",
    "variance_swap",
    "gamma_swap",
    "leverage_swap",
    "forward_variance",
    "model_leverage_swap",
    "variance_swap_vol_pts",
    "gamma_swap_vol_pts",
    "atm_vol_pts",
    "skew_25_delta_pts",
    "butterfly_ok",
    "calendar_ok",
    "excluded_points",
    "fit_model",
    "fit_status",
    "hurst",
    "rho_nu",
    "mean_reversion",
    "leverage_rmse",
];

/// A number as JSON writes it (shortest round-trip form, exponent for tiny values);
/// empty when absent.
fn cell(x: Option<f64>) -> String {
    x.map(number).unwrap_or_default()
}

/// Significant digits of numbers in CSV: the levels are known to far fewer (their
/// standard errors are 1e-6 relative at best), and twelve keep the last bits'
/// rounding (`-0.0014000000000000054`) out of a spreadsheet.
const CSV_SIGNIFICANT_DIGITS: usize = 12;

/// `x` rounded to [`CSV_SIGNIFICANT_DIGITS`] and written in the shortest form that
/// reads back as that rounded value.
fn number(x: f64) -> String {
    let rounded = format!("{x:.prec$e}", prec = CSV_SIGNIFICANT_DIGITS - 1).parse::<f64>().unwrap_or(x);
    serde_json::Value::from(rounded).to_string()
}

fn csv_body(page: &HistoryPage) -> Result<Vec<u8>, ApiError> {
    let failed = |e: csv::Error| ApiError::Internal(format!("CSV: {e}"));
    let mut writer = csv::Writer::from_writer(Vec::new());
    writer.write_record(CSV_HEADER).map_err(failed)?;
    for item in &page.items {
        let fit = item.fit.as_ref();
        for p in &item.curve {
            let quality = p.quality.as_ref();
            writer
                .write_record([
                    item.id.to_string(),
                    page.underlying.clone(),
                    item.as_of.clone(),
                    item.stored_at.clone(),
                    item.revision.to_string(),
                    item.superseded_by.map(|id| id.to_string()).unwrap_or_default(),
                    number(p.tau),
                    p.expiry.clone().unwrap_or_default(),
                    number(p.variance_swap),
                    number(p.gamma_swap),
                    number(p.leverage_swap),
                    cell(p.forward_variance),
                    cell(p.model_leverage_swap),
                    vol_points_cell(p.variance_swap_vol),
                    vol_points_cell(p.gamma_swap_vol),
                    vol_points_cell(p.atm_vol),
                    vol_points_cell(p.skew_25_delta),
                    quality.map(|q| q.butterfly_ok.to_string()).unwrap_or_default(),
                    quality.map(|q| q.calendar_ok.to_string()).unwrap_or_default(),
                    quality.map(|q| q.excluded_points.to_string()).unwrap_or_default(),
                    fit.map(|f| f.model.clone()).unwrap_or_default(),
                    fit.map(|f| f.status.clone()).unwrap_or_default(),
                    cell(fit.and_then(|f| f.hurst)),
                    cell(fit.and_then(|f| f.rho_nu)),
                    cell(fit.and_then(|f| f.mean_reversion)),
                    cell(fit.and_then(|f| f.leverage_rmse)),
                ])
                .map_err(failed)?;
        }
    }
    writer.into_inner().map_err(|e| ApiError::Internal(format!("CSV: {e}")))
}

/// The tenor CSV of a page (`rows=tenors`).
fn tenor_csv_body(page: &HistoryPage) -> Result<Vec<u8>, ApiError> {
    let failed = |e: csv::Error| ApiError::Internal(format!("CSV: {e}"));
    let mut writer = csv::Writer::from_writer(Vec::new());
    writer.write_record(TENOR_CSV_HEADER).map_err(failed)?;
    for item in &page.items {
        let identity = RowIdentity {
            id: item.id,
            underlying: &page.underlying,
            as_of: &item.as_of,
            stored_at: &item.stored_at,
            revision: item.revision,
            superseded_by: item.superseded_by,
            previous_id: item.previous_id,
            first_of_day_id: item.first_of_day_id,
        };
        write_tenor_rows(&mut writer, &identity, &item.tenors, &cell).map_err(failed)?;
    }
    writer.into_inner().map_err(|e| ApiError::Internal(format!("CSV: {e}")))
}

/// Fits and term-structure points of an underlying over time.
#[utoipa::path(
    get, path = "/v1/underlyings/{underlying}/history", tag = "underlyings",
    params(
        ("underlying" = String, Path, description = "Underlying name", example = "KESTREL50"),
        ("Accept" = Option<String>, Header, description = "`text/csv` for CSV"),
        HistoryParams
    ),
    responses(
        (status = 200, description = "A page of history (the current revision of each `as_of`, or every \
revision with `revisions=all`); `Link` with `rel=\"next\"` when more follow",
         content((HistoryPage = "application/json"), (String = "text/csv")),
         headers(("Link" = String, description = "URL of the next page (RFC 8288)"))),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No snapshot of this underlying", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "An underlying no snapshot can have (a control character, over 200 characters)", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_history(
    State(state): State<AppState>,
    Path(underlying): Path<String>,
    headers: HeaderMap,
    params: Result<Query<HistoryParams>, QueryRejection>,
) -> Result<Response, ApiError> {
    super::query::checked_underlying(&underlying)?;
    let params = query_params(params)?;
    let csv = wants_csv(params.format.as_deref(), &headers)?;
    let by_tenor = tenor_rows(params.rows.as_deref())?;
    let query = HistoryQuery {
        underlying: underlying.clone(),
        from: super::query::time_parameter("from", params.from.as_deref())?,
        to: super::query::time_parameter("to", params.to.as_deref())?,
        after: params.cursor.as_deref().map(decode_cursor).transpose()?,
        limit: parse_limit(params.limit.as_deref())?,
        revisions: parse_revisions(params.revisions.as_deref())?,
    };
    let store_error = |e| state.store_failed("history", e);
    // One row more than asked tells whether a next page exists.
    let mut records =
        state.store().history(&HistoryQuery { limit: query.limit + 1, ..query.clone() }).await.map_err(store_error)?;
    if records.is_empty()
        && query.after.is_none()
        && state.store().latest_id(&underlying).await.map_err(store_error)?.is_none()
    {
        return Err(ApiError::NotFound(format!("no snapshot of underlying {underlying:?}")));
    }
    let more = records.len() > query.limit as usize;
    records.truncate(query.limit as usize);
    let next_cursor =
        more.then(|| records.last().map(|r| encode_cursor(HistoryPosition { as_of: r.as_of, id: r.id }))).flatten();
    let mut items = records.iter().map(history_item).collect::<Result<Vec<_>, _>>()?;
    let mut rows: Vec<TenorRow> = records
        .iter()
        .zip(items.iter_mut())
        .map(|(record, item)| TenorRow {
            record,
            tenors: &mut item.tenors,
            previous_id: &mut item.previous_id,
            first_of_day_id: &mut item.first_of_day_id,
        })
        .collect();
    attach_changes(&state, &underlying, &mut rows).await?;
    let page = HistoryPage { underlying: underlying.clone(), items, next_cursor };
    let mut response = if csv {
        let body = if by_tenor { tenor_csv_body(&page)? } else { csv_body(&page)? };
        ([(header::CONTENT_TYPE, HeaderValue::from_static("text/csv; charset=utf-8"))], body).into_response()
    } else {
        Json(&page).into_response()
    };
    if let Some(cursor) = &page.next_cursor {
        let mut next = url_query(&[
            ("from", params.from.as_deref()),
            ("to", params.to.as_deref()),
            ("limit", params.limit.as_deref()),
            ("format", params.format.as_deref()),
            ("revisions", params.revisions.as_deref()),
            ("rows", params.rows.as_deref()),
            ("cursor", Some(cursor)),
        ]);
        next = format!("</v1/underlyings/{}/history?{next}>; rel=\"next\"", percent_encode(&underlying));
        if let Ok(value) = HeaderValue::from_str(&next) {
            response.headers_mut().insert(header::LINK, value);
        }
    }
    Ok(response)
}

/// Percent-encodes everything but RFC 3986 unreserved characters.
fn percent_encode(text: &str) -> String {
    text.bytes()
        .map(|b| match b {
            b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'.' | b'_' | b'~' => (b as char).to_string(),
            other => format!("%{other:02X}"),
        })
        .collect()
}

fn url_query(pairs: &[(&str, Option<&str>)]) -> String {
    pairs.iter().filter_map(|(k, v)| v.map(|v| format!("{k}={}", percent_encode(v)))).collect::<Vec<_>>().join("&")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// CSV numbers keep twelve significant digits: the last bits' rounding goes, the
    /// levels' precision (their standard errors are 1e-6 relative at best) stays.
    #[test]
    fn csv_numbers_drop_rounding_noise() {
        assert_eq!(number(-0.0014000000000000054), "-0.0014");
        assert_eq!(number(0.1 + 0.2), "0.3");
        assert_eq!(number(0.036057489598055), "0.0360574895981");
        assert_eq!(number(-1.7111715529634768e-4), "-0.000171117155296");
        assert_eq!(number(2.5e-18), "2.5e-18");
        assert_eq!(number(f64::NAN), "null");
    }

    #[test]
    fn cursors_round_trip_and_reject_garbage() {
        let position =
            HistoryPosition { as_of: DateTime::from_timestamp_micros(1_796_052_600_123_456).unwrap(), id: 42 };
        assert_eq!(decode_cursor(&encode_cursor(position)).unwrap(), position);
        let early = HistoryPosition { as_of: DateTime::from_timestamp_micros(-86_400_000_001).unwrap(), id: 7 };
        assert_eq!(encode_cursor(early), "n141dd76001-7");
        assert_eq!(decode_cursor(&encode_cursor(early)).unwrap(), early);
        for garbage in ["", "zz", "1-", "-1", "n-1", "1-2-3", "A-1", "+1-2", "1-+2", "1000000000000000-1", "1- 2"] {
            assert!(decode_cursor(garbage).is_err(), "{garbage:?} was taken as a cursor");
        }
    }

    #[test]
    fn cursors_beyond_any_time_stay_before_or_after_every_snapshot() {
        let early = decode_cursor("nc6f8c2b20720f92-882c1dde6cd1201").unwrap();
        assert_eq!((early.as_of.timestamp_micros(), early.id), (EARLIEST_CURSOR_MICROS, 0));
        let late = decode_cursor("fffffffffffffff-1").unwrap();
        assert_eq!((late.as_of.timestamp_micros(), late.id), (LATEST_CURSOR_MICROS, i64::MAX));
    }

    #[test]
    fn every_cursor_of_the_documented_form_decodes() {
        for text in ["0-0", "fffffffffffffff-fffffffffffffff", "nfffffffffffffff-1", "6618015388e00-27"] {
            assert!(decode_cursor(text).is_ok(), "{text:?} was refused");
        }
    }

    #[test]
    fn revisions_are_current_or_all() {
        assert_eq!(parse_revisions(None).unwrap(), Revisions::Current);
        assert_eq!(parse_revisions(Some("current")).unwrap(), Revisions::Current);
        assert_eq!(parse_revisions(Some("all")).unwrap(), Revisions::All);
        assert!(parse_revisions(Some("ALL")).is_err());
        assert!(parse_revisions(Some("")).is_err());
    }

    #[test]
    fn limits_are_bounded() {
        assert_eq!(parse_limit(None).unwrap(), DEFAULT_LIMIT);
        assert_eq!(parse_limit(Some("1000")).unwrap(), 1000);
        assert!(parse_limit(Some("0")).is_err());
        assert!(parse_limit(Some("1001")).is_err());
        assert!(parse_limit(Some(" 5")).is_err());
        assert!(parse_limit(Some("+5")).is_err());
    }

    #[test]
    fn underlying_names_are_escaped_in_links() {
        assert_eq!(percent_encode("A B/C"), "A%20B%2FC");
    }
}
