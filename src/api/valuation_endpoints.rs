//! Serves swap valuation: `POST /v1/valuations` (a swap book against a snapshot,
//! inline or stored) and `POST /v1/realized` (realized variance from closes).

use super::body::JsonText;
use super::error::{ApiError, ProblemDetails};
use super::state::AppState;
use crate::store::Store;
use crate::wire::input::parse_json;
use crate::wire::valuation::{self, BookDoc, ClosesDoc, PositionDoc, RealizedOutDoc, ValuationDoc};
use crate::wire::{self, FieldPath, InputErrors, SnapshotFormat};
use axum::extract::State;
use axum::Json;
use serde::Deserialize;
use utoipa::ToSchema;

/// A valuation request: the snapshot (inline, or the id of a stored one) and the
/// positions.
#[derive(Debug, Deserialize, ToSchema)]
#[serde(deny_unknown_fields)]
pub struct ValuationRequest {
    /// The snapshot to value against (or give `snapshot_id`).
    #[serde(default)]
    #[schema(value_type = Option<crate::wire::input::SnapshotDoc>)]
    pub snapshot: Option<serde_json::Value>,
    /// Id of a stored snapshot (or give `snapshot`).
    #[serde(default, deserialize_with = "crate::wire::strict::optional_whole_number")]
    pub snapshot_id: Option<i64>,
    /// An earlier snapshot (or give `since_snapshot_id`): the response then explains each
    /// position's change of value since it (`explain`).
    #[serde(default)]
    #[schema(value_type = Option<crate::wire::input::SnapshotDoc>)]
    pub since_snapshot: Option<serde_json::Value>,
    /// Id of a stored earlier snapshot (or give `since_snapshot`).
    #[serde(default, deserialize_with = "crate::wire::strict::optional_whole_number")]
    pub since_snapshot_id: Option<i64>,
    /// Dates (`YYYY-MM-DD`) without an observation besides weekends.
    #[serde(default)]
    pub holidays: Option<Vec<String>>,
    /// The positions.
    #[serde(deserialize_with = "crate::wire::strict::objects")]
    pub positions: Vec<PositionDoc>,
}

/// A snapshot to value against: given inline (still a JSON value; written out as text
/// on the blocking pool), or the text of a stored one.
enum GivenSnapshot {
    Inline(serde_json::Value),
    Stored(String, SnapshotFormat),
}

impl GivenSnapshot {
    fn into_text(self) -> (String, SnapshotFormat) {
        match self {
            Self::Inline(doc) => (doc.to_string(), SnapshotFormat::Json),
            Self::Stored(text, format) => (text, format),
        }
    }
}

/// The snapshot given inline (`inline`) or by the id of a stored one, with its field
/// path; `None` when neither is given and `required` is false.
async fn valuation_snapshot(
    state: &AppState,
    inline: Option<serde_json::Value>,
    id: Option<i64>,
    (field, id_field): (&str, &str),
    required: bool,
) -> Result<Option<(GivenSnapshot, FieldPath)>, ApiError> {
    let root = FieldPath::root();
    match (inline, id) {
        (Some(_), Some(_)) => {
            Err(InputErrors::one(root.field(id_field), format!("give {field} or {id_field}, not both")).into())
        }
        (None, None) if required => {
            Err(InputErrors::one(root.field(field), format!("give {field} or {id_field}")).into())
        }
        (None, None) => Ok(None),
        (Some(doc), None) => Ok(Some((GivenSnapshot::Inline(doc), root.field(field)))),
        (None, Some(id)) => {
            let stored = state.store().get(id, true).await.map_err(|e| state.store_failed("get", e))?;
            let Some((media_type, text)) = stored.and_then(|s| s.input) else {
                return Err(ApiError::NotFound(format!("{id_field}: no stored snapshot with id {id}")));
            };
            let format = SnapshotFormat::from_media_type(&media_type)
                .ok_or_else(|| ApiError::Internal(format!("stored snapshot {id} has media type {media_type:?}")))?;
            Ok(Some((GivenSnapshot::Stored(text, format), root.field(field))))
        }
    }
}

/// Runs `work` on the blocking pool: parsing a body of megabytes on the async threads
/// would hold up every other request (probes included) meanwhile.
async fn off_runtime<T: Send + 'static>(
    what: &str,
    work: impl FnOnce() -> Result<T, ApiError> + Send + 'static,
) -> Result<T, ApiError> {
    tokio::task::spawn_blocking(work).await.map_err(|e| ApiError::Internal(format!("{what} task failed: {e}")))?
}

/// Value a book of variance, gamma and leverage swaps.
#[utoipa::path(
    post, path = "/v1/valuations", tag = "risk",
    request_body(content = ValuationRequest, content_type = "application/json", example = json!(super::examples::valuation_example())),
    responses(
        (status = 200, description = "Values, legs, implied levels, vega by expiry and totals", body = ValuationDoc),
        (status = 400, description = "Malformed JSON", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 403, description = "Read-only token", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 413, description = "Body over the limit", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 415, description = "Not `application/json`", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 404, description = "`snapshot_id` or `since_snapshot_id` names no stored snapshot", body = ProblemDetails,
         content_type = "application/problem+json"),
        (status = 422, description = "Invalid values (a maturity beyond the last expiry included), each with its JSON pointer",
         body = ProblemDetails, content_type = "application/problem+json"),
        (status = 503, description = "Store unavailable (with `snapshot_id`)", body = ProblemDetails, content_type = "application/problem+json",
         headers(("Retry-After" = u32, description = "Seconds to wait before retrying"))),
    ),
    security((), ("bearer" = []))
)]
pub async fn post_valuation(
    State(state): State<AppState>,
    JsonText(text): JsonText,
) -> Result<Json<ValuationDoc>, ApiError> {
    let request: ValuationRequest = off_runtime("parse", move || Ok(parse_json(&text)?)).await?;
    let names = ("snapshot", "snapshot_id");
    let current = valuation_snapshot(&state, request.snapshot, request.snapshot_id, names, true).await?;
    let since_names = ("since_snapshot", "since_snapshot_id");
    let since =
        valuation_snapshot(&state, request.since_snapshot, request.since_snapshot_id, since_names, false).await?;
    let book = BookDoc { holidays: request.holidays, positions: request.positions };
    let doc = off_runtime("valuation", move || -> Result<ValuationDoc, ApiError> {
        let analyse = |(given, prefix): (GivenSnapshot, FieldPath)| {
            let (text, format) = given.into_text();
            let parsed = wire::parse_snapshot_as(&text, &format).map_err(|e| e.within(&prefix))?;
            wire::analyze_valid(parsed).map_err(|e| e.within(&prefix))
        };
        let (snapshot, analysis) = match current {
            Some(given) => analyse(given)?,
            None => {
                return Err(InputErrors::one(FieldPath::root().field("snapshot"), "give snapshot or snapshot_id").into())
            }
        };
        let earlier = since.map(analyse).transpose()?;
        Ok(valuation::value_book(&snapshot, &analysis, &book, earlier.as_ref().map(|(s, a)| (s, a)))?)
    })
    .await?;
    Ok(Json(doc))
}

/// Realized variance of daily closes.
#[utoipa::path(
    post, path = "/v1/realized", tag = "risk",
    request_body(content = ClosesDoc, content_type = "application/json",
                 example = json!({"closes": [4150.2, 4172.9, 4160.0, 4188.4, 4201.7], "annualization": 252})),
    responses(
        (status = 200, description = "Realized and gamma-weighted realized variance", body = RealizedOutDoc),
        (status = 400, description = "Malformed JSON", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 401, description = "Bearer token missing or wrong", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 403, description = "Read-only token", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 413, description = "Body over the limit", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 415, description = "Not `application/json`", body = ProblemDetails, content_type = "application/problem+json"),
        (status = 422, description = "Gaps or non-positive closes, each with its JSON pointer", body = ProblemDetails, content_type = "application/problem+json"),
    ),
    security((), ("bearer" = []))
)]
pub async fn post_realized(JsonText(text): JsonText) -> Result<Json<RealizedOutDoc>, ApiError> {
    let out = off_runtime("realized", move || {
        let doc: ClosesDoc = parse_json(&text)?;
        Ok(valuation::realized_doc(&doc.closes, doc.annualization)?)
    })
    .await?;
    Ok(Json(out))
}
