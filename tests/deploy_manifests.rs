//! The files under `deploy/` checked against the code, without a container engine:
//! every YAML file parses (multi-document files too), every port the service is
//! reached on is the port `serve --listen` defaults to, every `LOGSTRIP_*` variable
//! named is one the binary reads, and the Kubernetes probes point at `/readyz` and
//! `/healthz`.
//!
//! The port and the variable names come from the binary itself (`logstrip serve
//! --help`, where clap prints each flag's `[env: NAME=]` and `[default: ...]`), so a
//! renamed flag or a new default port fails here until the deployment follows.

use serde::Deserialize;
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};
use std::process::Command;
use yaml_serde::Value;

/// Variables the service reads besides its flags' env equivalents: the log filter
/// (`init_logging` in src/cli/serve.rs).
const ENV_READ_OUTSIDE_FLAGS: &[&str] = &["LOGSTRIP_LOG"];

/// Prefix of every variable the service reads.
const ENV_PREFIX: &str = "LOGSTRIP_";

/// Route a readiness probe must use: answers 200 only while the store answers
/// (`readyz` in src/api/handlers.rs).
const READINESS_PATH: &str = "/readyz";
/// Route a liveness probe must use: answers 200 while the process serves
/// (`healthz` in src/api/handlers.rs); it does not depend on the store, so a
/// database outage does not restart every replica.
const LIVENESS_PATH: &str = "/healthz";

fn deploy_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("deploy")
}

/// A path as shown in messages: relative to the repository root.
fn shown(path: &Path) -> String {
    path.strip_prefix(env!("CARGO_MANIFEST_DIR")).unwrap_or(path).display().to_string()
}

/// Every file under `dir`, recursively, sorted.
fn files_under(dir: &Path) -> Result<Vec<PathBuf>, String> {
    let mut files = Vec::new();
    let mut pending = vec![dir.to_path_buf()];
    while let Some(current) = pending.pop() {
        let cannot_list = |e: std::io::Error| format!("{}: cannot list: {e}", shown(&current));
        for entry in std::fs::read_dir(&current).map_err(cannot_list)? {
            let path = entry.map_err(cannot_list)?.path();
            if path.is_dir() {
                pending.push(path);
            } else {
                files.push(path);
            }
        }
    }
    files.sort();
    Ok(files)
}

fn read_text(path: &Path) -> Result<String, String> {
    std::fs::read_to_string(path).map_err(|e| format!("{}: cannot read: {e}", shown(path)))
}

fn is_yaml(path: &Path) -> bool {
    matches!(path.extension().and_then(|e| e.to_str()), Some("yaml" | "yml"))
}

fn is_container_file(path: &Path) -> bool {
    matches!(path.file_name().and_then(|n| n.to_str()), Some("Containerfile" | "Dockerfile"))
}

/// Every document of a YAML stream, `<<` merge keys applied; the first error stops.
fn parse_yaml_documents(text: &str) -> Result<Vec<Value>, yaml_serde::Error> {
    let mut documents = Vec::new();
    for document in yaml_serde::Deserializer::from_str(text) {
        let mut value = Value::deserialize(document)?;
        value.apply_merge()?;
        documents.push(value);
    }
    Ok(documents)
}

/// Every YAML file under deploy/ with its documents; an error names the file.
fn yaml_files() -> Result<Vec<(String, Vec<Value>)>, String> {
    let mut files = Vec::new();
    for path in files_under(&deploy_dir())?.into_iter().filter(|p| is_yaml(p)) {
        let documents =
            parse_yaml_documents(&read_text(&path)?).map_err(|e| format!("{}: not valid YAML: {e}", shown(&path)))?;
        files.push((shown(&path), documents));
    }
    if files.is_empty() {
        return Err("no YAML file under deploy/".into());
    }
    Ok(files)
}

/// `logstrip serve --help` with no `LOGSTRIP_*` variable set (clap would print
/// their values after `[env: NAME=`).
fn serve_help() -> String {
    let mut command = Command::new(env!("CARGO_BIN_EXE_logstrip"));
    command.args(["serve", "--help"]);
    for (name, _) in std::env::vars_os() {
        if name.to_string_lossy().starts_with(ENV_PREFIX) {
            command.env_remove(name);
        }
    }
    let out = command.output().expect("logstrip serve --help runs");
    assert!(out.status.success(), "logstrip serve --help failed: {}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout).expect("help text is UTF-8")
}

/// The port of the default `--listen` address, from the help text.
fn default_port(help: &str) -> Result<u64, String> {
    let (_, after_flag) = help.split_once("--listen ").ok_or("serve --help does not document --listen")?;
    let (_, after_default) = after_flag.split_once("[default: ").ok_or("serve --help gives --listen no default")?;
    let address = after_default.split(']').next().unwrap_or_default();
    port_of_address(address).ok_or_else(|| format!("serve --help: default --listen {address:?} has no port"))
}

/// Every variable the service reads: the `[env: NAME=]` of each flag, plus those read
/// outside the flags.
fn env_names_read(help: &str) -> BTreeSet<String> {
    let mut names: BTreeSet<String> =
        help.split("[env: ").skip(1).filter_map(|rest| rest.split(['=', ']']).next()).map(str::to_string).collect();
    assert!(names.contains("LOGSTRIP_LISTEN"), "serve --help lists no [env: LOGSTRIP_LISTEN=]: {names:?}");
    names.extend(ENV_READ_OUTSIDE_FLAGS.iter().map(|n| n.to_string()));
    names
}

/// The port at the end of `HOST:PORT` (quotes and surrounding blanks ignored).
fn port_of_address(address: &str) -> Option<u64> {
    let address = address.trim().trim_matches(['"', '\'']);
    address.rsplit_once(':').and_then(|(_, port)| port.parse().ok())
}

/// Every `LOGSTRIP_NAME` in a text, as whole words (`LOGSTRIP_*` patterns skipped).
fn env_names_in(text: &str) -> BTreeSet<String> {
    let is_word = |c: char| c.is_ascii_alphanumeric() || c == '_';
    let mut names = BTreeSet::new();
    for (start, _) in text.match_indices(ENV_PREFIX) {
        if text[..start].chars().next_back().is_some_and(is_word) {
            continue;
        }
        let rest = &text[start + ENV_PREFIX.len()..];
        let end =
            rest.find(|c: char| !(c.is_ascii_uppercase() || c.is_ascii_digit() || c == '_')).unwrap_or(rest.len());
        if end > 0 {
            names.insert(format!("{ENV_PREFIX}{}", &rest[..end]));
        }
    }
    names
}

/// What the YAML files say about ports, probes and the listen address.
#[derive(Default)]
struct Found {
    /// `containerPort` values, with the file.
    container_ports: Vec<(String, Value)>,
    /// Named container ports: name -> number.
    port_names: BTreeMap<String, Value>,
    /// `targetPort` values (numbers or port names).
    target_ports: Vec<(String, Value)>,
    /// `expose` entries (compose).
    exposed: Vec<(String, Value)>,
    /// `(file, probe kind, probe)` for readiness, liveness and startup probes.
    probes: Vec<(String, String, Value)>,
    /// Values given to `LOGSTRIP_LISTEN`.
    listen: Vec<(String, String)>,
}

impl Found {
    fn visit(&mut self, file: &str, value: &Value) {
        match value {
            Value::Mapping(mapping) => {
                if let (Some(name), Some(port)) =
                    (mapping.get("name").and_then(Value::as_str), mapping.get("containerPort"))
                {
                    self.port_names.insert(name.to_string(), port.clone());
                }
                // Kubernetes env list entry: {name: LOGSTRIP_LISTEN, value: ...}.
                if mapping.get("name").and_then(Value::as_str) == Some("LOGSTRIP_LISTEN") {
                    if let Some(listen) = mapping.get("value").and_then(Value::as_str) {
                        self.listen.push((file.to_string(), listen.to_string()));
                    }
                }
                for (key, child) in mapping {
                    match key.as_str() {
                        Some("containerPort") => self.container_ports.push((file.to_string(), child.clone())),
                        Some("targetPort") => self.target_ports.push((file.to_string(), child.clone())),
                        Some("expose") => {
                            for entry in child.as_sequence().into_iter().flatten() {
                                self.exposed.push((file.to_string(), entry.clone()));
                            }
                        }
                        Some(kind @ ("readinessProbe" | "livenessProbe" | "startupProbe")) => {
                            self.probes.push((file.to_string(), kind.to_string(), child.clone()));
                        }
                        // ConfigMap data or compose environment as a mapping.
                        Some("LOGSTRIP_LISTEN") => {
                            let listen = child.as_str().map(str::to_string).unwrap_or_else(|| format!("{child:?}"));
                            self.listen.push((file.to_string(), listen));
                        }
                        _ => {}
                    }
                    self.visit(file, child);
                }
            }
            Value::Sequence(items) => {
                for item in items {
                    // Compose environment as a list: "LOGSTRIP_LISTEN=...".
                    if let Some(listen) = item.as_str().and_then(|s| s.strip_prefix("LOGSTRIP_LISTEN=")) {
                        self.listen.push((file.to_string(), listen.to_string()));
                    }
                    self.visit(file, item);
                }
            }
            Value::Tagged(tagged) => self.visit(file, &tagged.value),
            Value::Null | Value::Bool(_) | Value::Number(_) | Value::String(_) => {}
        }
    }

    /// The port number a `port`/`targetPort` value stands for: a number, a number in
    /// a string, or the name of a container port.
    fn resolve(&self, port: &Value) -> Option<u64> {
        match port {
            Value::Number(n) => n.as_u64(),
            Value::String(s) => {
                s.trim().parse().ok().or_else(|| self.port_names.get(s.as_str()).and_then(Value::as_u64))
            }
            _ => None,
        }
    }
}

fn found_in_yaml() -> Result<Found, String> {
    let mut found = Found::default();
    for (file, documents) in yaml_files()? {
        for document in &documents {
            found.visit(&file, document);
        }
    }
    Ok(found)
}

#[test]
fn every_yaml_file_parses() -> Result<(), String> {
    for (file, documents) in yaml_files()? {
        assert!(!documents.is_empty(), "{file}: no YAML document");
        for (i, document) in documents.iter().enumerate() {
            assert!(document.is_mapping(), "{file}: document {} is not a mapping: {document:?}", i + 1);
        }
    }
    Ok(())
}

#[test]
fn the_service_port_is_the_default_listen_port_everywhere() -> Result<(), String> {
    let port = default_port(&serve_help())?;
    let found = found_in_yaml()?;

    assert!(!found.container_ports.is_empty(), "no containerPort in deploy/");
    for (file, value) in &found.container_ports {
        assert_eq!(value.as_u64(), Some(port), "{file}: containerPort {value:?}, the service listens on {port}");
    }
    assert!(!found.target_ports.is_empty(), "no Service targetPort in deploy/");
    for (file, value) in &found.target_ports {
        assert_eq!(found.resolve(value), Some(port), "{file}: targetPort {value:?} is not port {port}");
    }
    for (file, value) in &found.exposed {
        assert_eq!(found.resolve(value), Some(port), "{file}: expose {value:?} is not port {port}");
    }
    assert!(!found.listen.is_empty(), "no LOGSTRIP_LISTEN in the YAML files under deploy/");
    for (file, listen) in &found.listen {
        assert_eq!(port_of_address(listen), Some(port), "{file}: LOGSTRIP_LISTEN={listen} is not on port {port}");
    }

    let container_files: Vec<PathBuf> =
        files_under(&deploy_dir())?.into_iter().filter(|p| is_container_file(p)).collect();
    assert!(!container_files.is_empty(), "no Containerfile or Dockerfile under deploy/");
    for path in container_files {
        let file = shown(&path);
        let text = read_text(&path)?;
        let (mut exposes, mut listens) = (0, 0);
        for line in text.lines().map(str::trim) {
            if let Some(ports) = line.strip_prefix("EXPOSE ") {
                for entry in ports.split_whitespace() {
                    exposes += 1;
                    let number = entry.split('/').next().unwrap_or_default();
                    assert_eq!(number.parse::<u64>().ok(), Some(port), "{file}: EXPOSE {entry}, expected {port}");
                }
            }
            if line.starts_with("ENV ") {
                if let Some((_, value)) = line.split_once("LOGSTRIP_LISTEN=") {
                    listens += 1;
                    let address = value.split_whitespace().next().unwrap_or_default();
                    assert_eq!(
                        port_of_address(address),
                        Some(port),
                        "{file}: ENV LOGSTRIP_LISTEN={address} is not on port {port}"
                    );
                }
            }
        }
        assert!(exposes > 0, "{file}: no EXPOSE");
        assert!(listens > 0, "{file}: no ENV LOGSTRIP_LISTEN=");
    }

    let nginx = deploy_dir().join("nginx.conf");
    let file = shown(&nginx);
    let upstreams: Vec<String> = read_text(&nginx)?
        .lines()
        .filter_map(|line| line.trim().strip_prefix("server "))
        .filter_map(|rest| rest.split_whitespace().next())
        .map(|address| address.trim_end_matches(';').to_string())
        .filter(|address| address.contains(':'))
        .collect();
    assert!(!upstreams.is_empty(), "{file}: no upstream `server HOST:PORT`");
    for address in upstreams {
        assert_eq!(port_of_address(&address), Some(port), "{file}: upstream {address} is not on port {port}");
    }
    Ok(())
}

#[test]
fn every_environment_variable_named_is_read_by_the_service() -> Result<(), String> {
    let known = env_names_read(&serve_help());
    let mut checked = 0;
    for path in files_under(&deploy_dir())? {
        if path.extension().and_then(|e| e.to_str()) == Some("md") {
            continue;
        }
        let file = shown(&path);
        for name in env_names_in(&read_text(&path)?) {
            checked += 1;
            assert!(known.contains(&name), "{file}: {name} is not read by logstrip serve (it reads {known:?})");
        }
    }
    assert!(checked > 0, "no LOGSTRIP_* variable named under deploy/");
    Ok(())
}

#[test]
fn probes_point_at_the_probe_routes() -> Result<(), String> {
    let port = default_port(&serve_help())?;
    let found = found_in_yaml()?;
    for expected in ["readinessProbe", "livenessProbe"] {
        assert!(found.probes.iter().any(|(_, kind, _)| kind == expected), "no {expected} in deploy/");
    }
    for (file, kind, probe) in &found.probes {
        let http = probe.get("httpGet").unwrap_or_else(|| panic!("{file}: {kind} is not an httpGet probe"));
        let path = http.get("path").and_then(Value::as_str).unwrap_or_else(|| panic!("{file}: {kind} has no path"));
        let allowed: &[&str] = match kind.as_str() {
            "readinessProbe" => &[READINESS_PATH],
            "livenessProbe" => &[LIVENESS_PATH],
            _ => &[READINESS_PATH, LIVENESS_PATH],
        };
        assert!(allowed.contains(&path), "{file}: {kind} path {path}, expected one of {allowed:?}");
        let probe_port = http.get("port").unwrap_or_else(|| panic!("{file}: {kind} has no port"));
        assert_eq!(found.resolve(probe_port), Some(port), "{file}: {kind} port {probe_port:?} is not port {port}");
    }
    Ok(())
}

#[test]
fn env_names_are_found_as_whole_words() {
    let names =
        env_names_in("ENV LOGSTRIP_LISTEN=0.0.0.0:8080 X_LOGSTRIP_OTHER=1 ${LOGSTRIP_LOG} LOGSTRIP_* logstrip_token");
    let expected: BTreeSet<String> = ["LOGSTRIP_LISTEN", "LOGSTRIP_LOG"].iter().map(|n| n.to_string()).collect();
    assert_eq!(names, expected);
}
