//! Bearer tokens: one for writes (every `POST`), an optional second one that allows
//! reads only. Tokens are compared as SHA-256 digests in constant time, so neither
//! their content nor their length leaks through timing.

use super::error::ApiError;
use axum::extract::{Request, State};
use axum::http::{header, Method};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use sha2::{Digest, Sha256};
use subtle::ConstantTimeEq;

/// A secret token; never printed.
#[derive(Clone)]
pub struct Token {
    digest: [u8; 32],
}

impl std::fmt::Debug for Token {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Token(***)")
    }
}

impl Token {
    /// A token from its text (surrounding whitespace removed).
    ///
    /// # Errors
    /// A message when the token is empty, or holds whitespace or a control character
    /// (a second line, say): no `Authorization` header could carry it, so it would
    /// never match.
    pub fn new(text: &str) -> Result<Self, String> {
        let text = text.trim();
        if text.is_empty() {
            return Err("the token is empty".into());
        }
        if text.chars().any(|c| c.is_whitespace() || c.is_control()) {
            return Err("the token must be one line without spaces or control characters".into());
        }
        Ok(Self { digest: Sha256::digest(text.as_bytes()).into() })
    }

    /// Whether `presented` is this token (constant time).
    pub fn matches(&self, presented: &str) -> bool {
        let digest: [u8; 32] = Sha256::digest(presented.as_bytes()).into();
        bool::from(self.digest.ct_eq(&digest))
    }
}

/// Who may do what.
#[derive(Debug, Clone, Default)]
pub struct Access {
    /// Required for every `POST` (and accepted for reads).
    pub write: Option<Token>,
    /// When set, reads need this token or the write token.
    pub read: Option<Token>,
}

/// Paths open to all: probes, the API description and the overview page (whose data
/// requests carry the token the reader enters).
fn is_public(path: &str) -> bool {
    matches!(path, "/" | "/healthz" | "/readyz" | "/openapi.json")
}

fn bearer(request: &Request) -> Option<&str> {
    let value = request.headers().get(header::AUTHORIZATION)?.to_str().ok()?;
    let (scheme, token) = value.split_once(' ')?;
    scheme.eq_ignore_ascii_case("bearer").then_some(token.trim())
}

/// Middleware: checks the bearer token against [`Access`].
pub async fn require_token(State(access): State<Access>, request: Request, next: Next) -> Response {
    let presented = bearer(&request);
    let is_write = request.method() == Method::POST;
    let granted = if is_public(request.uri().path()) {
        Ok(())
    } else if is_write {
        match (&access.write, presented) {
            (None, _) => Ok(()),
            (Some(w), Some(p)) if w.matches(p) => Ok(()),
            (Some(_), Some(p)) if access.read.as_ref().is_some_and(|r| r.matches(p)) => Err(ApiError::Forbidden),
            _ => Err(ApiError::Unauthorized),
        }
    } else {
        match (&access.read, presented) {
            (None, _) => Ok(()),
            (Some(r), Some(p)) if r.matches(p) || access.write.as_ref().is_some_and(|w| w.matches(p)) => Ok(()),
            _ => Err(ApiError::Unauthorized),
        }
    };
    match granted {
        Ok(()) => next.run(request).await,
        Err(e) => e.into_response(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tokens_match_only_themselves_and_never_print() {
        let t = Token::new(" s3cret\n").unwrap();
        assert!(t.matches("s3cret"));
        assert!(!t.matches("s3cre"));
        assert!(!t.matches("s3cret "));
        assert_eq!(format!("{t:?}"), "Token(***)");
        assert!(Token::new("  ").is_err());
        assert!(Token::new("first\nsecond\n").is_err(), "a two-line token could never match");
        assert!(Token::new("a b").is_err());
    }
}
