//! Serves the charts drawn by [`crate::chart_drawing`] and the overview page:
//! `GET /v1/underlyings/{u}/latest/chart.svg`,
//! `GET /v1/underlyings/{u}/history/chart.svg?param=..`, and `GET /` (plain HTML,
//! CSS and a little script served by the binary; no build step, nothing external).

use super::error::{ApiError, ProblemDetails};
use super::history::{history_item, HistoryFit, HistoryItem};
use super::query::query_params;
use super::state::AppState;
use crate::chart_drawing::{expiry_date, term_structure_svg, TermPoint, DEFAULT_WIDTH};
use crate::store::{HistoryQuery, Revisions, Store};
use crate::time_chart::{time_chart_svg, TimePoint, TimeSeries};
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::http::{header, HeaderValue, StatusCode};
use axum::response::{Html, IntoResponse, Response};
use serde::Deserialize;
use utoipa::{IntoParams, ToSchema};

/// Most snapshots drawn in a parameter history.
pub const MAX_HISTORY_POINTS: u32 = 5000;

/// The overview page.
const OVERVIEW_HTML: &str = include_str!("overview.html");

/// The term-structure points of a stored analysis.
pub fn term_points(item: &HistoryItem) -> Vec<TermPoint> {
    item.curve
        .iter()
        .map(|p| TermPoint {
            tau: p.tau,
            variance_swap: p.variance_swap,
            gamma_swap: p.gamma_swap,
            leverage_swap: p.leverage_swap,
            forward_variance: p.forward_variance,
            model_leverage_swap: p.model_leverage_swap,
        })
        .collect()
}

/// An SVG body, not cached without revalidation, with an optional entity tag.
pub fn svg_response(svg: String, etag: Option<HeaderValue>) -> Response {
    let mut response = (StatusCode::OK, svg).into_response();
    let headers = response.headers_mut();
    headers.insert(header::CONTENT_TYPE, HeaderValue::from_static("image/svg+xml"));
    headers.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    if let Some(tag) = etag {
        headers.insert(header::ETAG, tag);
    }
    response
}

/// A chart that could not be drawn: an internal error.
pub fn chart_failed(e: crate::chart_drawing::ChartError) -> ApiError {
    ApiError::Internal(e.to_string())
}

/// The latest term structures of an underlying as an SVG chart.
#[utoipa::path(
    get, path = "/v1/underlyings/{underlying}/latest/chart.svg", tag = "charts",
    params(("underlying" = String, Path, description = "Underlying name", example = "KESTREL50"), ChartWidthQuery),
    responses(
        (status = 200, description = "Variance and gamma swap vols and forward vol (steps; a negative or missing \
forward variance a shaded gap) in vol points, the leverage swap as gamma-swap vol minus variance-swap vol in vol \
points with the model fit, by expiry date (the current revision of the latest `as_of`)",
         body = String, content_type = "image/svg+xml", headers(("ETag" = String, description = "Entity tag of the snapshot drawn"))),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No snapshot of this underlying", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "An underlying no snapshot can have (a control character, over 200 characters)", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_latest_chart(
    State(state): State<AppState>,
    Path(underlying): Path<String>,
    query: Result<Query<ChartWidthQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    super::query::checked_underlying(&underlying)?;
    let width = super::query::chart_width(query_params(query)?.width.as_deref(), DEFAULT_WIDTH)?;
    let record = state
        .store()
        .latest(&underlying)
        .await
        .map_err(|e| state.store_failed("latest", e))?
        .ok_or_else(|| ApiError::NotFound(format!("no snapshot of underlying {underlying:?}")))?;
    let item = history_item(&record)?;
    let title = format!("{underlying}  as of {}  (snapshot {})", item.as_of, item.id);
    let svg = term_structure_svg(&title, &term_points(&item), width, &|tau| expiry_date(record.as_of, tau))
        .map_err(chart_failed)?;
    Ok(svg_response(svg, HeaderValue::from_str(&format!("\"{}\"", record.id)).ok()))
}

/// Query of the term-structure chart.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ChartWidthQuery {
    /// Chart width in pixels, 320 to 2400 (default 880); the text keeps its size, so
    /// ask for the width it is shown at.
    #[param(value_type = Option<u16>, minimum = 320, maximum = 2400, example = 880)]
    pub width: Option<String>,
}

/// Query of the parameter history chart.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct ParamChartQuery {
    /// The fitted parameter to draw (default `hurst`).
    #[param(value_type = Option<ChartParamDoc>, inline, example = "hurst")]
    pub param: Option<String>,
    /// Inclusive start of `as_of`, RFC 3339.
    #[param(value_type = Option<String>, format = DateTime, example = "2026-11-30T09:00:00Z")]
    pub from: Option<String>,
    /// Exclusive end of `as_of`, RFC 3339.
    #[param(value_type = Option<String>, format = DateTime, example = "2026-12-01T00:00:00Z")]
    pub to: Option<String>,
    /// Chart width in pixels, 320 to 2400 (default 880).
    #[param(value_type = Option<u16>, minimum = 320, maximum = 2400, example = 880)]
    pub width: Option<String>,
}

/// The fitted parameters a history chart can draw.
#[derive(Debug, Clone, Copy, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum ChartParamDoc {
    /// Hurst exponent (rough Heston).
    Hurst,
    /// `rho * nu`.
    RhoNu,
    /// Mean reversion.
    MeanReversion,
    /// RMS distance between model and market leverage swaps.
    LeverageRmse,
}

/// A fitted parameter of an underlying through time as an SVG chart.
#[utoipa::path(
    get, path = "/v1/underlyings/{underlying}/history/chart.svg", tag = "charts",
    params(("underlying" = String, Path, description = "Underlying name", example = "KESTREL50"), ParamChartQuery),
    responses(
        (status = 200, description = "The parameter against valuation time (the current revision of each `as_of`); \
each point links to its snapshot's page (`/?snapshot=ID`)",
         body = String, content_type = "image/svg+xml"),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No fitted snapshot of this underlying in the range", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "An underlying no snapshot can have (a control character, over 200 characters)", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_history_chart(
    State(state): State<AppState>,
    Path(underlying): Path<String>,
    query: Result<Query<ParamChartQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    super::query::checked_underlying(&underlying)?;
    let query = query_params(query)?;
    let param = query.param.as_deref().unwrap_or("hurst");
    let width = super::query::chart_width(query.width.as_deref(), DEFAULT_WIDTH)?;
    let pick: fn(&HistoryFit) -> Option<f64> = match param {
        "hurst" => |f| f.hurst,
        "rho_nu" => |f| f.rho_nu,
        "mean_reversion" => |f| f.mean_reversion,
        "leverage_rmse" => |f| f.leverage_rmse,
        other => {
            return Err(ApiError::Parameter {
                name: "param",
                message: format!("must be hurst, rho_nu, mean_reversion or leverage_rmse, got {other:?}"),
            })
        }
    };
    let history = HistoryQuery {
        underlying: underlying.clone(),
        from: super::query::time_parameter("from", query.from.as_deref())?,
        to: super::query::time_parameter("to", query.to.as_deref())?,
        after: None,
        limit: MAX_HISTORY_POINTS,
        // One point per valuation time: a corrected snapshot replaces the older one.
        revisions: Revisions::Current,
    };
    let records = state.store().history(&history).await.map_err(|e| state.store_failed("history", e))?;
    let mut points = Vec::new();
    for record in &records {
        if let Some(v) = history_item(record)?.fit.as_ref().and_then(pick) {
            points.push(TimePoint {
                at: record.as_of,
                value: Some(v),
                href: snapshot_page(record.id),
                snapshot_id: record.id,
            });
        }
    }
    if points.is_empty() {
        return Err(ApiError::NotFound(format!("no fitted {param} for underlying {underlying:?} in the range")));
    }
    let (lo, hi) = points
        .iter()
        .filter_map(|p| p.value)
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
    // Enough decimals that neighbouring ticks (about a sixth of the range apart) differ.
    let decimals = (2.0 - ((hi - lo).max(1e-9) / 10.0).log10().floor()).clamp(2.0, 8.0) as usize;
    let title = format!("{underlying}: {param} through time ({} snapshots)", points.len());
    let series = [TimeSeries { label: param.to_string(), points }];
    let svg = time_chart_svg(&title, param, &series, decimals, width).map_err(chart_failed)?;
    Ok(svg_response(svg, None))
}

/// The overview page of a stored snapshot.
pub fn snapshot_page(id: i64) -> String {
    format!("/?snapshot={id}")
}

/// The overview page.
#[utoipa::path(get, path = "/", tag = "charts",
    params(("snapshot" = Option<i64>, Query, description = "A stored snapshot to show instead of the latest \
(read by the page's script; the page itself is the same)", example = 1)),
    responses(
        (status = 200, description = "Overview page (HTML)", body = String, content_type = "text/html"),
        (status = 400, description = "A `snapshot` that is no 64-bit integer", body = ProblemDetails, content_type = "application/problem+json"),
    ))]
pub async fn get_overview(query: Result<Query<OverviewQuery>, QueryRejection>) -> Result<Html<&'static str>, ApiError> {
    if let Some(text) = query_params(query)?.snapshot {
        text.parse::<i64>().map_err(|_| ApiError::Parameter {
            name: "snapshot",
            message: format!("must be a snapshot id (a 64-bit integer), got {text:?}"),
        })?;
    }
    Ok(Html(OVERVIEW_HTML))
}

/// Query of the overview page: the snapshot it shows, checked here as the document
/// states it (the page's script reads it).
#[derive(Debug, Deserialize)]
pub struct OverviewQuery {
    /// A stored snapshot's id.
    pub snapshot: Option<String>,
}
