//! The subcommands behind `main.rs`: each reads its input, calls the analytics and
//! writes JSON. They return a [`Status`] (the process exit code) so tests can call them.

pub mod backfill;
pub mod bench;
pub mod demo;
pub mod serve;

use crate::analytics::analysis::Analysis;
use crate::wire::csv_input::{self, CsvHeader};
use crate::wire::valuation::{self, BookDoc, ClosesDoc};
use crate::wire::{self, output, InputErrors, SnapshotFormat};
use std::io::{Read, Write};
use std::path::Path;

/// Exit status of a subcommand: 0 success, 1 I/O or internal failure, 2 bad input.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Status {
    /// Done.
    Ok = 0,
    /// The input could not be read or the output not written.
    Io = 1,
    /// The input is invalid; every problem was printed.
    BadInput = 2,
}

/// Errors of the command layer.
#[derive(Debug, thiserror::Error)]
pub enum CliError {
    /// Reading or writing failed.
    #[error("{path}: {source}")]
    Io {
        /// File involved.
        path: String,
        /// Cause.
        source: std::io::Error,
    },
    /// The input is invalid.
    #[error("{0}")]
    Input(#[from] InputErrors),
    /// A flag or setting is invalid.
    #[error("{0}")]
    Config(String),
    /// The service could not start or failed.
    #[error("{0}")]
    Serve(String),
    /// A batch finished with failures (listed as it ended).
    #[error("{0}")]
    Incomplete(String),
}

impl CliError {
    /// The exit status for this error.
    pub fn status(&self) -> Status {
        match self {
            Self::Io { .. } | Self::Serve(_) | Self::Incomplete(_) => Status::Io,
            Self::Input(_) | Self::Config(_) => Status::BadInput,
        }
    }
}

/// Reads a file, or standard input for `-`.
pub fn read_input(path: &Path) -> Result<String, CliError> {
    let mut text = String::new();
    let shown = path.display().to_string();
    if shown == "-" {
        std::io::stdin().read_to_string(&mut text).map_err(|source| CliError::Io { path: shown, source })?;
    } else {
        text = std::fs::read_to_string(path).map_err(|source| CliError::Io { path: shown, source })?;
    }
    Ok(text)
}

fn write_json<T: serde::Serialize>(value: &T, pretty: bool, out: &mut dyn Write) -> Result<(), CliError> {
    let io = |source| CliError::Io { path: "stdout".into(), source };
    let text = if pretty { serde_json::to_string_pretty(value) } else { serde_json::to_string(value) }
        .map_err(|e| io(std::io::Error::other(e)))?;
    writeln!(out, "{text}").map_err(io)
}

/// How a snapshot file is written.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum InputFormat {
    /// A JSON document.
    Json,
    /// CSV, one row per quote.
    Csv,
}

/// Flags that say how to read a snapshot file.
#[derive(Debug, Clone, Default, clap::Args)]
pub struct SnapshotFlags {
    /// `json` or `csv`; by default from the file name (`.csv` is CSV), else JSON.
    #[arg(long, value_enum)]
    pub format: Option<InputFormat>,
    /// Underlying of a CSV file without an `underlying` column.
    #[arg(long)]
    pub underlying: Option<String>,
    /// Valuation time (RFC 3339) of a CSV file without an `as_of` column.
    #[arg(long)]
    pub as_of: Option<String>,
}

impl SnapshotFlags {
    /// The format of `path` under these flags.
    pub fn format_of(&self, path: &Path) -> SnapshotFormat {
        let csv = match self.format {
            Some(f) => f == InputFormat::Csv,
            None => path.extension().is_some_and(|e| e.eq_ignore_ascii_case("csv")),
        };
        if csv {
            SnapshotFormat::Csv(CsvHeader { underlying: self.underlying.clone(), as_of: self.as_of.clone() })
        } else {
            SnapshotFormat::Json
        }
    }
}

fn analyze_file(input: &Path, flags: &SnapshotFlags) -> Result<(wire::ValidSnapshot, Analysis), CliError> {
    let text = read_input(input)?;
    let parsed = wire::parse_snapshot_as(&text, &flags.format_of(input))?;
    Ok(wire::analyze_valid(parsed)?)
}

/// `logstrip analyze`: smiles in, swap term structures and the fit out.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input.
pub fn run_analyze(
    input: &Path,
    flags: &SnapshotFlags,
    svg: Option<&Path>,
    pretty: bool,
    out: &mut dyn Write,
) -> Result<(), CliError> {
    let (snapshot, analysis) = analyze_file(input, flags)?;
    let doc = output::analysis_doc(&snapshot, &analysis);
    if let Some(path) = svg {
        let points = term_points(&doc);
        let title = format!("{}  as of {}", doc.underlying, doc.as_of);
        let date = |tau: f64| crate::chart_drawing::expiry_date(snapshot.as_of, tau);
        let chart =
            crate::chart_drawing::term_structure_svg(&title, &points, crate::chart_drawing::DEFAULT_WIDTH, &date)
                .map_err(|e| CliError::Io { path: path.display().to_string(), source: std::io::Error::other(e) })?;
        std::fs::write(path, chart).map_err(|source| CliError::Io { path: path.display().to_string(), source })?;
    }
    write_json(&doc, pretty, out)
}

/// The chart points of an analysis.
fn term_points(doc: &output::AnalysisDoc) -> Vec<crate::chart_drawing::TermPoint> {
    let model = doc.fit.as_ref().map(|f| f.model_leverage_swap.as_slice()).unwrap_or(&[]);
    doc.curve
        .iter()
        .enumerate()
        .map(|(i, c)| crate::chart_drawing::TermPoint {
            tau: c.tau,
            variance_swap: c.variance_swap,
            gamma_swap: c.gamma_swap,
            leverage_swap: c.leverage_swap,
            forward_variance: Some(c.forward_variance),
            model_leverage_swap: model.get(i).copied(),
        })
        .collect()
}

/// `logstrip value`: a book of swaps valued against a snapshot, with vega by expiry, and
/// with `since` (an earlier snapshot) the P&L explanation of each position.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input (a maturity beyond the last expiry
/// included).
pub fn run_value(
    book: &Path,
    snapshot: &Path,
    since: Option<&Path>,
    flags: &SnapshotFlags,
    pretty: bool,
    out: &mut dyn Write,
) -> Result<(), CliError> {
    let book_doc: BookDoc = wire::input::parse_json(&read_input(book)?)?;
    let (snapshot, analysis) = analyze_file(snapshot, flags)?;
    let earlier = since.map(|path| analyze_file(path, flags)).transpose()?;
    let doc = valuation::value_book(&snapshot, &analysis, &book_doc, earlier.as_ref().map(|(s, a)| (s, a)))?;
    write_json(&doc, pretty, out)
}

/// `logstrip realized`: realized and gamma-weighted realized variance from closes in a
/// CSV (`close` column, optional `date`) or JSON (`{"closes": [..]}`) file.
///
/// # Errors
/// [`CliError`] for unreadable input, gaps and non-positive closes (naming the row).
pub fn run_realized(
    closes: &Path,
    annualization: Option<f64>,
    pretty: bool,
    out: &mut dyn Write,
) -> Result<(), CliError> {
    let text = read_input(closes)?;
    let values: Vec<Option<f64>> = if closes.extension().is_some_and(|e| e.eq_ignore_ascii_case("csv")) {
        csv_input::parse_closes_csv(&text)?.values.into_iter().map(Some).collect()
    } else {
        let doc: ClosesDoc = wire::input::parse_json(&text)?;
        if annualization.is_none() {
            return write_json(&valuation::realized_doc(&doc.closes, doc.annualization)?, pretty, out);
        }
        doc.closes
    };
    write_json(&valuation::realized_doc(&values, annualization)?, pretty, out)
}

/// `logstrip fit`: swap levels in, the fit out.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input.
pub fn run_fit(input: &Path, pretty: bool, out: &mut dyn Write) -> Result<(), CliError> {
    let doc = wire::fit_swap_levels(&read_input(input)?)?;
    write_json(&doc, pretty, out)
}

/// `logstrip openapi`: the service's OpenAPI document (what `GET /openapi.json` serves).
///
/// # Errors
/// [`CliError::Io`] when standard output cannot be written.
pub fn run_openapi(out: &mut dyn Write) -> Result<(), CliError> {
    out.write_all(crate::api::openapi::openapi_json().as_bytes())
        .map_err(|source| CliError::Io { path: "stdout".into(), source })
}
