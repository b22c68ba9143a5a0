//! The JSON formats of logstrip: raw input types as users write them, their
//! validation into analytics types (every problem named by its field path), and
//! the output types. Shared by the command line and, later, the service.

pub mod input;
pub mod output;
pub mod path;

pub use input::{parse_snapshot, parse_swaps, ValidSnapshot, ValidSwaps};
pub use path::{FieldPath, InputErrors, Problem};
