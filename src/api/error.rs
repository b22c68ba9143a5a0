//! The one place where errors become HTTP responses: RFC 9457 problem details
//! (`application/problem+json`) with, for input errors, the JSON pointer of every bad
//! field. Details of server-side failures are logged, never returned.

use crate::store::StoreError;
use crate::wire::path::InputErrorKind;
use crate::wire::{FieldPath, InputErrors};
use axum::http::{header, HeaderValue, StatusCode};
use axum::response::{IntoResponse, Response};
use serde::Serialize;
use utoipa::ToSchema;

/// Seconds a client should wait before retrying when the store is unavailable.
pub const RETRY_AFTER_SECONDS: u32 = 5;

/// Media type of problem details (RFC 9457).
pub const PROBLEM_JSON: &str = "application/problem+json";

/// Errors of the API layer.
#[derive(Debug, thiserror::Error)]
pub enum ApiError {
    /// The body or a query parameter could not be read or holds invalid values.
    #[error("{0}")]
    Input(InputErrors),
    /// A query parameter is invalid.
    #[error("query parameter {name}: {message}")]
    Parameter {
        /// Parameter name.
        name: &'static str,
        /// What is wrong.
        message: String,
    },
    /// A path parameter holds a value no resource can have (an underlying with a
    /// control character, say).
    #[error("path parameter {name}: {message}")]
    PathValue {
        /// Parameter name.
        name: &'static str,
        /// What is wrong.
        message: String,
    },
    /// The body's media type is not accepted here.
    #[error("unsupported media type {got:?}; send {expected}")]
    UnsupportedMediaType {
        /// What the client sent.
        got: String,
        /// What is accepted.
        expected: &'static str,
    },
    /// The body is larger than the configured limit.
    #[error("request body larger than {limit} bytes")]
    PayloadTooLarge {
        /// The limit, bytes.
        limit: usize,
    },
    /// No such resource.
    #[error("{0}")]
    NotFound(String),
    /// No such route or method.
    #[error("{0}")]
    MethodNotAllowed(String),
    /// A bearer token is required and was missing or wrong.
    #[error("a valid bearer token is required")]
    Unauthorized,
    /// The token is valid but only for reading.
    #[error("the token presented allows reading only")]
    Forbidden,
    /// The request took longer than the configured limit.
    #[error("the request did not complete within {seconds} s")]
    Timeout {
        /// The limit, seconds.
        seconds: u64,
    },
    /// The store cannot be reached.
    #[error("{0}")]
    StoreUnavailable(String),
    /// Anything else; logged, not shown.
    #[error("{0}")]
    Internal(String),
}

impl From<InputErrors> for ApiError {
    fn from(e: InputErrors) -> Self {
        Self::Input(e)
    }
}

impl From<StoreError> for ApiError {
    fn from(e: StoreError) -> Self {
        match e {
            StoreError::Unavailable(m) => Self::StoreUnavailable(m),
            StoreError::Refused(m) => Self::Input(InputErrors::one(
                FieldPath::root(),
                format!("the history store cannot keep this value: {m}"),
            )),
            other => Self::Internal(other.to_string()),
        }
    }
}

/// One bad field of a request (RFC 9457 section 3 `errors` extension, as in its
/// examples): where (`pointer` into the body, or the query `parameter`) and what.
#[derive(Debug, Clone, Serialize, ToSchema)]
pub struct FieldProblem {
    /// JSON pointer (RFC 6901) to the field in the request body.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schema(example = "/slices/3/points/7/vol")]
    pub pointer: Option<String>,
    /// Name of the query or path parameter.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub parameter: Option<String>,
    /// Line of a CSV body (the header is line 1).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub line: Option<usize>,
    /// Column of a CSV body.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    /// What is wrong with it.
    #[schema(example = "must be positive, got -0.2")]
    pub detail: String,
}

/// An RFC 9457 problem details document.
#[derive(Debug, Clone, Serialize, ToSchema)]
#[schema(example = json!({
    "type": "urn:logstrip:problem:invalid-values",
    "title": "Invalid values",
    "status": 422,
    "detail": "1 problem in the request body",
    "errors": [{"pointer": "/slices/3/points/7/vol", "detail": "must be positive, got -0.2"}]
}))]
pub struct ProblemDetails {
    /// Problem type URI (`about:blank` when the status says it all).
    #[serde(rename = "type")]
    pub problem_type: String,
    /// Short summary of the problem type.
    pub title: String,
    /// HTTP status code.
    pub status: u16,
    /// What happened in this occurrence.
    pub detail: String,
    /// The bad fields, for input errors.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub errors: Vec<FieldProblem>,
}

impl ApiError {
    /// HTTP status of this error.
    pub fn status(&self) -> StatusCode {
        match self {
            Self::Input(e) if e.kind == InputErrorKind::Malformed => StatusCode::BAD_REQUEST,
            Self::Input(_) => StatusCode::UNPROCESSABLE_ENTITY,
            Self::Parameter { .. } => StatusCode::BAD_REQUEST,
            Self::PathValue { .. } => StatusCode::UNPROCESSABLE_ENTITY,
            Self::UnsupportedMediaType { .. } => StatusCode::UNSUPPORTED_MEDIA_TYPE,
            Self::PayloadTooLarge { .. } => StatusCode::PAYLOAD_TOO_LARGE,
            Self::NotFound(_) => StatusCode::NOT_FOUND,
            Self::MethodNotAllowed(_) => StatusCode::METHOD_NOT_ALLOWED,
            Self::Unauthorized => StatusCode::UNAUTHORIZED,
            Self::Forbidden => StatusCode::FORBIDDEN,
            Self::Timeout { .. } => StatusCode::REQUEST_TIMEOUT,
            Self::StoreUnavailable(_) => StatusCode::SERVICE_UNAVAILABLE,
            Self::Internal(_) => StatusCode::INTERNAL_SERVER_ERROR,
        }
    }

    /// The problem document for this error.
    pub fn problem(&self) -> ProblemDetails {
        let status = self.status();
        let (problem_type, title) = match self {
            Self::Input(e) if e.kind == InputErrorKind::Malformed => {
                ("urn:logstrip:problem:malformed-body", "Malformed request body")
            }
            Self::Input(_) | Self::PathValue { .. } => ("urn:logstrip:problem:invalid-values", "Invalid values"),
            Self::Parameter { .. } => ("urn:logstrip:problem:invalid-parameter", "Invalid query parameter"),
            Self::StoreUnavailable(_) => ("urn:logstrip:problem:store-unavailable", "Store unavailable"),
            _ => ("about:blank", status.canonical_reason().unwrap_or("Error")),
        };
        let (detail, errors) = match self {
            Self::Input(e) => (
                format!(
                    "{} problem{} in the request body",
                    e.problems.len(),
                    if e.problems.len() == 1 { "" } else { "s" }
                ),
                e.problems
                    .iter()
                    .map(|p| {
                        let csv = p.path.csv_location();
                        FieldProblem {
                            pointer: csv.is_none().then(|| p.path.json_pointer()),
                            parameter: None,
                            line: csv.as_ref().map(|c| c.0),
                            column: csv.and_then(|c| c.1),
                            detail: format!("{}: {}", p.path, p.message),
                        }
                    })
                    .collect(),
            ),
            Self::Parameter { name, message } | Self::PathValue { name, message } => (
                self.to_string(),
                vec![FieldProblem {
                    pointer: None,
                    parameter: Some(name.to_string()),
                    line: None,
                    column: None,
                    detail: message.clone(),
                }],
            ),
            Self::StoreUnavailable(_) => {
                (format!("the history store is unavailable; retry in {RETRY_AFTER_SECONDS} s"), Vec::new())
            }
            Self::Internal(_) => ("an internal error occurred; it has been logged".to_string(), Vec::new()),
            other => (other.to_string(), Vec::new()),
        };
        ProblemDetails {
            problem_type: problem_type.to_string(),
            title: title.to_string(),
            status: status.as_u16(),
            detail,
            errors,
        }
    }
}

impl IntoResponse for ApiError {
    fn into_response(self) -> Response {
        match &self {
            Self::Internal(m) => tracing::error!(error = %m, "internal error"),
            Self::StoreUnavailable(m) => tracing::warn!(error = %m, "store unavailable"),
            _ => {}
        }
        let status = self.status();
        let body = serde_json::to_vec(&self.problem()).unwrap_or_default();
        let mut response = (status, body).into_response();
        let headers = response.headers_mut();
        headers.insert(header::CONTENT_TYPE, HeaderValue::from_static(PROBLEM_JSON));
        match self {
            Self::StoreUnavailable(_) => {
                headers.insert(header::RETRY_AFTER, HeaderValue::from(RETRY_AFTER_SECONDS));
            }
            Self::Unauthorized => {
                headers.insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer realm=\"logstrip\""));
            }
            _ => {}
        }
        response
    }
}
