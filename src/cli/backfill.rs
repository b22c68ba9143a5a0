//! `logstrip backfill DIR`: loads every snapshot file (`.json`, `.csv`) under a
//! directory into the local store, or posts them to a running service with bounded
//! concurrency and retries. Reruns are cheap: what is already stored is skipped (the
//! service's idempotent re-post; the store's content digest locally).

use super::{CliError, SnapshotFlags};
use crate::ingest::{self, Digest, IngestError};
use crate::store::{redact_url, AnyStore, Store, StoreError};
use crate::wire::SnapshotFormat;
use clap::Args;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};
use tokio::sync::Semaphore;

/// First retry delay; doubled per attempt up to [`MAX_BACKOFF`].
const FIRST_BACKOFF: Duration = Duration::from_millis(500);
/// Longest wait between attempts (a `Retry-After` is honoured up to this too).
const MAX_BACKOFF: Duration = Duration::from_secs(30);
/// Plain progress lines, when not on a terminal, at most this often.
const PROGRESS_EVERY: Duration = Duration::from_secs(2);

/// Flags of `logstrip backfill`.
#[derive(Debug, Clone, Args)]
pub struct BackfillArgs {
    /// Directory searched (recursively) for `.json` and `.csv` snapshot files.
    pub dir: PathBuf,
    /// Base URL of a running service (e.g. `http://127.0.0.1:8080`); without it the
    /// files go into the local store.
    #[arg(long)]
    pub to: Option<String>,
    /// Bearer token file for the service.
    #[arg(long, env = "LOGSTRIP_TOKEN_FILE")]
    pub token_file: Option<PathBuf>,
    /// Local store (without `--to`).
    #[arg(long, env = "LOGSTRIP_DATABASE_URL", default_value = "sqlite://./logstrip.db")]
    pub database: String,
    /// Files in flight at once.
    #[arg(long, default_value_t = 4)]
    pub concurrency: usize,
    /// Attempts per file on 503, timeouts and connection errors.
    #[arg(long, default_value_t = 6)]
    pub attempts: u32,
    /// Where to list the files that failed, with reasons.
    #[arg(long, default_value = "backfill-failures.txt")]
    pub failures: PathBuf,
    /// How to read the files (CSV header values for tables without those columns).
    #[command(flatten)]
    pub snapshot: SnapshotFlags,
}

/// What happened to one file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Outcome {
    /// Stored now.
    Done,
    /// Already stored.
    Skipped,
    /// Not stored, with the reason.
    Failed(String),
}

/// Every `.json` and `.csv` file under `dir`, sorted.
fn snapshot_files(dir: &Path) -> std::io::Result<Vec<PathBuf>> {
    let mut found = Vec::new();
    let mut pending = vec![dir.to_path_buf()];
    while let Some(d) = pending.pop() {
        for entry in std::fs::read_dir(&d)? {
            let path = entry?.path();
            if path.is_dir() {
                pending.push(path);
            } else if path.extension().is_some_and(|e| e.eq_ignore_ascii_case("json") || e.eq_ignore_ascii_case("csv"))
            {
                found.push(path);
            }
        }
    }
    found.sort();
    Ok(found)
}

/// Where files go.
enum Target {
    Service { client: reqwest::Client, base: String, token: Option<String> },
    Local(AnyStore),
}

/// Whether an attempt may be repeated, and after how long at least.
enum Attempt {
    Finished(Outcome),
    Retry { reason: String, after: Option<Duration> },
}

fn backoff(attempt: u32) -> Duration {
    FIRST_BACKOFF.saturating_mul(1u32 << attempt.min(10)).min(MAX_BACKOFF)
}

/// The first field problem or the detail of a problem+json body.
fn problem_reason(status: reqwest::StatusCode, body: &str) -> String {
    let parsed: Option<serde_json::Value> = serde_json::from_str(body).ok();
    let detail = parsed
        .as_ref()
        .and_then(|p| p["errors"][0]["detail"].as_str().or_else(|| p["detail"].as_str()).map(str::to_string));
    format!("HTTP {}: {}", status.as_u16(), detail.unwrap_or_else(|| body.chars().take(200).collect()))
}

async fn post_once(
    client: &reqwest::Client,
    base: &str,
    token: Option<&str>,
    path: &Path,
    text: &str,
    format: &SnapshotFormat,
) -> Attempt {
    let mut url = format!("{}/v1/snapshots", base.trim_end_matches('/'));
    let content_type = match format {
        SnapshotFormat::Json => "application/json",
        SnapshotFormat::Csv(h) => {
            let pairs: Vec<(&str, &String)> = [("underlying", &h.underlying), ("as_of", &h.as_of)]
                .into_iter()
                .filter_map(|(k, v)| v.as_ref().map(|v| (k, v)))
                .collect();
            if let Ok(q) = serde_urlencoded::to_string(&pairs) {
                if !q.is_empty() {
                    url = format!("{url}?{q}");
                }
            }
            "text/csv"
        }
    };
    let mut request = client.post(&url).header(reqwest::header::CONTENT_TYPE, content_type).body(text.to_string());
    if let Some(t) = token {
        request = request.bearer_auth(t);
    }
    let response = match request.send().await {
        Ok(r) => r,
        Err(e) => return Attempt::Retry { reason: format!("{}: {e}", path.display()), after: None },
    };
    let status = response.status();
    let retry_after = response
        .headers()
        .get(reqwest::header::RETRY_AFTER)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.trim().parse::<u64>().ok())
        .map(|s| Duration::from_secs(s).min(MAX_BACKOFF));
    let body = response.text().await.unwrap_or_default();
    match status.as_u16() {
        201 => Attempt::Finished(Outcome::Done),
        200 => Attempt::Finished(Outcome::Skipped),
        408 | 429 | 502 | 503 | 504 => Attempt::Retry { reason: problem_reason(status, &body), after: retry_after },
        _ => Attempt::Finished(Outcome::Failed(problem_reason(status, &body))),
    }
}

async fn store_once(store: &AnyStore, text: &str, format: &SnapshotFormat) -> Attempt {
    let (text, format) = (text.to_string(), format.clone());
    let prepared = match tokio::task::spawn_blocking(move || ingest::prepare(text, &format, Digest::ForStorage)).await {
        Ok(Ok(p)) => p,
        Ok(Err(IngestError::Input(e))) => return Attempt::Finished(Outcome::Failed(e.to_string().replace('\n', "; "))),
        Ok(Err(IngestError::Internal(m))) => return Attempt::Finished(Outcome::Failed(m)),
        Err(e) => return Attempt::Finished(Outcome::Failed(e.to_string())),
    };
    match store.insert(prepared.record).await {
        Ok(i) if i.created => Attempt::Finished(Outcome::Done),
        Ok(_) => Attempt::Finished(Outcome::Skipped),
        Err(StoreError::Unavailable(m)) => Attempt::Retry { reason: m, after: None },
        Err(e) => Attempt::Finished(Outcome::Failed(e.to_string())),
    }
}

async fn load_file(target: &Target, path: &Path, flags: &SnapshotFlags, attempts: u32) -> Outcome {
    let text = match std::fs::read_to_string(path) {
        Ok(t) => t,
        Err(e) => return Outcome::Failed(format!("cannot read: {e}")),
    };
    let format = flags.format_of(path);
    let mut last_reason = String::new();
    for attempt in 0..attempts.max(1) {
        let result = match target {
            Target::Service { client, base, token } => {
                post_once(client, base, token.as_deref(), path, &text, &format).await
            }
            Target::Local(store) => store_once(store, &text, &format).await,
        };
        match result {
            Attempt::Finished(outcome) => return outcome,
            Attempt::Retry { reason, after } => {
                last_reason = reason;
                if attempt + 1 < attempts {
                    tokio::time::sleep(after.unwrap_or(Duration::ZERO).max(backoff(attempt))).await;
                }
            }
        }
    }
    Outcome::Failed(format!("gave up after {attempts} attempts: {last_reason}"))
}

/// Shows progress: a bar with rate and ETA on a terminal, plain lines otherwise.
struct Progress {
    bar: Option<indicatif::ProgressBar>,
    total: usize,
    started: Instant,
    last_line: Instant,
}

impl Progress {
    fn new(total: usize) -> Self {
        let bar = std::io::stderr().is_terminal().then(|| {
            let bar = indicatif::ProgressBar::new(total as u64);
            if let Ok(style) =
                indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} files  {rate}  ETA {eta}  {msg}")
            {
                // The rate to one decimal ("52.5 files/s"), not the bar's default four.
                bar.set_style(style.with_key(
                    "rate",
                    |state: &indicatif::ProgressState, w: &mut dyn std::fmt::Write| {
                        let _ = write!(w, "{:.1} files/s", state.per_sec());
                    },
                ));
            }
            bar
        });
        Self { bar, total, started: Instant::now(), last_line: Instant::now() }
    }

    fn update(&mut self, finished: usize, failed: usize) {
        if let Some(bar) = &self.bar {
            bar.set_position(finished as u64);
            if failed > 0 {
                bar.set_message(format!("{failed} failed"));
            }
            return;
        }
        if self.last_line.elapsed() >= PROGRESS_EVERY || finished == self.total {
            self.last_line = Instant::now();
            let elapsed = self.started.elapsed().as_secs_f64().max(1e-9);
            let rate = finished as f64 / elapsed;
            let eta = if rate > 0.0 { (self.total - finished) as f64 / rate } else { f64::INFINITY };
            eprintln!("backfill: {finished}/{} files, {rate:.1} files/s, ETA {eta:.0} s, {failed} failed", self.total);
        }
    }

    fn finish(&self) {
        if let Some(bar) = &self.bar {
            bar.finish_and_clear();
        }
    }
}

/// The tally of a run.
#[derive(Debug, Default)]
pub struct Summary {
    /// Stored now.
    pub done: usize,
    /// Already stored.
    pub skipped: usize,
    /// Not stored: file and reason.
    pub failed: Vec<(PathBuf, String)>,
}

/// Runs the backfill and prints the summary to `out`.
///
/// # Errors
/// [`CliError`] for bad flags or an unreadable directory, and
/// [`CliError::Incomplete`] when some files failed (listed in the failures file).
pub fn run_backfill(args: &BackfillArgs, out: &mut dyn std::io::Write) -> Result<(), CliError> {
    let files =
        snapshot_files(&args.dir).map_err(|source| CliError::Io { path: args.dir.display().to_string(), source })?;
    if args.concurrency == 0 {
        return Err(CliError::Config("--concurrency: must be at least 1".into()));
    }
    let token = args
        .token_file
        .as_ref()
        .map(|p| {
            std::fs::read_to_string(p)
                .map(|t| t.trim().to_string())
                .map_err(|source| CliError::Io { path: format!("--token-file {}", p.display()), source })
        })
        .transpose()?;
    let runtime = tokio::runtime::Runtime::new().map_err(|e| CliError::Serve(format!("runtime: {e}")))?;
    let started = Instant::now();
    let summary = runtime.block_on(async {
        let target = match &args.to {
            Some(base) => Target::Service {
                client: reqwest::Client::builder()
                    .timeout(Duration::from_secs(120))
                    .build()
                    .map_err(|e| CliError::Serve(format!("HTTP client: {e}")))?,
                base: base.clone(),
                token,
            },
            None => Target::Local(
                AnyStore::open(&args.database)
                    .await
                    .map_err(|e| CliError::Serve(format!("--database {}: {e}", redact_url(&args.database))))?,
            ),
        };
        let target = Arc::new(target);
        let limit = Arc::new(Semaphore::new(args.concurrency));
        let mut tasks = tokio::task::JoinSet::new();
        for (index, path) in files.iter().enumerate() {
            let (target, limit, path, flags, attempts) =
                (target.clone(), limit.clone(), path.clone(), args.snapshot.clone(), args.attempts);
            tasks.spawn(async move {
                let _permit = limit.acquire_owned().await;
                (index, load_file(&target, &path, &flags, attempts).await)
            });
        }
        let mut progress = Progress::new(files.len());
        let mut summary = Summary::default();
        let mut finished = 0;
        while let Some(joined) = tasks.join_next().await {
            finished += 1;
            match joined {
                Ok((_, Outcome::Done)) => summary.done += 1,
                Ok((_, Outcome::Skipped)) => summary.skipped += 1,
                Ok((index, Outcome::Failed(reason))) => summary.failed.push((files[index].clone(), reason)),
                Err(e) => summary.failed.push((PathBuf::from("?"), format!("task failed: {e}"))),
            }
            progress.update(finished, summary.failed.len());
        }
        progress.finish();
        summary.failed.sort();
        Ok::<_, CliError>(summary)
    })?;
    report(args, &summary, files.len(), started.elapsed(), out)
}

fn report(
    args: &BackfillArgs,
    summary: &Summary,
    total: usize,
    elapsed: Duration,
    out: &mut dyn std::io::Write,
) -> Result<(), CliError> {
    let io = |source| CliError::Io { path: "stdout".into(), source };
    let destination = args.to.clone().unwrap_or_else(|| redact_url(&args.database));
    writeln!(
        out,
        "backfill into {destination}: {total} files, {} done, {} skipped (already stored), {} failed, in {:.1} s",
        summary.done,
        summary.skipped,
        summary.failed.len(),
        elapsed.as_secs_f64()
    )
    .map_err(io)?;
    if summary.failed.is_empty() {
        return Ok(());
    }
    let mut listing = String::new();
    for (path, reason) in &summary.failed {
        writeln!(out, "  failed: {}: {reason}", path.display()).map_err(io)?;
        listing.push_str(&format!("{}\t{}\n", path.display(), reason.replace('\n', "; ")));
    }
    std::fs::write(&args.failures, listing)
        .map_err(|source| CliError::Io { path: args.failures.display().to_string(), source })?;
    writeln!(out, "failures listed in {}", args.failures.display()).map_err(io)?;
    Err(CliError::Incomplete(format!("{} of {total} files failed", summary.failed.len())))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn backoff_doubles_up_to_the_cap() {
        assert_eq!(backoff(0), Duration::from_millis(500));
        assert_eq!(backoff(1), Duration::from_secs(1));
        assert_eq!(backoff(20), MAX_BACKOFF);
    }

    #[test]
    fn problem_bodies_give_their_first_field_problem() {
        let body = r#"{"detail":"2 problems","errors":[{"detail":"slices[0].tau: must be positive"}]}"#;
        assert_eq!(
            problem_reason(reqwest::StatusCode::UNPROCESSABLE_ENTITY, body),
            "HTTP 422: slices[0].tau: must be positive"
        );
        assert_eq!(problem_reason(reqwest::StatusCode::BAD_REQUEST, "oops"), "HTTP 400: oops");
    }
}
