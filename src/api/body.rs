//! Request bodies: the media type is checked (415), the size limit applies (413), and
//! the text must be UTF-8 (400), before the wire layer parses it.

use super::error::ApiError;
use super::state::AppState;
use crate::wire::csv_input::CsvHeader;
use crate::wire::{FieldPath, InputErrors, SnapshotFormat};
use axum::body::Bytes;
use axum::extract::{FromRequest, Request, State};
use axum::http::{header, StatusCode};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

/// The body of a `POST` as JSON text, not yet parsed.
#[derive(Debug)]
pub struct JsonText(pub String);

/// A snapshot body: JSON, or CSV (`text/csv`) with `underlying` and `as_of` from the
/// query string when the table lacks those columns.
#[derive(Debug)]
pub struct SnapshotText {
    /// The body.
    pub text: String,
    /// How it is written.
    pub format: SnapshotFormat,
}

/// The essence of a `Content-Type` value (`application/json; charset=utf-8` gives
/// `application/json`), lower case.
fn essence(content_type: &str) -> String {
    content_type.split(';').next().unwrap_or("").trim().to_ascii_lowercase()
}

/// Whether a `Content-Type` value names JSON (`application/json`, parameters allowed).
fn is_json(content_type: &str) -> bool {
    essence(content_type) == "application/json"
}

fn content_type(request: &Request) -> String {
    request.headers().get(header::CONTENT_TYPE).and_then(|v| v.to_str().ok()).unwrap_or("").to_string()
}

#[derive(serde::Deserialize)]
struct CsvQuery {
    underlying: Option<String>,
    as_of: Option<String>,
}

impl FromRequest<AppState> for SnapshotText {
    type Rejection = ApiError;

    async fn from_request(request: Request, state: &AppState) -> Result<Self, ApiError> {
        let given = content_type(&request);
        let format = match essence(&given).as_str() {
            "application/json" => SnapshotFormat::Json,
            "text/csv" => {
                let query = request.uri().query().unwrap_or("");
                let q: CsvQuery = serde_urlencoded::from_str(query)
                    .map_err(|e| ApiError::Parameter { name: "query", message: e.to_string() })?;
                SnapshotFormat::Csv(CsvHeader { underlying: q.underlying, as_of: q.as_of })
            }
            _ => return Err(ApiError::UnsupportedMediaType { got: given, expected: "application/json or text/csv" }),
        };
        let text = read_text(request, state).await?;
        Ok(Self { text, format })
    }
}

/// Reads the body as UTF-8 text under the configured size limit.
async fn read_text(request: Request, state: &AppState) -> Result<String, ApiError> {
    let limit = state.settings().max_body;
    let bytes = Bytes::from_request(request, state).await.map_err(|rejection| {
        if rejection.status() == StatusCode::PAYLOAD_TOO_LARGE {
            ApiError::PayloadTooLarge { limit }
        } else {
            ApiError::Input(InputErrors::malformed(FieldPath::root(), rejection.body_text()))
        }
    })?;
    String::from_utf8(bytes.to_vec()).map_err(|e| {
        ApiError::Input(InputErrors::malformed(FieldPath::root(), format!("body must be UTF-8 text: {e}")))
    })
}

/// Middleware: a request whose `Content-Length` exceeds `limit` gets 413 at once,
/// before anything reads its body (so `Expect: 100-continue` gets no `100`).
pub async fn refuse_declared_oversize(State(limit): State<usize>, request: Request, next: Next) -> Response {
    let declared = request
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.trim().parse::<u64>().ok());
    match declared {
        Some(length) if length > u64::try_from(limit).unwrap_or(u64::MAX) => {
            ApiError::PayloadTooLarge { limit }.into_response()
        }
        _ => next.run(request).await,
    }
}

impl FromRequest<AppState> for JsonText {
    type Rejection = ApiError;

    async fn from_request(request: Request, state: &AppState) -> Result<Self, ApiError> {
        let content_type = content_type(&request);
        if !is_json(&content_type) {
            return Err(ApiError::UnsupportedMediaType { got: content_type, expected: "application/json" });
        }
        Ok(Self(read_text(request, state).await?))
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn json_media_types() {
        assert!(super::is_json("application/json"));
        assert!(super::is_json("Application/JSON; charset=utf-8"));
        assert!(!super::is_json("text/plain"));
        assert!(!super::is_json(""));
    }
}
