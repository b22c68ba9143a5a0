//! The subcommands behind `main.rs`: each reads its input, calls the analytics and
//! writes JSON. They return a [`Status`] (the process exit code) so tests can call them.

pub mod bench;
pub mod serve;

use crate::analytics::calibrate::fit_leverage;
use crate::wire::{self, analyze_text, output, InputErrors};
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
}

impl CliError {
    /// The exit status for this error.
    pub fn status(&self) -> Status {
        match self {
            Self::Io { .. } | Self::Serve(_) => Status::Io,
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

/// `logstrip analyze`: smiles in, swap term structures and the fit out.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input.
pub fn run_analyze(input: &Path, pretty: bool, out: &mut dyn Write) -> Result<(), CliError> {
    let text = read_input(input)?;
    let (snapshot, analysis) = analyze_text(&text)?;
    write_json(&output::analysis_doc(&snapshot, &analysis), pretty, out)
}

/// `logstrip fit`: swap levels in, the fit out.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input.
pub fn run_fit(input: &Path, pretty: bool, out: &mut dyn Write) -> Result<(), CliError> {
    let text = read_input(input)?;
    let swaps = wire::parse_swaps(&text)?;
    let fit = swaps.fit.as_ref().map(|spec| fit_leverage(&swaps.target, spec));
    write_json(&output::swaps_doc(&swaps, fit.as_ref()), pretty, out)
}

/// `logstrip openapi`: the service's OpenAPI document (what `GET /openapi.json` serves).
///
/// # Errors
/// [`CliError::Io`] when standard output cannot be written.
pub fn run_openapi(out: &mut dyn Write) -> Result<(), CliError> {
    out.write_all(crate::api::docs::openapi_json().as_bytes())
        .map_err(|source| CliError::Io { path: "stdout".into(), source })
}
