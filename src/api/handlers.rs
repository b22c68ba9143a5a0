//! Handlers of the snapshot, fit, underlying and operational endpoints (history is in
//! [`super::history`]).

use super::body::{JsonText, SnapshotText};
use super::error::{ApiError, ProblemDetails};
use super::examples;
use super::query::query_params;
use super::responses::{StatusDoc, StoredAnalysisDoc, UnderlyingsDoc};
use super::state::AppState;
use super::timestamps::rfc3339;
use crate::ingest::{self, Digest, IngestError, Prepared};
use crate::store::{self, Store, StoredSnapshot, JSON_MEDIA_TYPE};
use crate::wire;
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, Request, State};
use axum::http::{header, HeaderMap, HeaderValue, StatusCode};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use axum::Json;
use chrono::{DateTime, Utc};
use serde::Deserialize;
use serde_json::Value;
use std::time::{Duration, Instant};
use utoipa::IntoParams;

/// Longest `?wait` a reader may ask for on `latest`, seconds.
pub const MAX_WAIT_SECONDS: u64 = 60;
/// Long-polling readers re-check the store at least this often, in case a
/// notification from another replica was lost.
pub const WAIT_RECHECK: Duration = Duration::from_secs(5);
/// How long `/readyz` waits for the store.
const READY_TIMEOUT: Duration = Duration::from_secs(2);

/// Parses, validates and analyses a snapshot on the blocking pool, counting the
/// outcome.
async fn analyse(state: &AppState, body: SnapshotText, digest: Digest) -> Result<Prepared, ApiError> {
    let outcome = tokio::task::spawn_blocking(move || ingest::prepare(body.text, &body.format, digest))
        .await
        .map_err(|e| ApiError::Internal(format!("analysis task failed: {e}")))?;
    let metrics = state.metrics();
    match outcome {
        Ok(prepared) => {
            metrics.analysis("ok");
            if let Some(us) = prepared.fit_elapsed_us {
                metrics.fit_duration_us(us);
            }
            Ok(prepared)
        }
        Err(IngestError::Input(e)) => {
            metrics.analysis("invalid_input");
            Err(ApiError::Input(e))
        }
        Err(IngestError::Internal(m)) => Err(ApiError::Internal(m)),
    }
}

/// A response with a JSON text body.
fn json_text(status: StatusCode, headers: &[(header::HeaderName, HeaderValue)], body: String) -> Response {
    let mut response = (status, body).into_response();
    let map = response.headers_mut();
    map.insert(header::CONTENT_TYPE, HeaderValue::from_static("application/json"));
    for (name, value) in headers {
        map.insert(name.clone(), value.clone());
    }
    response
}

/// Where a stored snapshot stands among the revisions of its underlying and `as_of`.
#[derive(Debug, Clone, Copy)]
struct Standing {
    revision: i64,
    supersedes: Option<i64>,
    superseded_by: Option<i64>,
}

/// The response body of a stored analysis: `id`, `stored_at`, `revision` (with
/// `supersedes` and `superseded_by` when there are such revisions), then the analysis
/// fields (`underlying`, `as_of`, ...), then the original `input` when asked for.
/// Spliced as text: the stored analysis is JSON this service wrote, so it need not be
/// parsed again for every read.
fn stored_body(
    id: i64,
    stored_at: DateTime<Utc>,
    standing: Standing,
    analysis_json: &str,
    input: Option<&(String, String)>,
) -> Result<String, ApiError> {
    let fields = analysis_json
        .trim()
        .strip_prefix('{')
        .and_then(|rest| rest.strip_suffix('}'))
        .ok_or_else(|| ApiError::Internal(format!("stored analysis {id} is not a JSON object")))?;
    let mut body = String::with_capacity(analysis_json.len() + 128);
    body.push_str(&format!(
        "{{\"id\":{id},\"stored_at\":\"{}\",\"revision\":{}",
        rfc3339(stored_at),
        standing.revision
    ));
    if let Some(earlier) = standing.supersedes {
        body.push_str(&format!(",\"supersedes\":{earlier}"));
    }
    if let Some(later) = standing.superseded_by {
        body.push_str(&format!(",\"superseded_by\":{later}"));
    }
    if !fields.trim().is_empty() {
        body.push(',');
        body.push_str(fields);
    }
    if let Some((media_type, text)) = input {
        body.push_str(",\"input\":");
        let is_json = media_type == JSON_MEDIA_TYPE && serde_json::from_str::<serde::de::IgnoredAny>(text).is_ok();
        if is_json {
            body.push_str(text.trim());
        } else {
            body.push_str(&Value::String(text.clone()).to_string());
        }
    }
    body.push('}');
    Ok(body)
}

fn stored_record_body(record: &StoredSnapshot) -> Result<String, ApiError> {
    let standing =
        Standing { revision: record.revision, supersedes: record.supersedes, superseded_by: record.superseded_by };
    stored_body(record.id, record.stored_at, standing, &record.analysis, record.input.as_ref())
}

/// Strong entity tag of a stored snapshot.
fn etag(id: i64) -> String {
    format!("\"{id}\"")
}

fn etag_header(id: i64) -> HeaderValue {
    HeaderValue::from_str(&etag(id)).unwrap_or_else(|_| HeaderValue::from_static("\"0\""))
}

/// Whether an `If-None-Match` value matches `tag` (weak comparison, RFC 9110 13.1.2).
fn if_none_match(header_value: &str, tag: &str) -> bool {
    header_value
        .split(',')
        .map(str::trim)
        .any(|candidate| candidate == "*" || candidate.trim_start_matches("W/") == tag)
}

/// Analyse a snapshot and store it.
#[utoipa::path(
    post, path = "/v1/snapshots", tag = "snapshots",
    request_body(description = "A snapshot as JSON, or as CSV (one row per quote)",
                 content((crate::wire::input::SnapshotDoc = "application/json", example = json!(examples::snapshot_example())),
                         (String = "text/csv", example = json!(examples::CSV_SNAPSHOT_EXAMPLE)))),
    params(CsvParams),
    responses(
        (status = 201, description = "Stored; `Location` names the new resource. Other content for a stored \
underlying and `as_of` is a correction: its next `revision`, which `supersedes` the previous one",
         body = StoredAnalysisDoc, headers(("Location" = String, description = "Path of the stored snapshot"))),
        (status = 200, description = "The same content was stored before for this underlying and `as_of`: that \
revision, with its id (`superseded_by` when a later correction replaced it); nothing is added",
         body = StoredAnalysisDoc, headers(("Location" = String, description = "Path of the stored snapshot"))),
        (status = 400, description = "Malformed JSON", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 403, description = "Read-only token", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 413, description = "Body over the limit", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 415, description = "Not `application/json` or `text/csv`", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "Invalid values, each with its JSON pointer (CSV: line and column)", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn post_snapshot(State(state): State<AppState>, body: SnapshotText) -> Result<Response, ApiError> {
    let analysed = analyse(&state, body, Digest::ForStorage).await?;
    let analysis_json = analysed.record.analysis.clone();
    let inserted = state.store().insert(analysed.record).await.map_err(|e| state.store_failed("insert", e))?;
    let location = HeaderValue::from_str(&format!("/v1/snapshots/{}", inserted.id))
        .map_err(|e| ApiError::Internal(e.to_string()))?;
    if inserted.created {
        state.announce_change();
        let standing = Standing { revision: inserted.revision, supersedes: inserted.supersedes, superseded_by: None };
        let body = stored_body(inserted.id, inserted.stored_at, standing, &analysis_json, None)?;
        Ok(json_text(StatusCode::CREATED, &[(header::LOCATION, location)], body))
    } else {
        let record = state
            .store()
            .get(inserted.id, false)
            .await
            .map_err(|e| state.store_failed("get", e))?
            .ok_or_else(|| ApiError::Internal(format!("snapshot {} vanished", inserted.id)))?;
        Ok(json_text(StatusCode::OK, &[(header::LOCATION, location)], stored_record_body(&record)?))
    }
}

/// Query of the snapshot endpoints, for CSV bodies.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct CsvParams {
    /// Underlying of a CSV body without an `underlying` column.
    #[param(example = "KESTREL50")]
    pub underlying: Option<String>,
    /// Valuation time (RFC 3339) of a CSV body without an `as_of` column.
    #[param(example = "2026-11-30T15:30:00Z")]
    pub as_of: Option<String>,
}

/// Analyse a snapshot without storing it.
#[utoipa::path(
    post, path = "/v1/analyze", tag = "snapshots",
    request_body(description = "A snapshot as JSON, or as CSV (one row per quote)",
                 content((crate::wire::input::SnapshotDoc = "application/json", example = json!(examples::snapshot_example())),
                         (String = "text/csv", example = json!(examples::CSV_SNAPSHOT_EXAMPLE)))),
    params(CsvParams),
    responses(
        (status = 200, description = "The analysis", body = crate::wire::output::AnalysisDoc),
        (status = 400, description = "Malformed JSON", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 403, description = "Read-only token", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 413, description = "Body over the limit", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 415, description = "Not `application/json` or `text/csv`", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "Invalid values, each with its JSON pointer", body = ProblemDetails, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub async fn post_analyze(State(state): State<AppState>, body: SnapshotText) -> Result<Response, ApiError> {
    let analysed = analyse(&state, body, Digest::Skip).await?;
    Ok(json_text(StatusCode::OK, &[], analysed.record.analysis))
}

/// Fit the model to swap levels.
#[utoipa::path(
    post, path = "/v1/fits", tag = "fits",
    request_body(content = crate::wire::input::SwapsDoc, content_type = "application/json",
                 example = json!(examples::swaps_example())),
    responses(
        (status = 200, description = "The swaps as given, with forward variance, and the fit", body = crate::wire::output::AnalysisDoc),
        (status = 400, description = "Malformed JSON", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 403, description = "Read-only token", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 413, description = "Body over the limit", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 415, description = "Not `application/json`", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "Invalid values, each with its JSON pointer", body = ProblemDetails, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub async fn post_fit(State(state): State<AppState>, JsonText(text): JsonText) -> Result<Response, ApiError> {
    let doc = tokio::task::spawn_blocking(move || wire::fit_swap_levels(&text))
        .await
        .map_err(|e| ApiError::Internal(format!("fit task failed: {e}")))??;
    if let Some(fit) = &doc.fit {
        state.metrics().fit_duration_us(fit.elapsed_us);
    }
    Ok(Json(doc).into_response())
}

/// Query of `GET /v1/snapshots/{id}`.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct SnapshotQuery {
    /// `input` adds the original snapshot to the response; any other value is a 400.
    #[param(value_type = Option<IncludeDoc>, inline, example = "input")]
    pub include: Option<String>,
}

/// What `include` may add to a stored analysis (the only value the service takes).
#[derive(Debug, Clone, Copy, Deserialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum IncludeDoc {
    /// The snapshot as it was posted.
    Input,
}

/// Whether `include` asks for the original input.
fn includes_input(include: Option<&str>) -> Result<bool, ApiError> {
    match include {
        None => Ok(false),
        Some("input") => Ok(true),
        Some(other) => Err(ApiError::Parameter { name: "include", message: format!("must be `input`, got {other:?}") }),
    }
}

/// A stored analysis.
#[utoipa::path(
    get, path = "/v1/snapshots/{id}", tag = "snapshots",
    params(("id" = i64, Path, description = "Snapshot id", example = 1), SnapshotQuery),
    responses(
        (status = 200, description = "The stored analysis", body = StoredAnalysisDoc,
         headers(("ETag" = String, description = "Entity tag of the snapshot"))),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No such snapshot", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_snapshot(
    State(state): State<AppState>,
    Path(id): Path<String>,
    query: Result<Query<SnapshotQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    let with_input = includes_input(query_params(query)?.include.as_deref())?;
    let not_found = || ApiError::NotFound(format!("no snapshot with id {id:?}"));
    let numeric: i64 = id.parse().map_err(|_| not_found())?;
    let record = state
        .store()
        .get(numeric, with_input)
        .await
        .map_err(|e| state.store_failed("get", e))?
        .ok_or_else(not_found)?;
    Ok(json_text(StatusCode::OK, &[(header::ETAG, etag_header(record.id))], stored_record_body(&record)?))
}

/// Every underlying with its latest `as_of`, snapshot count and superseded revisions.
#[utoipa::path(
    get, path = "/v1/underlyings", tag = "underlyings",
    responses(
        (status = 200, description = "Underlyings by name", body = UnderlyingsDoc),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_underlyings(State(state): State<AppState>) -> Result<Response, ApiError> {
    let list = state.store().underlyings().await.map_err(|e| state.store_failed("underlyings", e))?;
    Ok(Json(UnderlyingsDoc::from(list)).into_response())
}

/// Query of `GET /v1/underlyings/{underlying}/latest`.
#[derive(Debug, Deserialize, IntoParams)]
#[into_params(parameter_in = Query)]
pub struct LatestQuery {
    /// With `If-None-Match` naming the current latest: hold the request up to this many
    /// seconds (a whole number from 0 to 60) until a newer snapshot is stored.
    #[param(value_type = Option<u8>, minimum = 0, maximum = 60, example = 1)]
    pub wait: Option<String>,
}

fn parse_wait(wait: Option<&str>) -> Result<Duration, ApiError> {
    let Some(text) = wait else {
        return Ok(Duration::ZERO);
    };
    let invalid = || ApiError::Parameter {
        name: "wait",
        message: format!("must be a whole number of seconds from 0 to {MAX_WAIT_SECONDS}, got {text:?}"),
    };
    if text.is_empty() || !text.bytes().all(|b| b.is_ascii_digit()) {
        return Err(invalid());
    }
    let seconds: u64 = text.parse().map_err(|_| invalid())?;
    if seconds > MAX_WAIT_SECONDS {
        return Err(invalid());
    }
    Ok(Duration::from_secs(seconds))
}

/// The latest analysis of an underlying, with long polling.
#[utoipa::path(
    get, path = "/v1/underlyings/{underlying}/latest", tag = "underlyings",
    params(
        ("underlying" = String, Path, description = "Underlying name", example = "KESTREL50"),
        ("If-None-Match" = Option<String>, Header, description = "ETag of the analysis the client has"),
        LatestQuery
    ),
    responses(
        (status = 200, description = "The latest stored analysis", body = StoredAnalysisDoc,
         headers(("ETag" = String, description = "Entity tag of the latest snapshot"))),
        (status = 304, description = "Nothing newer than `If-None-Match` (after waiting up to `wait` seconds)",
         headers(("ETag" = String, description = "Entity tag of the latest snapshot"))),
        (status = 400, description = "Invalid query parameter", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "No snapshot of this underlying", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "An underlying no snapshot can have (a control character, over 200 characters)", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn get_latest(
    State(state): State<AppState>,
    Path(underlying): Path<String>,
    headers: HeaderMap,
    query: Result<Query<LatestQuery>, QueryRejection>,
) -> Result<Response, ApiError> {
    super::query::checked_underlying(&underlying)?;
    let wait = parse_wait(query_params(query)?.wait.as_deref())?;
    let client_tag = headers.get(header::IF_NONE_MATCH).and_then(|v| v.to_str().ok()).map(str::to_string);
    let deadline = Instant::now() + wait;
    let mut changes = state.subscribe_changes();
    let mut shutting_down = state.shutting_down();
    let not_found = || ApiError::NotFound(format!("no snapshot of underlying {underlying:?}"));
    loop {
        changes.borrow_and_update();
        let id = state
            .store()
            .latest_id(&underlying)
            .await
            .map_err(|e| state.store_failed("latest", e))?
            .ok_or_else(not_found)?;
        if !client_tag.as_deref().is_some_and(|t| if_none_match(t, &etag(id))) {
            let record = state
                .store()
                .latest(&underlying)
                .await
                .map_err(|e| state.store_failed("latest", e))?
                .ok_or_else(not_found)?;
            return Ok(json_text(
                StatusCode::OK,
                &[
                    (header::ETAG, etag_header(record.id)),
                    (header::CACHE_CONTROL, HeaderValue::from_static("no-cache")),
                ],
                stored_record_body(&record)?,
            ));
        }
        let now = Instant::now();
        if now >= deadline || *shutting_down.borrow() {
            return Ok((StatusCode::NOT_MODIFIED, [(header::ETAG, etag_header(id))]).into_response());
        }
        tokio::select! {
            _ = changes.changed() => {}
            _ = tokio::time::sleep((deadline - now).min(WAIT_RECHECK)) => {}
            _ = shutting_down.wait_for(|down| *down) => {}
        }
    }
}

/// Liveness: the process answers.
#[utoipa::path(get, path = "/healthz", tag = "operations",
    responses((status = 200, description = "Alive", body = StatusDoc)))]
pub async fn healthz() -> Json<StatusDoc> {
    Json(StatusDoc { status: "ok".into() })
}

/// Readiness: the store could take a write now (it answers, is writable, and no lock
/// would hold an insert up), checked within 2 s.
#[utoipa::path(get, path = "/readyz", tag = "operations",
    responses(
        (status = 200, description = "Ready", body = StatusDoc),
        (status = 503, description = "Store unavailable", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ))]
pub async fn readyz(State(state): State<AppState>) -> Result<Json<StatusDoc>, ApiError> {
    match tokio::time::timeout(READY_TIMEOUT, state.store().ping()).await {
        Ok(Ok(())) => Ok(Json(StatusDoc { status: "ready".into() })),
        Ok(Err(e)) => Err(ApiError::StoreUnavailable(state.store_failed("ping", e).to_string())),
        Err(_) => {
            state.metrics().store_error("ping");
            Err(ApiError::StoreUnavailable(format!("no answer within {} s", READY_TIMEOUT.as_secs())))
        }
    }
}

/// Prometheus metrics.
#[utoipa::path(get, path = "/metrics", tag = "operations",
    responses(
        (status = 200, description = "Prometheus text exposition format", body = String, content_type = "text/plain"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = [])))]
pub async fn get_metrics(State(state): State<AppState>) -> Response {
    (
        [(header::CONTENT_TYPE, HeaderValue::from_static("text/plain; version=0.0.4; charset=utf-8"))],
        state.metrics().render(),
    )
        .into_response()
}

/// Unknown paths.
pub async fn not_found(request: Request) -> ApiError {
    ApiError::NotFound(format!("no route for {}", request.uri().path()))
}

/// Known paths, wrong method. A made-up method is not repeated back.
pub async fn method_not_allowed(request: Request) -> ApiError {
    let method = super::metrics::method_label(request.method());
    let method = if method == "other" { "this method" } else { method };
    ApiError::MethodNotAllowed(format!("{method} is not allowed on {}", request.uri().path()))
}

/// Middleware: ends a request that takes longer than the configured limit.
pub async fn limit_time(State(state): State<AppState>, request: Request, next: Next) -> Response {
    let limit = state.settings().request_timeout;
    match tokio::time::timeout(limit, next.run(request)).await {
        Ok(response) => response,
        Err(_) => ApiError::Timeout { seconds: limit.as_secs() }.into_response(),
    }
}

/// Wakes long-polling readers whenever another replica stores a snapshot.
pub async fn forward_store_notifications(url: String, state: AppState, stop: tokio::sync::watch::Receiver<bool>) {
    store::postgres::forward_notifications(&url, || state.announce_change(), stop).await;
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn entity_tags_compare_weakly_and_accept_lists() {
        assert!(if_none_match("\"7\"", "\"7\""));
        assert!(if_none_match("W/\"7\"", "\"7\""));
        assert!(if_none_match("\"3\", \"7\"", "\"7\""));
        assert!(if_none_match("*", "\"7\""));
        assert!(!if_none_match("\"8\"", "\"7\""));
    }

    #[test]
    fn wait_is_bounded() {
        assert_eq!(parse_wait(None).unwrap(), Duration::ZERO);
        assert_eq!(parse_wait(Some("60")).unwrap(), Duration::from_secs(60));
        assert!(parse_wait(Some("61")).is_err());
        assert!(parse_wait(Some("-1")).is_err());
        assert!(parse_wait(Some("x")).is_err());
        assert!(parse_wait(Some("")).is_err());
        assert!(parse_wait(Some(" 5")).is_err());
        assert!(parse_wait(Some("+5")).is_err());
    }

    #[test]
    fn include_takes_input_only() {
        assert!(!includes_input(None).unwrap());
        assert!(includes_input(Some("input")).unwrap());
        assert!(includes_input(Some("")).is_err());
        assert!(includes_input(Some("inputs")).is_err());
    }
}
