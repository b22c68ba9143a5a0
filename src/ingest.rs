//! From a posted or loaded snapshot to a record ready for the history store: parse,
//! validate, analyse, digest. Shared by the service and `logstrip backfill`.

use crate::store::{self, NewSnapshot};
use crate::wire::{self, output, InputErrors, SnapshotFormat};

/// Why a snapshot cannot be prepared.
#[derive(Debug, thiserror::Error)]
pub enum IngestError {
    /// The input is invalid.
    #[error("{0}")]
    Input(#[from] InputErrors),
    /// Serialising the analysis failed (a bug, not bad input).
    #[error("internal: {0}")]
    Internal(String),
}

/// A snapshot analysed and ready to store.
#[derive(Debug)]
pub struct Prepared {
    /// The record for [`crate::store::Store::insert`].
    pub record: NewSnapshot,
    /// Microseconds the model fit took, when one was made.
    pub fit_elapsed_us: Option<u64>,
}

/// Whether [`prepare`] digests the input (needed only to store it).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Digest {
    /// Compute the content digest that makes storage idempotent.
    ForStorage,
    /// Leave it empty (nothing will be stored).
    Skip,
}

/// SHA-256 identifying a snapshot's content: JSON in canonical form (key order and
/// whitespace do not matter); CSV as text with line endings normalised, together with
/// its media type (which carries header values given outside the table).
///
/// # Errors
/// [`IngestError::Internal`] when JSON that parsed before does not parse now.
pub fn content_digest(text: &str, format: &SnapshotFormat) -> Result<String, IngestError> {
    match format {
        SnapshotFormat::Json => {
            let value: serde_json::Value =
                serde_json::from_str(text).map_err(|e| IngestError::Internal(e.to_string()))?;
            Ok(store::canonical_json_sha256(&value))
        }
        SnapshotFormat::Csv(_) => {
            let normalised = text.replace("\r\n", "\n");
            Ok(store::hex_sha256(format!("{}\n{}", format.media_type(), normalised.trim_end()).as_bytes()))
        }
    }
}

/// Parses, validates and analyses `text`; the record holds the input as given and the
/// analysis as JSON text. CPU work of milliseconds: run it off async threads.
///
/// # Errors
/// [`IngestError::Input`] for invalid input.
pub fn prepare(text: String, format: &SnapshotFormat, digest: Digest) -> Result<Prepared, IngestError> {
    let (snapshot, analysis) = wire::analyze_valid(wire::parse_snapshot_as(&text, format)?)?;
    let doc = output::analysis_doc(&snapshot, &analysis);
    let content_sha256 = match digest {
        Digest::ForStorage => content_digest(&text, format)?,
        Digest::Skip => String::new(),
    };
    let analysis_json = serde_json::to_string(&doc).map_err(|e| IngestError::Internal(e.to_string()))?;
    Ok(Prepared {
        fit_elapsed_us: doc.fit.as_ref().map(|f| f.elapsed_us),
        record: NewSnapshot::new(
            snapshot.underlying,
            snapshot.as_of,
            content_sha256,
            &format.media_type(),
            text,
            analysis_json,
        ),
    })
}
