//! The analytics layer stays pure: numbers in, numbers out. No file under
//! `src/analytics` may use the HTTP, database, async or serialisation crates, or
//! the file system and network, outside its `#[cfg(test)]` module (tests may read
//! fixtures). A layering rule of this project (DEVELOPERS.md, Layers), checked on the
//! source text.

mod source_scan;

use source_scan::{lines_outside_tests, rust_files};
use std::path::Path;

/// Paths that mark a dependency the analytics must not have, with what each means
/// (crate paths with their `::`, so that a word such as "hypergeometric" passes).
const FORBIDDEN: [(&str, &str); 10] = [
    ("axum::", "HTTP"),
    ("hyper::", "HTTP"),
    ("tower::", "HTTP"),
    ("reqwest::", "HTTP"),
    ("sqlx::", "database"),
    ("tokio::", "async runtime"),
    ("async fn", "async code"),
    ("serde", "serialisation"),
    ("std::fs", "file system"),
    ("std::net", "network"),
];

#[test]
fn analytics_uses_no_http_database_async_or_serde() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("src/analytics");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    assert!(files.len() > 20, "expected the analytics sources under {}, found {}", root.display(), files.len());
    let mut offences = Vec::new();
    for file in &files {
        let text = std::fs::read_to_string(file).expect("source readable");
        for (number, line) in lines_outside_tests(&text) {
            let code = line.split("//").next().unwrap_or("");
            for (word, what) in FORBIDDEN {
                if code.contains(word) {
                    offences.push(format!("{}:{}: {what} ({word}): {}", file.display(), number + 1, line.trim()));
                }
            }
        }
    }
    assert!(offences.is_empty(), "src/analytics must stay pure:\n{}", offences.join("\n"));
}

#[test]
fn the_check_catches_an_offending_line() {
    // The scan's own logic on a sample: an import counts, also after a test module;
    // a comment, a word that merely begins like a crate, and the test module do not.
    let sample = "use tokio::task;\n// serde is mentioned here only\nfn hypergeometric() {}\n\
                  #[cfg(test)]\nmod tests {\n    fn t() { let _ = serde_json::json!({}); }\n}\n\
                  fn after() -> Option<std::fs::File> { None }\n";
    let hits: Vec<&str> = lines_outside_tests(sample)
        .into_iter()
        .map(|(_, line)| line)
        .filter(|line| {
            let code = line.split("//").next().unwrap_or("");
            FORBIDDEN.iter().any(|(word, _)| code.contains(word))
        })
        .collect();
    assert_eq!(hits, vec!["use tokio::task;", "fn after() -> Option<std::fs::File> { None }"]);
}
