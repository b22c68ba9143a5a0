//! The JSON formats of logstrip: raw input types as users write them, their
//! validation into analytics types (every problem named by its field path), and
//! the output types. Shared by the command line and the service.

pub mod csv_input;
pub mod input;
pub mod output;
pub mod valuation;
pub mod path;

pub use input::{parse_snapshot, parse_swaps, ValidSnapshot, ValidSwaps};
pub use path::{FieldPath, InputErrors, Problem};

use crate::analytics::analysis::{analyze, Analysis};

/// Parses, validates and analyses a snapshot document.
///
/// # Errors
/// [`InputErrors`] for invalid input (duplicate expiries and unusable smiles included).
pub fn analyze_text(text: &str) -> Result<(ValidSnapshot, Analysis), InputErrors> {
    let snapshot = parse_snapshot(text)?;
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
