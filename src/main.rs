//! The `logstrip` command: parses the command line and hands over to `logstrip::cli`.

use clap::{Parser, Subcommand};
use logstrip::cli::{self, CliError, Status};
use std::path::PathBuf;
use std::process::ExitCode;

/// Model-free variance, gamma and leverage swap term structures from option smiles,
/// with a rough Heston fit to the leverage swaps.
#[derive(Parser)]
#[command(name = "logstrip", version, about)]
struct Args {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Analyse a snapshot of smiles: swap term structures, quality flags, model fit.
    Analyze {
        /// Snapshot file, JSON or CSV (`-` for standard input).
        #[arg(long, short)]
        input: PathBuf,
        #[command(flatten)]
        snapshot: cli::SnapshotFlags,
        /// Also draw the term structures into this SVG file.
        #[arg(long)]
        svg: Option<PathBuf>,
        /// Indent the JSON output.
        #[arg(long)]
        pretty: bool,
    },
    /// Value a book of variance, gamma and leverage swaps against a snapshot.
    Value {
        /// Book file (`{"positions": [...]}`).
        #[arg(long)]
        book: PathBuf,
        /// Snapshot file, JSON or CSV.
        #[arg(long)]
        snapshot: PathBuf,
        /// An earlier snapshot file: also explain each position's change of value since it.
        #[arg(long)]
        since: Option<PathBuf>,
        #[command(flatten)]
        snapshot_flags: cli::SnapshotFlags,
        /// Indent the JSON output.
        #[arg(long)]
        pretty: bool,
    },
    /// Realized variance from daily closes (CSV with a `close` column, or JSON).
    Realized {
        /// Closes file.
        #[arg(long)]
        closes: PathBuf,
        /// Returns per year (default 252).
        #[arg(long)]
        annualization: Option<f64>,
        /// Indent the JSON output.
        #[arg(long)]
        pretty: bool,
    },
    /// Fit the model to given variance and gamma (or leverage) swap levels.
    Fit {
        /// Swap-levels JSON file (`-` for standard input).
        #[arg(long, short)]
        input: PathBuf,
        /// Indent the JSON output.
        #[arg(long)]
        pretty: bool,
    },
    /// Load the invented demo day, show how close the fits came to the truth, and serve.
    Demo(cli::demo::DemoArgs),
    /// Load every snapshot file under a directory into the store or a running service.
    Backfill(cli::backfill::BackfillArgs),
    /// Serve the HTTP API, keeping every analysis in the history store.
    Serve(cli::serve::ServeArgs),
    /// Print the service's OpenAPI document.
    Openapi,
    /// Time the analysis and the fit of a set of snapshots in-process.
    Bench {
        /// Snapshot file (JSON or CSV), or a directory whose `*.json` (not `*.truth.json`)
        /// and `*.csv` files are snapshots; repeat for more.
        #[arg(long, short, required = true)]
        input: Vec<PathBuf>,
        /// Number of runs.
        #[arg(long, default_value_t = 200)]
        runs: usize,
        #[command(flatten)]
        snapshot: cli::SnapshotFlags,
    },
}

fn main() -> ExitCode {
    let args = Args::parse();
    let mut stdout = std::io::stdout().lock();
    let result: Result<(), CliError> = match args.command {
        Command::Analyze { input, snapshot, svg, pretty } => {
            cli::run_analyze(&input, &snapshot, svg.as_deref(), pretty, &mut stdout)
        }
        Command::Value { book, snapshot, since, snapshot_flags, pretty } => {
            cli::run_value(&book, &snapshot, since.as_deref(), &snapshot_flags, pretty, &mut stdout)
        }
        Command::Realized { closes, annualization, pretty } => {
            cli::run_realized(&closes, annualization, pretty, &mut stdout)
        }
        Command::Fit { input, pretty } => cli::run_fit(&input, pretty, &mut stdout),
        Command::Bench { input, runs, snapshot } => cli::bench::run_bench(&input, runs, &snapshot, &mut stdout),
        Command::Serve(args) => {
            drop(stdout);
            cli::serve::run_serve(&args)
        }
        Command::Openapi => cli::run_openapi(&mut stdout),
        Command::Demo(args) => cli::demo::run_demo(&args, &mut stdout),
        Command::Backfill(args) => cli::backfill::run_backfill(&args, &mut stdout),
    };
    match result {
        Ok(()) => ExitCode::from(Status::Ok as u8),
        // The reader of standard output went away (`logstrip analyze ... | head`): it
        // asked for no more, which is not an error worth a message.
        Err(CliError::Io { source, .. }) if source.kind() == std::io::ErrorKind::BrokenPipe => {
            ExitCode::from(Status::Ok as u8)
        }
        Err(e) => {
            eprintln!("{e}");
            ExitCode::from(e.status() as u8)
        }
    }
}
