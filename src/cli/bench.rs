//! `logstrip bench`: runs the analysis and the fit of one snapshot in-process many
//! times and reports wall-time statistics, so speed claims come with figures.

use super::{read_input, CliError};
use crate::analytics::analysis::{analyze, leverage_target, AnalyzeOptions};
use crate::analytics::calibrate::{fit_leverage, FitSpec};
use serde::Serialize;
use std::io::Write;
use std::path::Path;
use std::time::Instant;

/// Wall-time statistics in microseconds.
#[derive(Debug, Clone, Serialize)]
pub struct Timing {
    /// Median.
    pub median: f64,
    /// Fastest run.
    pub min: f64,
    /// 90th percentile.
    pub p90: f64,
}

/// The report of a benchmark run.
#[derive(Debug, Clone, Serialize)]
pub struct BenchReport {
    /// Runs per measurement.
    pub runs: usize,
    /// Expiries in the snapshot.
    pub expiries: usize,
    /// Smiles, replication, quality checks and the fit, per run.
    pub analyze_us: Timing,
    /// Smiles, replication and quality checks without the fit, per run.
    pub curve_us: Timing,
    /// The model fit alone (the one `analyze` runs, spread weights included), per run.
    pub fit_us: Timing,
}

fn timing(mut samples: Vec<f64>) -> Timing {
    samples.sort_by(f64::total_cmp);
    let at = |q: f64| samples[((samples.len() - 1) as f64 * q).round() as usize];
    Timing { median: at(0.5), min: samples[0], p90: at(0.9) }
}

/// Benchmarks the analysis of the snapshot in `input` over `runs` runs.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input.
pub fn run_bench(input: &Path, runs: usize, out: &mut dyn Write) -> Result<(), CliError> {
    let text = read_input(input)?;
    let (snapshot, first) = crate::wire::analyze_text(&text)?;
    let runs = runs.max(1);
    let spec = snapshot.options.fit.clone().unwrap_or(FitSpec::default());
    let options = AnalyzeOptions { smile: snapshot.options.smile, fit: Some(spec.clone()) };
    // The fit `analyze` runs, weights from the quotes' spreads included.
    let target = leverage_target(&snapshot.slices, &first.slices);
    let curve_only = AnalyzeOptions { smile: snapshot.options.smile, fit: None };
    let mut curve_samples = Vec::with_capacity(runs);
    let mut analyze_samples = Vec::with_capacity(runs);
    let mut fit_samples = Vec::with_capacity(runs);
    for _ in 0..runs {
        let t0 = Instant::now();
        let result = analyze(&snapshot.slices, &options);
        analyze_samples.push(t0.elapsed().as_secs_f64() * 1e6);
        std::hint::black_box(result.is_ok());
        let tc = Instant::now();
        let curve = analyze(&snapshot.slices, &curve_only);
        curve_samples.push(tc.elapsed().as_secs_f64() * 1e6);
        std::hint::black_box(curve.is_ok());
        let t1 = Instant::now();
        let fit = fit_leverage(&target, &spec);
        fit_samples.push(t1.elapsed().as_secs_f64() * 1e6);
        std::hint::black_box(fit.iterations);
    }
    let report = BenchReport {
        runs,
        expiries: snapshot.slices.len(),
        analyze_us: timing(analyze_samples),
        curve_us: timing(curve_samples),
        fit_us: timing(fit_samples),
    };
    let text = serde_json::to_string_pretty(&report)
        .map_err(|e| CliError::Io { path: "stdout".into(), source: std::io::Error::other(e) })?;
    writeln!(out, "{text}").map_err(|source| CliError::Io { path: "stdout".into(), source })
}
