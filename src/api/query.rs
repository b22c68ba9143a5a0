//! Query strings: axum's query extraction unwrapped into the service's error, so a
//! malformed query is reported like every other bad parameter.

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
