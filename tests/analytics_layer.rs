//! The analytics layer stays pure: numbers in, numbers out. No file under
//! `src/analytics` may use the HTTP, database, async or serialisation crates, or
//! the file system and network, outside its `#[cfg(test)]` module (tests may read
//! fixtures). A layering rule of this project (DEVELOPERS.md, Layers), checked on the
//! source text.

use std::path::{Path, PathBuf};

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

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let entries = std::fs::read_dir(dir).expect("analytics source directory readable");
    for entry in entries {
        let path = entry.expect("directory entry").path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The lines of `text` (with their 0-based numbers) outside every item marked
/// `#[cfg(test)]`: from the attribute to the brace that closes the item's first
/// opening brace (braces in strings and comments are not expected in this code).
fn lines_outside_tests(text: &str) -> Vec<(usize, &str)> {
    let mut out = Vec::new();
    let mut skipping = false;
    let mut depth = 0i64;
    let mut opened = false;
    for (number, line) in text.lines().enumerate() {
        if !skipping && line.trim_start().starts_with("#[cfg(test)]") {
            (skipping, depth, opened) = (true, 0, false);
            continue;
        }
        if skipping {
            for c in line.chars() {
                match c {
                    '{' => {
                        depth += 1;
                        opened = true;
                    }
                    '}' => depth -= 1,
                    _ => {}
                }
            }
            // An item without braces (`#[cfg(test)] use ...;`) ends at its semicolon.
            if (opened && depth <= 0) || (!opened && line.trim_end().ends_with(';')) {
                skipping = false;
            }
            continue;
        }
        out.push((number, line));
    }
    out
}

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
