//! Charts of the standard tenors and of stored snapshots:
//! `GET /v1/underlyings/{u}/history/tenors.svg` (chosen tenors' market levels through
//! time, each point a link to its snapshot) and `GET /v1/snapshots/{id}/chart.svg`
//! (the term structures of any stored snapshot).

use super::chart_endpoints::{chart_failed, snapshot_page, svg_response, term_points, ChartWidthQuery};
use super::error::{ApiError, ProblemDetails};
use super::history::history_item;
use super::query::query_params;
use super::state::AppState;
use crate::analytics::tenors::STANDARD_TENORS;
use crate::chart_drawing::{expiry_date, term_structure_svg, DEFAULT_WIDTH};
use crate::store::{HistoryQuery, Revisions, Store};
use crate::time_chart::{time_chart_svg, TimePoint, TimeSeries};
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, State};
use axum::http::HeaderValue;
use axum::response::Response;
use serde::{Deserialize, Serialize};
use utoipa::{IntoParams, ToSchema};

/// Query of the tenor chart.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct TenorChartQuery {
    /// Tenors to draw, comma-separated, from `1M`, `3M`, `6M`, `1Y`, `2Y` (default all).
    #[param(value_type = Option<String>, pattern = r"^(1M|3M|6M|1Y|2Y)(,(1M|3M|6M|1Y|2Y))*$", example = "1M,3M,1Y")]
    pub tenors: Option<String>,
    /// The figure, in vol points (default `variance_swap_vol`).
    #[param(value_type = Option<TenorFigureChoice>, inline, example = "variance_swap_vol")]
    pub figure: Option<String>,
    /// Inclusive start of `as_of`, RFC 3339.
    #[param(value_type = Option<String>, format = DateTime, example = "2026-11-30T00:00:00Z")]
    pub from: Option<String>,
    /// Exclusive end of `as_of`, RFC 3339.
    #[param(value_type = Option<String>, format = DateTime, example = "2026-12-01T00:00:00Z")]
    pub to: Option<String>,
    /// Chart width in pixels, 320 to 2400 (default 880); the text keeps its size, so
    /// ask for the width it is shown at.
    #[param(value_type = Option<u16>, minimum = 320, maximum = 2400, example = 880)]
    pub width: Option<String>,
}

/// The tenor figures the chart draws (all in vol points).
#[derive(Debug, Clone, Copy, Serialize, Deserialize, ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum TenorFigureChoice {
    /// Variance swap vol.
    VarianceSwapVol,
    /// At-the-money vol.
    AtmVol,
    /// 25-delta put vol minus 25-delta call vol (named as the analysis names it; the
    /// snake-case rule alone would write `skew25_delta`).
    #[serde(rename = "skew_25_delta")]
    Skew25Delta,
    /// Forward vol from the previous standard tenor.
    ForwardVol,
    /// `sqrt(gamma_swap) - sqrt(variance_swap)`.
    GammaMinusVarianceVol,
}

/// The figures the chart takes, with their axis labels.
const FIGURES: [(&str, &str); 5] = [
    ("variance_swap_vol", "variance swap vol (vol points)"),
    ("atm_vol", "at-the-money vol (vol points)"),
    ("skew_25_delta", "25-delta skew, put minus call (vol points)"),
    ("forward_vol", "forward vol from the previous tenor (vol points)"),
    ("gamma_minus_variance_vol", "gamma minus variance swap vol (vol points)"),
];

fn chosen_tenors(text: Option<&str>) -> Result<Vec<&'static str>, ApiError> {
    let Some(text) = text else {
        return Ok(STANDARD_TENORS.iter().map(|t| t.0).collect());
    };
    let mut chosen = Vec::new();
    for part in text.split(',') {
        let Some(&(name, _)) = STANDARD_TENORS.iter().find(|t| t.0 == part) else {
            return Err(ApiError::Parameter {
                name: "tenors",
                message: format!("must list tenors from 1M, 3M, 6M, 1Y, 2Y separated by commas, got {text:?}"),
            });
        };
        if !chosen.contains(&name) {
            chosen.push(name);
        }
    }
    Ok(chosen)
}

/// Chosen standard tenors of an underlying through time as an SVG chart.
#[utoipa::path(
    get, path = "/v1/underlyings/{underlying}/history/tenors.svg", tag = "charts",
    params(("underlying" = String, Path, description = "Underlying name", example = "KESTREL50"), TenorChartQuery),
    responses(
        (status = 200, description = "One line per tenor against valuation time (UTC; the current revision of each \
`as_of`), in vol points, broken where a tenor has no figure; each point links to its snapshot's page \
(`/?snapshot=ID`)", body = String, content_type = "image/svg+xml"),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No snapshot of this underlying with the figure in the range", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "An underlying no snapshot can have (a control character, over 200 characters)", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_tenor_chart(
    State(state): State<AppState>,
    Path(underlying): Path<String>,
    query: Result<Query<TenorChartQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    super::query::checked_underlying(&underlying)?;
    let query = query_params(query)?;
    let tenors = chosen_tenors(query.tenors.as_deref())?;
    let width = super::query::chart_width(query.width.as_deref(), DEFAULT_WIDTH)?;
    let figure = query.figure.as_deref().unwrap_or("variance_swap_vol");
    let Some(&(figure, axis)) = FIGURES.iter().find(|f| f.0 == figure) else {
        let names: Vec<&str> = FIGURES.iter().map(|f| f.0).collect();
        return Err(ApiError::Parameter {
            name: "figure",
            message: format!("must be one of {}, got {figure:?}", names.join(", ")),
        });
    };
    let history = HistoryQuery {
        underlying: underlying.clone(),
        from: super::query::time_parameter("from", query.from.as_deref())?,
        to: super::query::time_parameter("to", query.to.as_deref())?,
        after: None,
        limit: super::chart_endpoints::MAX_HISTORY_POINTS,
        revisions: Revisions::Current,
    };
    let records = state.store().history(&history).await.map_err(|e| state.store_failed("history", e))?;
    let mut series: Vec<TimeSeries> =
        tenors.iter().map(|name| TimeSeries { label: (*name).to_string(), points: Vec::new() }).collect();
    for record in &records {
        let item = history_item(record)?;
        for s in &mut series {
            let value = item
                .tenors
                .iter()
                .find(|t| t.tenor.tenor == s.label)
                .and_then(|t| t.tenor.figures.by_name(figure))
                .map(|v| 100.0 * v);
            s.points.push(TimePoint {
                at: record.as_of,
                value,
                href: snapshot_page(record.id),
                snapshot_id: record.id,
            });
        }
    }
    let name = axis.split(" (").next().unwrap_or(axis);
    let title = format!("{underlying}: {name} by tenor ({} snapshots)", records.len());
    let svg = time_chart_svg(&title, axis, &series, 2, width).map_err(|e| match e {
        crate::chart_drawing::ChartError::Empty => {
            ApiError::NotFound(format!("no {figure} at these tenors for underlying {underlying:?} in the range"))
        }
        other => chart_failed(other),
    })?;
    Ok(svg_response(svg, None))
}

/// The term structures of a stored snapshot as an SVG chart.
#[utoipa::path(
    get, path = "/v1/snapshots/{id}/chart.svg", tag = "charts",
    params(("id" = i64, Path, description = "Snapshot id", example = 1), ChartWidthQuery),
    responses(
        (status = 200, description = "Variance and gamma swap vols, forward vol, leverage swap with the model fit of \
this snapshot (any revision)",
         body = String, content_type = "image/svg+xml", headers(("ETag" = String, description = "Entity tag of the snapshot drawn"))),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No snapshot with this id", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_snapshot_chart(
    State(state): State<AppState>,
    Path(id): Path<String>,
    query: Result<Query<ChartWidthQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    let width = super::query::chart_width(query_params(query)?.width.as_deref(), DEFAULT_WIDTH)?;
    // As `GET /v1/snapshots/{id}`: an id that is no number names no snapshot.
    let not_found = || ApiError::NotFound(format!("no snapshot with id {id:?}"));
    let numeric: i64 = id.parse().map_err(|_| not_found())?;
    let record =
        state.store().get(numeric, false).await.map_err(|e| state.store_failed("get", e))?.ok_or_else(not_found)?;
    let item = history_item(&record)?;
    let revision = if record.revision > 1 { format!(", revision {}", record.revision) } else { String::new() };
    let title = format!("{}  as of {}  (snapshot {}{revision})", record.underlying, item.as_of, item.id);
    let svg = term_structure_svg(&title, &term_points(&item), width, &|tau| expiry_date(record.as_of, tau))
        .map_err(chart_failed)?;
    Ok(svg_response(svg, HeaderValue::from_str(&format!("\"{}\"", record.id)).ok()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tenors_are_named_standard_tenors() {
        assert_eq!(chosen_tenors(Some("1Y,1M,1Y")).unwrap(), ["1Y", "1M"]);
        assert_eq!(chosen_tenors(None).unwrap().len(), 5);
        for bad in ["", "1m", "1M,", "5Y", "1M;3M"] {
            assert!(chosen_tenors(Some(bad)).is_err(), "{bad:?}");
        }
    }
}
