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
