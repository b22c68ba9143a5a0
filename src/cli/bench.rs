//! `logstrip bench`: runs the analysis and the fit of a set of snapshots in-process
//! many times each and reports wall-time statistics per snapshot and the slowest, so
//! speed claims come with figures.

use super::{CliError, SnapshotFlags};
use crate::analytics::analysis::{analyze, leverage_target, AnalyzeOptions};
use crate::analytics::calibrate::{fit_leverage, FitSpec};
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};
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
    /// Slowest run.
    pub max: f64,
}

/// The timings of one snapshot.
#[derive(Debug, Clone, Serialize)]
pub struct SnapshotTiming {
    /// The snapshot's file.
    pub file: String,
    /// Expiries in the snapshot.
    pub expiries: usize,
    /// Smiles, replication, quality checks and the fit, per run.
    pub analyze_us: Timing,
    /// Smiles, replication and quality checks without the fit, per run.
    pub curve_us: Timing,
    /// The model fit alone (the one `analyze` runs, standard-error weights included),
    /// per run.
    pub fit_us: Timing,
}

/// The slowest snapshot by one measure's median.
#[derive(Debug, Clone, Serialize)]
pub struct Slowest {
    /// Its file.
    pub file: String,
    /// Its median, microseconds.
    pub median_us: f64,
}

/// The report of a benchmark run.
#[derive(Debug, Clone, Serialize)]
pub struct BenchReport {
    /// Runs per measurement.
    pub runs: usize,
    /// Per snapshot, in the order given (directories sorted by file name).
    pub snapshots: Vec<SnapshotTiming>,
    /// The slowest snapshot for the full analysis.
    pub slowest_analyze: Slowest,
    /// The slowest snapshot for the fit alone.
    pub slowest_fit: Slowest,
}

fn timing(mut samples: Vec<f64>) -> Timing {
    samples.sort_by(f64::total_cmp);
    let at = |q: f64| samples[((samples.len() - 1) as f64 * q).round() as usize];
    Timing { median: at(0.5), min: samples[0], p90: at(0.9), max: samples[samples.len() - 1] }
}

/// The snapshot files of `inputs`: files as given, directories expanded to their
/// `*.json` files other than `*.truth.json` and their `*.csv` files, sorted.
fn snapshot_files(inputs: &[PathBuf]) -> Result<Vec<PathBuf>, CliError> {
    let mut files = Vec::new();
    for input in inputs {
        if input.is_dir() {
            let entries = std::fs::read_dir(input)
                .map_err(|source| CliError::Io { path: input.display().to_string(), source })?;
            let mut found: Vec<PathBuf> = entries
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| {
                    let name = p.file_name().and_then(|n| n.to_str()).unwrap_or("");
                    (name.ends_with(".json") && !name.ends_with(".truth.json")) || name.ends_with(".csv")
                })
                .collect();
            found.sort();
            files.extend(found);
        } else {
            files.push(input.clone());
        }
    }
    Ok(files)
}

/// Times one snapshot over `runs` runs.
fn bench_one(input: &Path, runs: usize, flags: &SnapshotFlags) -> Result<SnapshotTiming, CliError> {
    let (snapshot, first) = super::analyze_file(input, flags)?;
    let spec = snapshot.options.fit.clone().unwrap_or(FitSpec::default());
    let options = AnalyzeOptions { smile: snapshot.options.smile, fit: Some(spec.clone()) };
    // The fit `analyze` runs, weights included.
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
    Ok(SnapshotTiming {
        file: input.display().to_string(),
        expiries: snapshot.slices.len(),
        analyze_us: timing(analyze_samples),
        curve_us: timing(curve_samples),
        fit_us: timing(fit_samples),
    })
}

/// Benchmarks the analysis of every snapshot in `inputs` over `runs` runs each and
/// names the slowest.
///
/// # Errors
/// [`CliError`] for unreadable or invalid input.
pub fn run_bench(inputs: &[PathBuf], runs: usize, flags: &SnapshotFlags, out: &mut dyn Write) -> Result<(), CliError> {
    let runs = runs.max(1);
    let snapshots =
        snapshot_files(inputs)?.iter().map(|file| bench_one(file, runs, flags)).collect::<Result<Vec<_>, _>>()?;
    let slowest = |by: fn(&SnapshotTiming) -> f64| {
        snapshots
            .iter()
            .max_by(|a, b| by(a).total_cmp(&by(b)))
            .map(|s| Slowest { file: s.file.clone(), median_us: by(s) })
            .unwrap_or(Slowest { file: String::new(), median_us: f64::NAN })
    };
    let report = BenchReport {
        runs,
        slowest_analyze: slowest(|s| s.analyze_us.median),
        slowest_fit: slowest(|s| s.fit_us.median),
        snapshots,
    };
    let text = serde_json::to_string_pretty(&report)
        .map_err(|e| CliError::Io { path: "stdout".into(), source: std::io::Error::other(e) })?;
    writeln!(out, "{text}").map_err(|source| CliError::Io { path: "stdout".into(), source })
}
