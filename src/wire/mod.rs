//! The JSON and CSV formats of logstrip: raw input types as users write them, their
//! validation into analytics types (every problem named by its field path), and
//! the output types. Shared by the command line and the service, which reach the
//! analysis of a snapshot ([`parse_snapshot_as`], [`analyze_valid`]) and the fit of
//! swap levels ([`fit_swap_levels`]) through the same functions here.

pub mod csv_input;
pub mod input;
pub mod output;
pub mod path;
pub mod strict;
pub mod tenors;
pub mod time;
pub mod valuation;

pub use input::{parse_snapshot, parse_swaps, ValidSnapshot, ValidSwaps};
pub use path::{FieldPath, InputErrors, Problem};

use crate::analytics::analysis::{analyze, Analysis};
use crate::analytics::calibrate::fit_leverage;

/// How a snapshot is written.
#[derive(Debug, Clone)]
pub enum SnapshotFormat {
    /// A JSON document.
    Json,
    /// CSV, one row per quote, with `underlying`/`as_of` given outside the table when
    /// the table lacks those columns.
    Csv(csv_input::CsvHeader),
}

impl SnapshotFormat {
    /// The media type under which the input is stored (CSV carries header values given
    /// outside the table as parameters, so that the stored input is complete).
    pub fn media_type(&self) -> String {
        match self {
            Self::Json => "application/json".into(),
            Self::Csv(h) => {
                let mut m = String::from("text/csv");
                for (name, value) in [("underlying", &h.underlying), ("as_of", &h.as_of)] {
                    if let Some(v) = value {
                        m.push_str(&format!("; {name}={}", serde_json::Value::String(v.clone())));
                    }
                }
                m
            }
        }
    }
}

impl SnapshotFormat {
    /// The format of a stored input from its media type (see [`SnapshotFormat::media_type`]).
    pub fn from_media_type(media_type: &str) -> Option<Self> {
        let mut parts = split_parameters(media_type).into_iter().map(str::trim);
        match parts.next()?.to_ascii_lowercase().as_str() {
            "application/json" => Some(Self::Json),
            "text/csv" => {
                let mut header = csv_input::CsvHeader::default();
                for part in parts {
                    let (name, value) = part.split_once('=')?;
                    let value: String = serde_json::from_str(value).ok()?;
                    match name.trim() {
                        "underlying" => header.underlying = Some(value),
                        "as_of" => header.as_of = Some(value),
                        _ => return None,
                    }
                }
                Some(Self::Csv(header))
            }
            _ => None,
        }
    }
}

/// Splits a media type at the `;` that are not inside a quoted (JSON string) value.
fn split_parameters(media_type: &str) -> Vec<&str> {
    let (mut parts, mut start, mut quoted, mut escaped) = (Vec::new(), 0, false, false);
    for (i, c) in media_type.char_indices() {
        match c {
            _ if escaped => escaped = false,
            '\\' if quoted => escaped = true,
            '"' => quoted = !quoted,
            ';' if !quoted => {
                parts.push(&media_type[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    parts.push(&media_type[start..]);
    parts
}

/// Parses and validates a snapshot in either format.
///
/// # Errors
/// [`InputErrors`] naming fields (JSON) or lines and columns (CSV).
pub fn parse_snapshot_as(text: &str, format: &SnapshotFormat) -> Result<ValidSnapshot, InputErrors> {
    match format {
        SnapshotFormat::Json => parse_snapshot(text),
        SnapshotFormat::Csv(header) => csv_input::parse_snapshot_csv(text, header),
    }
}

/// Analyses a validated snapshot.
///
/// # Errors
/// [`InputErrors`] for duplicate expiries and unusable smiles.
pub fn analyze_valid(snapshot: ValidSnapshot) -> Result<(ValidSnapshot, Analysis), InputErrors> {
    let analysis = analyze(&snapshot.slices, &snapshot.options).map_err(|e| {
        use crate::analytics::analysis::AnalysisError;
        let root = FieldPath::root().field("slices");
        match e {
            AnalysisError::Smile { index, source } => InputErrors::one(root.index(index), source.to_string()),
            AnalysisError::DuplicateExpiry { first, second } => {
                InputErrors::one(root.index(second).field("tau"), format!("same expiry as slices[{first}]"))
            }
            AnalysisError::Empty => InputErrors::one(root, "needs at least one slice"),
        }
    })?;
    Ok((snapshot, analysis))
}

/// Parses, validates and analyses a JSON snapshot document.
///
/// # Errors
/// [`InputErrors`] for invalid input (duplicate expiries and unusable smiles included).
pub fn analyze_text(text: &str) -> Result<(ValidSnapshot, Analysis), InputErrors> {
    analyze_valid(parse_snapshot(text)?)
}

/// Parses and validates a swap-levels document, fits the model when the document asks
/// for a fit, and returns the output document: the one fit path of `logstrip fit` and
/// `POST /v1/fits`. CPU work of up to milliseconds: run it off async threads.
///
/// # Errors
/// [`InputErrors`] for invalid input. A fit that stops short of convergence is not an
/// error: its status is in the document.
pub fn fit_swap_levels(text: &str) -> Result<output::AnalysisDoc, InputErrors> {
    let swaps = parse_swaps(text)?;
    let fit = swaps.fit.as_ref().map(|spec| fit_leverage(&swaps.target, spec));
    Ok(output::swaps_doc(&swaps, fit.as_ref()))
}
