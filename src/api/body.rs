//! Request bodies: the media type is checked (415), the size limit applies (413), and
//! the text must be UTF-8 (400), before the wire layer parses it.

use super::error::ApiError;
use super::AppState;
use crate::wire::{FieldPath, InputErrors};
use axum::body::Bytes;
use axum::extract::{FromRequest, Request};
use axum::http::{header, StatusCode};

/// The body of a `POST` as JSON text, not yet parsed.
#[derive(Debug)]
pub struct JsonText(pub String);

/// Whether a `Content-Type` value names JSON (`application/json`, parameters allowed).
fn is_json(content_type: &str) -> bool {
    let essence = content_type.split(';').next().unwrap_or("").trim();
    essence.eq_ignore_ascii_case("application/json")
}

impl FromRequest<AppState> for JsonText {
    type Rejection = ApiError;

    async fn from_request(request: Request, state: &AppState) -> Result<Self, ApiError> {
        let content_type =
            request.headers().get(header::CONTENT_TYPE).and_then(|v| v.to_str().ok()).unwrap_or("").to_string();
        if !is_json(&content_type) {
            return Err(ApiError::UnsupportedMediaType { got: content_type, expected: "application/json" });
        }
        let limit = state.settings().max_body;
        let bytes = Bytes::from_request(request, state).await.map_err(|rejection| {
            if rejection.status() == StatusCode::PAYLOAD_TOO_LARGE {
                ApiError::PayloadTooLarge { limit }
            } else {
                ApiError::Input(InputErrors::malformed(FieldPath::root(), rejection.body_text()))
            }
        })?;
        let text = String::from_utf8(bytes.to_vec()).map_err(|e| {
            ApiError::Input(InputErrors::malformed(FieldPath::root(), format!("body must be UTF-8 text: {e}")))
        })?;
        Ok(Self(text))
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
