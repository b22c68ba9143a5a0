//! `logstrip demo`: loads the invented demo day (KESTREL50, 38 intraday snapshots
//! priced from a known Heston model with noise) into the embedded store, prints how
//! close the fits came to the truth, and serves the API and the overview page.

use super::serve::{init_logging, termination_signal, LogFormat};
use super::CliError;
use crate::api::auth::Access;
use crate::api::{self, ServiceSettings, DEFAULT_MAX_BODY, DEFAULT_REQUEST_TIMEOUT};
use crate::ingest::{self, Digest, IngestError};
use crate::store::{redact_url, AnyStore, Store};
use crate::wire::SnapshotFormat;
use clap::Args;
use serde::Deserialize;
use std::io::Write;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};

/// Flags of `logstrip demo`.
#[derive(Debug, Clone, Args)]
pub struct DemoArgs {
    /// Directory of the demo day (snapshots and truth.json); by default
    /// `demo-data/day` under the current folder, beside the binary or in the source
    /// tree it was built from, the first that exists.
    #[arg(long)]
    pub data: Option<PathBuf>,
    /// Store to load into.
    #[arg(long, default_value = "sqlite://./logstrip-demo.db")]
    pub database: String,
    /// Address to serve on (loopback: the demo has no token).
    #[arg(long, default_value = "127.0.0.1:8080")]
    pub listen: SocketAddr,
    /// Load and report, then exit instead of serving.
    #[arg(long)]
    pub no_serve: bool,
}

/// The known truth of the demo day (written by demo-data/day/generate.py).
#[derive(Debug, Deserialize)]
struct Truth {
    expected_fit: ExpectedFit,
    snapshots: Vec<TruthSnapshot>,
    #[serde(default)]
    butterfly_slice: Option<TruthSlice>,
    model: serde_json::Value,
}

#[derive(Debug, Deserialize)]
struct ExpectedFit {
    hurst: f64,
    rho_nu: f64,
    mean_reversion: f64,
}

#[derive(Debug, Deserialize)]
struct TruthSnapshot {
    file: String,
    swaps: Vec<TruthSwap>,
}

#[derive(Debug, Deserialize)]
struct TruthSwap {
    expiry: String,
    variance_swap: f64,
    leverage_swap: f64,
}

#[derive(Debug, Deserialize)]
struct TruthSlice {
    file: String,
    expiry: String,
}

/// What the tool said about one snapshot, against the truth.
#[derive(Debug)]
struct Comparison {
    label: String,
    params: [Option<f64>; 3],
    status: String,
    variance_errors: Vec<f64>,
    leverage_errors: Vec<f64>,
    warnings: usize,
}

fn same_instant(a: &str, b: &str) -> bool {
    match (chrono::DateTime::parse_from_rfc3339(a), chrono::DateTime::parse_from_rfc3339(b)) {
        (Ok(x), Ok(y)) => x == y,
        _ => a == b,
    }
}

fn compare(file: &str, analysis: &serde_json::Value, truth: &Truth) -> Option<Comparison> {
    let expected = truth.snapshots.iter().find(|s| s.file == file)?;
    let skip_expiry = truth.butterfly_slice.as_ref().filter(|b| b.file == file).map(|b| b.expiry.clone());
    let mut variance_errors = Vec::new();
    let mut leverage_errors = Vec::new();
    let mut warnings = 0;
    for point in analysis["curve"].as_array()? {
        warnings += point["quality"]["warnings"].as_array().map_or(0, Vec::len);
        let expiry = point["expiry"].as_str().unwrap_or("");
        if skip_expiry.as_deref().is_some_and(|e| same_instant(e, expiry)) {
            continue;
        }
        let Some(t) = expected.swaps.iter().find(|s| same_instant(&s.expiry, expiry)) else { continue };
        if let (Some(vs), Some(ls)) = (point["variance_swap"].as_f64(), point["leverage_swap"].as_f64()) {
            variance_errors.push(((vs - t.variance_swap) / t.variance_swap).abs());
            leverage_errors.push((ls - t.leverage_swap).abs());
        }
    }
    let fit = &analysis["fit"];
    Some(Comparison {
        label: analysis["as_of"].as_str().unwrap_or(file).to_string(),
        params: ["hurst", "rho_nu", "mean_reversion"].map(|p| fit["params"][p].as_f64()),
        status: fit_label(fit),
        variance_errors,
        leverage_errors,
        warnings,
    })
}

/// The fit's status as the table shows it: with the bound parameters named, and the
/// classical Heston model named when a rough Heston fit ended at H = 1/2.
fn fit_label(fit: &serde_json::Value) -> String {
    let status = fit["status"].as_str().unwrap_or("none");
    let mut label = match status {
        "at_bound" => {
            let names: Vec<&str> = fit["active_bounds"]
                .as_array()
                .map(|a| a.iter().filter_map(|v| v.as_str()).collect())
                .unwrap_or_default();
            format!("at bound: {}", names.join(", "))
        }
        other => other.replace('_', " "),
    };
    if fit["selected_model"] == "heston" && fit["model"] == "rough_heston" {
        label.push_str(", Heston");
    }
    label
}

fn median(values: &mut [f64]) -> f64 {
    if values.is_empty() {
        return f64::NAN;
    }
    values.sort_by(f64::total_cmp);
    values[values.len() / 2]
}

fn maximum(values: &[f64]) -> f64 {
    values.iter().cloned().fold(f64::NAN, f64::max)
}

fn cell(x: Option<f64>) -> String {
    x.map_or_else(|| "-".into(), |v| format!("{v:.3}"))
}

fn report(out: &mut dyn Write, truth: &Truth, rows: &mut [Comparison]) -> std::io::Result<()> {
    let e = &truth.expected_fit;
    writeln!(out, "\nHow close the fits came to the truth")?;
    let m = &truth.model;
    let field = |k: &str| m[k].as_f64().map_or_else(|| "?".to_string(), |v| format!("{v}"));
    writeln!(
        out,
        "  smiles priced from {} with kappa {}, theta {}, sigma {}, rho {} (QuantLib), plus quote noise",
        m["name"].as_str().unwrap_or("?"),
        field("kappa"),
        field("theta"),
        field("sigma"),
        field("rho")
    )?;
    writeln!(
        out,
        "  as rough Heston the truth is hurst {:.3}, rho_nu {:.3}, mean_reversion {:.3}\n",
        e.hurst, e.rho_nu, e.mean_reversion
    )?;
    writeln!(
        out,
        "  {:<22} {:>7} {:>8} {:>9}  {:<26} {:>17} {:>11} {:>8}",
        "as_of", "hurst", "rho_nu", "mean_rev", "fit", "VS error med/max", "LS err max", "warnings"
    )?;
    for r in rows.iter_mut() {
        let max_vs = maximum(&r.variance_errors);
        writeln!(
            out,
            "  {:<22} {:>7} {:>8} {:>9}  {:<26} {:>7.2}% / {:>5.2}% {:>11.1e} {:>8}",
            r.label,
            cell(r.params[0]),
            cell(r.params[1]),
            cell(r.params[2]),
            r.status,
            100.0 * median(&mut r.variance_errors),
            100.0 * max_vs,
            maximum(&r.leverage_errors),
            r.warnings
        )?;
    }
    let mut summary: Vec<Vec<f64>> = (0..3).map(|i| rows.iter().filter_map(|r| r.params[i]).collect()).collect();
    let truth_values = [e.hurst, e.rho_nu, e.mean_reversion];
    writeln!(out)?;
    for (i, name) in ["hurst", "rho_nu", "mean_reversion"].iter().enumerate() {
        writeln!(
            out,
            "  {name:<15} median of the fits {:>8.4}   truth {:>8.4}",
            median(&mut summary[i]),
            truth_values[i]
        )?;
    }
    let mut all_vs: Vec<f64> = rows.iter().flat_map(|r| r.variance_errors.iter().cloned()).collect();
    writeln!(
        out,
        "  variance swaps against the Heston closed form: median error {:.2}%, worst {:.2}% \
         (the butterfly slice, not Heston, left out)",
        100.0 * median(&mut all_vs),
        100.0 * maximum(&all_vs)
    )
}

/// Loads every snapshot file of the demo day into the store; returns each file's
/// name with its analysis, and how many were new.
async fn load(store: &AnyStore, files: &[PathBuf]) -> Result<(Vec<(String, serde_json::Value)>, usize), CliError> {
    let mut analyses = Vec::new();
    let mut created = 0;
    for path in files {
        let text = std::fs::read_to_string(path)
            .map_err(|source| CliError::Io { path: path.display().to_string(), source })?;
        let prepared =
            tokio::task::spawn_blocking(move || ingest::prepare(text, &SnapshotFormat::Json, Digest::ForStorage))
                .await
                .map_err(|e| CliError::Serve(e.to_string()))?
                .map_err(|e| match e {
                    IngestError::Input(i) => CliError::Input(i),
                    IngestError::Internal(m) => CliError::Serve(m),
                })?;
        let analysis: serde_json::Value =
            serde_json::from_str(&prepared.record.analysis).map_err(|e| CliError::Serve(e.to_string()))?;
        let inserted = store.insert(prepared.record).await.map_err(|e| CliError::Serve(e.to_string()))?;
        created += usize::from(inserted.created);
        let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        analyses.push((name, analysis));
    }
    Ok((analyses, created))
}

/// Where the demo day lies relative to the repository root.
const DEMO_DAY: &str = "demo-data/day";

/// The demo day's folder when `--data` is not given: under the current folder, in a
/// folder above the binary (`target/release/logstrip` sits two levels below the
/// repository root) or in the source tree the binary was built from.
fn find_demo_day() -> Result<PathBuf, CliError> {
    let mut candidates = vec![PathBuf::from(DEMO_DAY)];
    if let Ok(exe) = std::env::current_exe() {
        candidates.extend(exe.ancestors().skip(1).take(4).map(|dir| dir.join(DEMO_DAY)));
    }
    candidates.push(Path::new(env!("CARGO_MANIFEST_DIR")).join(DEMO_DAY));
    candidates.into_iter().find(|dir| dir.join("truth.json").is_file()).ok_or_else(|| {
        CliError::Config(format!(
            "the demo day was not found ({DEMO_DAY} under the current folder, beside the binary or in its source tree): \
             pass --data with the repository's {DEMO_DAY} folder"
        ))
    })
}

fn snapshot_files(dir: &Path) -> Result<Vec<PathBuf>, CliError> {
    let io = |source| CliError::Io { path: dir.display().to_string(), source };
    let mut files: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(io)?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|e| e == "json") && p.file_name().is_some_and(|n| n != "truth.json"))
        .collect();
    files.sort();
    if files.is_empty() {
        return Err(CliError::Config(format!("--data {}: no snapshot files", dir.display())));
    }
    Ok(files)
}

/// Runs the demo.
///
/// # Errors
/// [`CliError`] when the demo data cannot be read, the store opened or the port bound.
pub fn run_demo(args: &DemoArgs, out: &mut dyn Write) -> Result<(), CliError> {
    let io = |source| CliError::Io { path: "stdout".into(), source };
    let data = match &args.data {
        Some(dir) => dir.clone(),
        None => find_demo_day()?,
    };
    let files = snapshot_files(&data)?;
    let truth_path = data.join("truth.json");
    let truth: Option<Truth> = std::fs::read_to_string(&truth_path).ok().and_then(|t| serde_json::from_str(&t).ok());
    let runtime = tokio::runtime::Runtime::new().map_err(|e| CliError::Serve(format!("runtime: {e}")))?;
    runtime.block_on(async {
        let store = AnyStore::open(&args.database)
            .await
            .map_err(|e| CliError::Serve(format!("--database {}: {e}", redact_url(&args.database))))?;
        let started = std::time::Instant::now();
        let (analyses, created) = load(&store, &files).await?;
        writeln!(
            out,
            "Loaded {} demo snapshots of the invented index KESTREL50 into {} ({created} new, {} already there) in {:.1} s",
            analyses.len(),
            redact_url(&args.database),
            analyses.len() - created,
            started.elapsed().as_secs_f64()
        )
        .map_err(io)?;
        if let Some(truth) = &truth {
            let mut rows: Vec<Comparison> = analyses.iter().filter_map(|(f, a)| compare(f, a, truth)).collect();
            report(out, truth, &mut rows).map_err(io)?;
        }
        if args.no_serve {
            return Ok(());
        }
        init_logging(LogFormat::Text);
        let listener = tokio::net::TcpListener::bind(args.listen)
            .await
            .map_err(|e| CliError::Serve(format!("--listen {}: {e}", args.listen)))?;
        let settings = ServiceSettings {
            access: Access::default(),
            max_body: DEFAULT_MAX_BODY,
            request_timeout: DEFAULT_REQUEST_TIMEOUT,
            connections: api::ConnectionLimits::default(),
        };
        let server = api::start(listener, store, settings, termination_signal()).map_err(|e| CliError::Serve(e.to_string()))?;
        let base = format!("http://{}", server.addr);
        writeln!(out, "\nlogstrip demo is serving on {base} (Ctrl-C stops it)").map_err(io)?;
        for (what, path) in [
            ("overview page", "/"),
            ("latest analysis (JSON)", "/v1/underlyings/KESTREL50/latest"),
            ("term-structure chart", "/v1/underlyings/KESTREL50/latest/chart.svg"),
            ("hurst through the day", "/v1/underlyings/KESTREL50/history/chart.svg?param=hurst"),
            ("history as CSV", "/v1/underlyings/KESTREL50/history?format=csv"),
            ("OpenAPI document", "/openapi.json"),
        ] {
            writeln!(out, "  {what:<24} {base}{path}").map_err(io)?;
        }
        out.flush().map_err(io)?;
        server.wait().await.map_err(|e| CliError::Serve(e.to_string()))
    })
}
