//! Response bodies that exist only at the service's edge: a stored analysis with its
//! id and commit time, the list of underlyings, and the probes' status.

use super::timestamps::rfc3339;
use crate::store::UnderlyingSummary;
use crate::wire::{input, output};
use serde::Serialize;
use serde_json::Value;
use utoipa::ToSchema;

/// A stored analysis: the analysis fields plus `id`, `stored_at`, the revision and,
/// with `?include=input`, the original input.
#[derive(Debug, Serialize, ToSchema)]
pub struct StoredAnalysisDoc {
    /// Snapshot id.
    pub id: i64,
    /// Commit time, RFC 3339.
    pub stored_at: String,
    /// Revision of this underlying and `as_of`: 1 for the first snapshot stored, one
    /// more for each correction (other content for the same underlying and `as_of`).
    #[schema(minimum = 1, example = 1)]
    pub revision: i64,
    /// Id of the previous revision, which this one replaced; absent for revision 1.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub supersedes: Option<i64>,
    /// Id of the next revision, which replaced this one; absent while this is the
    /// current revision.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub superseded_by: Option<i64>,
    /// The analysis.
    #[serde(flatten)]
    pub analysis: output::AnalysisDoc,
    /// The snapshot as posted (with `?include=input`): the JSON document, or the CSV
    /// text of a snapshot posted as `text/csv`.
    #[serde(skip_serializing_if = "Option::is_none")]
    #[schema(value_type = Option<StoredInputDoc>)]
    pub input: Option<Value>,
}

/// The original input of a stored snapshot: the JSON document as posted, or the CSV text.
// Documentation only: the service returns the stored value as it is. Found by
// schemathesis once the parameters had examples: a CSV snapshot's input came back as a
// string that the schema did not allow (tests/api_service.rs).
#[derive(serde::Deserialize, ToSchema)]
#[serde(untagged)]
#[allow(dead_code)]
pub enum StoredInputDoc {
    /// A snapshot posted as JSON.
    Json(input::SnapshotDoc),
    /// A snapshot posted as CSV: the table as sent.
    Csv(String),
}

/// One underlying in the store.
#[derive(Debug, Serialize, ToSchema)]
pub struct UnderlyingDoc {
    /// Underlying name.
    pub underlying: String,
    /// Latest valuation time, RFC 3339.
    pub latest_as_of: String,
    /// Number of valuation times stored (a corrected snapshot counts once).
    pub snapshots: i64,
    /// Revisions replaced by a later correction, still stored (see `revisions=all` on
    /// the history).
    pub superseded: i64,
}

/// Every underlying in the store.
#[derive(Debug, Serialize, ToSchema)]
#[schema(example = json!({"underlyings": [
    {"underlying": "KESTREL50", "latest_as_of": "2026-11-30T15:30:00Z", "snapshots": 38, "superseded": 0}
]}))]
pub struct UnderlyingsDoc {
    /// By name.
    pub underlyings: Vec<UnderlyingDoc>,
}

impl From<Vec<UnderlyingSummary>> for UnderlyingsDoc {
    fn from(list: Vec<UnderlyingSummary>) -> Self {
        Self {
            underlyings: list
                .into_iter()
                .map(|u| UnderlyingDoc {
                    underlying: u.underlying,
                    latest_as_of: rfc3339(u.latest_as_of),
                    snapshots: u.snapshots,
                    superseded: u.superseded,
                })
                .collect(),
        }
    }
}

/// Health or readiness.
#[derive(Debug, Serialize, ToSchema)]
#[schema(example = json!({"status": "ok"}))]
pub struct StatusDoc {
    /// `ok` (alive) or `ready`.
    pub status: String,
}
