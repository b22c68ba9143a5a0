//! Query strings and path parameters: axum's query extraction unwrapped into the
//! service's error, so a malformed query is reported like every other bad parameter;
//! underlying names in paths checked like those in bodies.

use super::error::ApiError;
use axum::extract::rejection::QueryRejection;
use axum::extract::Query;

/// Unwraps query parameters, naming a malformed query as such.
///
/// # Errors
/// [`ApiError::Parameter`] naming `query` when the query string cannot be read.
pub fn query_params<T>(parsed: Result<Query<T>, QueryRejection>) -> Result<T, ApiError> {
    parsed.map(|Query(q)| q).map_err(|e| ApiError::Parameter { name: "query", message: e.body_text() })
}

/// Checks an underlying named in a path as a posted one is checked: a name no snapshot
/// can have (a control character, say) is a 422 naming the parameter, and never
/// reaches the store.
///
/// # Errors
/// [`ApiError::PathValue`] naming `underlying`.
pub fn checked_underlying(name: &str) -> Result<(), ApiError> {
    match crate::wire::input::underlying_problem(name) {
        Some(message) => Err(ApiError::PathValue { name: "underlying", message }),
        None => Ok(()),
    }
}

/// An optional RFC 3339 time in a query (`from`, `to`), read as every time a user sends
/// is ([`crate::wire::time::parse_utc`]: UTC, leap seconds refused).
///
/// # Errors
/// [`ApiError::Parameter`] naming it.
pub fn time_parameter(
    name: &'static str,
    text: Option<&str>,
) -> Result<Option<chrono::DateTime<chrono::Utc>>, ApiError> {
    text.map(|t| crate::wire::time::parse_utc(t).map_err(|message| ApiError::Parameter { name, message })).transpose()
}

/// Narrowest and widest chart a client can ask for, pixels.
pub const CHART_WIDTH_RANGE: (u32, u32) = (320, 2400);

/// The `width` of a chart in pixels, [`CHART_WIDTH_RANGE`], `default` when absent:
/// charts keep their text size, so a client asks for the width it shows them at.
///
/// # Errors
/// [`ApiError::Parameter`] naming `width`.
pub fn chart_width(text: Option<&str>, default: u32) -> Result<u32, ApiError> {
    let Some(text) = text else {
        return Ok(default);
    };
    let digits = !text.is_empty() && text.len() <= 5 && text.bytes().all(|b| b.is_ascii_digit());
    match text.parse::<u32>() {
        Ok(w) if digits && (CHART_WIDTH_RANGE.0..=CHART_WIDTH_RANGE.1).contains(&w) => Ok(w),
        _ => Err(ApiError::Parameter {
            name: "width",
            message: format!(
                "must be a whole number of pixels from {} to {}, got {text:?}",
                CHART_WIDTH_RANGE.0, CHART_WIDTH_RANGE.1
            ),
        }),
    }
}
