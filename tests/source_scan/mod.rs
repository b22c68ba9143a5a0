//! Reading the project's own sources for the layering checks: the Rust files under a
//! folder, and their lines outside test modules.

use std::path::{Path, PathBuf};

/// Every `.rs` file under `dir`, in subfolders too.
pub fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let entries = std::fs::read_dir(dir).expect("source directory readable");
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
pub fn lines_outside_tests(text: &str) -> Vec<(usize, &str)> {
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
