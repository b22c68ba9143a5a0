//! `logstrip serve`: typed configuration (flags, then `LOGSTRIP_*` environment
//! variables, then defaults), read once and checked before anything starts.

use super::CliError;
use crate::api::auth::{Access, Token};
use crate::api::{
    self, ConnectionLimits, ServiceSettings, DEFAULT_HEADER_TIMEOUT, DEFAULT_IDLE_TIMEOUT, DEFAULT_MAX_CONNECTIONS,
    DEFAULT_REQUEST_TIMEOUT,
};
use crate::store::{redact_url, AnyStore};
use clap::{Args, ValueEnum};
use std::net::{SocketAddr, ToSocketAddrs};
use std::path::PathBuf;
use std::time::Duration;

/// Log line format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LogFormat {
    /// Human-readable lines.
    Text,
    /// One JSON object per line.
    Json,
}

/// Flags of `logstrip serve`.
#[derive(Debug, Clone, Args)]
pub struct ServeArgs {
    /// Address to listen on.
    #[arg(long, env = "LOGSTRIP_LISTEN", default_value = "127.0.0.1:8080")]
    pub listen: String,
    /// History store: `sqlite://PATH` or `postgres://USER@HOST:PORT/DB`.
    #[arg(long, env = "LOGSTRIP_DATABASE_URL", default_value = "sqlite://./logstrip.db")]
    pub database: String,
    /// File holding the bearer token every POST must present.
    #[arg(long, env = "LOGSTRIP_TOKEN_FILE")]
    pub token_file: Option<PathBuf>,
    /// File holding a second token that allows reads only (needs --token-file).
    #[arg(long, env = "LOGSTRIP_READ_TOKEN_FILE")]
    pub read_token_file: Option<PathBuf>,
    /// Largest request body, bytes (suffixes KiB and MiB accepted).
    #[arg(long, env = "LOGSTRIP_MAX_BODY", default_value = "16MiB")]
    pub max_body: String,
    /// Longest handling of one request, seconds.
    #[arg(long, env = "LOGSTRIP_REQUEST_TIMEOUT", default_value_t = DEFAULT_REQUEST_TIMEOUT.as_secs())]
    pub request_timeout: u64,
    /// Longest time, seconds, from the first byte of a request head to its end.
    #[arg(long, env = "LOGSTRIP_HEADER_TIMEOUT", default_value_t = DEFAULT_HEADER_TIMEOUT.as_secs())]
    pub header_timeout: u64,
    /// Seconds a connection may stay open with no request in progress and no bytes moving.
    #[arg(long, env = "LOGSTRIP_IDLE_TIMEOUT", default_value_t = DEFAULT_IDLE_TIMEOUT.as_secs())]
    pub idle_timeout: u64,
    /// Most connections open at once.
    #[arg(long, env = "LOGSTRIP_MAX_CONNECTIONS", default_value_t = DEFAULT_MAX_CONNECTIONS)]
    pub max_connections: usize,
    /// Log format.
    #[arg(long, env = "LOGSTRIP_LOG_FORMAT", value_enum, default_value = "text")]
    pub log_format: LogFormat,
    /// Allow listening on a non-loopback address without a token.
    #[arg(long, env = "LOGSTRIP_INSECURE_PUBLIC")]
    pub insecure_public: bool,
}

/// Parses a byte count such as `16777216`, `512KiB` or `16MiB`.
pub fn parse_bytes(text: &str) -> Result<usize, String> {
    let t = text.trim();
    let (digits, unit) = match t.find(|c: char| !c.is_ascii_digit()) {
        Some(i) => t.split_at(i),
        None => (t, ""),
    };
    let scale = match unit.trim() {
        "" | "B" => 1,
        "KiB" => 1024,
        "MiB" => 1024 * 1024,
        other => return Err(format!("unknown unit {other:?} (use bytes, KiB or MiB)")),
    };
    let n: usize = digits.parse().map_err(|_| format!("not a byte count: {text:?}"))?;
    n.checked_mul(scale).filter(|b| *b > 0).ok_or_else(|| format!("out of range: {text:?}"))
}

fn read_token(path: &PathBuf, flag: &str) -> Result<Token, CliError> {
    let text = std::fs::read_to_string(path)
        .map_err(|source| CliError::Io { path: format!("{flag} {}", path.display()), source })?;
    Token::new(&text).map_err(|m| CliError::Config(format!("{flag} {}: {m}", path.display())))
}

/// The checked configuration.
#[derive(Debug)]
pub struct ServeConfig {
    /// Where to listen.
    pub listen: SocketAddr,
    /// Store URL.
    pub database: String,
    /// Service settings (tokens included).
    pub settings: ServiceSettings,
    /// Log format.
    pub log_format: LogFormat,
}

impl ServeConfig {
    /// Checks the flags: addresses, sizes, token files, and that a server without a
    /// token listens on loopback only unless `--insecure-public`.
    ///
    /// # Errors
    /// [`CliError::Config`] naming the flag.
    pub fn from_args(args: &ServeArgs) -> Result<Self, CliError> {
        let listen = args
            .listen
            .to_socket_addrs()
            .ok()
            .and_then(|mut a| a.next())
            .ok_or_else(|| CliError::Config(format!("--listen: not an address: {:?}", args.listen)))?;
        let max_body = parse_bytes(&args.max_body).map_err(|m| CliError::Config(format!("--max-body: {m}")))?;
        for (flag, seconds) in [
            ("--request-timeout", args.request_timeout),
            ("--header-timeout", args.header_timeout),
            ("--idle-timeout", args.idle_timeout),
        ] {
            if seconds == 0 {
                return Err(CliError::Config(format!("{flag}: must be at least 1 second")));
            }
        }
        if args.max_connections == 0 {
            return Err(CliError::Config("--max-connections: must be at least 1".into()));
        }
        let write = args.token_file.as_ref().map(|p| read_token(p, "--token-file")).transpose()?;
        let read = args.read_token_file.as_ref().map(|p| read_token(p, "--read-token-file")).transpose()?;
        if read.is_some() && write.is_none() {
            return Err(CliError::Config("--read-token-file needs --token-file (writes must be protected too)".into()));
        }
        if write.is_none() && !listen.ip().is_loopback() && !args.insecure_public {
            return Err(CliError::Config(format!(
                "--listen {listen}: without --token-file the service listens on loopback only; \
                 give a token, or --insecure-public to serve without one"
            )));
        }
        Ok(Self {
            listen,
            database: args.database.clone(),
            settings: ServiceSettings {
                access: Access { write, read },
                max_body,
                request_timeout: Duration::from_secs(args.request_timeout),
                connections: ConnectionLimits {
                    header_timeout: Duration::from_secs(args.header_timeout),
                    idle_timeout: Duration::from_secs(args.idle_timeout),
                    max_connections: args.max_connections,
                },
            },
            log_format: args.log_format,
        })
    }

    /// The warning for a service without a write token, if it has none: who can write
    /// depends on the address it listens on.
    pub fn open_access_warning(&self) -> Option<String> {
        if self.settings.access.write.is_some() {
            return None;
        }
        Some(if self.listen.ip().is_loopback() {
            format!("no token configured: any local process can write through {}", self.listen)
        } else {
            format!(
                "no token configured and --insecure-public given: anyone who can reach {} can read and write",
                self.listen
            )
        })
    }

    /// The configuration as one line, secrets left out.
    pub fn describe(&self) -> String {
        let access = &self.settings.access;
        format!(
            "listen={} database={} write_token={} read_token={} max_body={} request_timeout={}s \
             header_timeout={}s idle_timeout={}s max_connections={}",
            self.listen,
            redact_url(&self.database),
            if access.write.is_some() { "set" } else { "none" },
            if access.read.is_some() { "set" } else { "none" },
            self.settings.max_body,
            self.settings.request_timeout.as_secs(),
            self.settings.connections.header_timeout.as_secs(),
            self.settings.connections.idle_timeout.as_secs(),
            self.settings.connections.max_connections
        )
    }
}

/// Installs the log subscriber (filter from `LOGSTRIP_LOG`, default `info`).
pub fn init_logging(format: LogFormat) {
    let filter = tracing_subscriber::EnvFilter::try_from_env("LOGSTRIP_LOG")
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info"));
    // Colours only on a terminal: a log file or a pipe gets plain text.
    let colours = std::io::IsTerminal::is_terminal(&std::io::stderr());
    let builder = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr).with_ansi(colours);
    let _ = match format {
        LogFormat::Text => builder.try_init(),
        LogFormat::Json => builder.json().try_init(),
    };
}

/// Resolves on SIGINT or SIGTERM.
pub async fn termination_signal() {
    let interrupt = tokio::signal::ctrl_c();
    #[cfg(unix)]
    {
        let mut term = match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(s) => s,
            Err(_) => {
                let _ = interrupt.await;
                return;
            }
        };
        tokio::select! {
            _ = interrupt => {}
            _ = term.recv() => {}
        }
    }
    #[cfg(not(unix))]
    {
        let _ = interrupt.await;
    }
}

/// Runs the service until SIGINT or SIGTERM, then shuts down gracefully.
///
/// # Errors
/// [`CliError`] for bad flags, an unreachable store or a port in use.
pub fn run_serve(args: &ServeArgs) -> Result<(), CliError> {
    let config = ServeConfig::from_args(args)?;
    init_logging(config.log_format);
    let runtime = tokio::runtime::Runtime::new().map_err(|e| CliError::Serve(format!("runtime: {e}")))?;
    runtime.block_on(async move {
        tracing::info!(configuration = %config.describe(), "starting logstrip serve");
        if let Some(warning) = config.open_access_warning() {
            tracing::warn!("{warning}");
        }
        let store = AnyStore::open(&config.database)
            .await
            .map_err(|e| CliError::Serve(format!("--database {}: {e}", redact_url(&config.database))))?;
        let listener = tokio::net::TcpListener::bind(config.listen)
            .await
            .map_err(|e| CliError::Serve(format!("--listen {}: {e}", config.listen)))?;
        let server = api::start(listener, store, config.settings, termination_signal())
            .map_err(|e| CliError::Serve(e.to_string()))?;
        tracing::info!(address = %server.addr, "listening");
        println!("logstrip listening on http://{}", server.addr);
        server.wait().await.map_err(|e| CliError::Serve(e.to_string()))?;
        tracing::info!("stopped");
        Ok(())
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::api::DEFAULT_MAX_BODY;

    #[test]
    fn byte_counts() {
        assert_eq!(parse_bytes("16MiB").unwrap(), DEFAULT_MAX_BODY);
        assert_eq!(parse_bytes("512KiB").unwrap(), 512 * 1024);
        assert_eq!(parse_bytes("100").unwrap(), 100);
        assert!(parse_bytes("0").is_err());
        assert!(parse_bytes("12GB").is_err());
        assert!(parse_bytes("").is_err());
    }
}
