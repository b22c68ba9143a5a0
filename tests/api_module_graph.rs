//! The service's modules depend on each other in one direction only. Under `src/api`,
//! `mod.rs` wires the modules together and no module uses an item of it; among the
//! other modules the uses (`super::name`, `crate::api::name`) form no cycle, so each
//! can be read knowing only the ones it names. A layering rule of this project
//! (DEVELOPERS.md, Layers), checked on the source text outside test modules.

mod source_scan;

use source_scan::{lines_outside_tests, rust_files};
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// A module's uses of its siblings; `Err` lists its uses of items of `mod.rs`.
type Uses = BTreeMap<String, BTreeSet<String>>;

/// The sibling modules each module names in code (comments and doc links left out),
/// and every line that names an item of `mod.rs` instead of a sibling module.
fn uses(sources: &[(String, String)]) -> (Uses, Vec<String>) {
    let modules: BTreeSet<&str> = sources.iter().map(|(name, _)| name.as_str()).filter(|n| *n != "mod").collect();
    let mut graph = Uses::new();
    let mut of_root = Vec::new();
    for (name, text) in sources.iter().filter(|(name, _)| name != "mod") {
        let named = graph.entry(name.clone()).or_default();
        for (number, line) in lines_outside_tests(text) {
            let code = line.split("//").next().unwrap_or("");
            for prefix in ["super::", "crate::api::"] {
                for (at, _) in code.match_indices(prefix) {
                    let rest = &code[at + prefix.len()..];
                    let used: String = rest.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect();
                    let is_module = modules.contains(used.as_str());
                    if is_module && used != *name {
                        named.insert(used);
                    } else if !is_module && !used.is_empty() {
                        of_root.push(format!("{name}.rs:{}: {}", number + 1, line.trim()));
                    }
                }
            }
        }
    }
    (graph, of_root)
}

/// A cycle of `graph` as the modules along it (first repeated last), if there is one.
fn cycle(graph: &Uses) -> Option<Vec<String>> {
    fn visit(node: &str, graph: &Uses, path: &mut Vec<String>, done: &mut BTreeSet<String>) -> Option<Vec<String>> {
        if let Some(start) = path.iter().position(|n| n == node) {
            let mut found = path[start..].to_vec();
            found.push(node.to_string());
            return Some(found);
        }
        if done.contains(node) {
            return None;
        }
        path.push(node.to_string());
        for next in graph.get(node).into_iter().flatten() {
            if let Some(found) = visit(next, graph, path, done) {
                return Some(found);
            }
        }
        path.pop();
        done.insert(node.to_string());
        None
    }
    let mut done = BTreeSet::new();
    graph.keys().find_map(|node| visit(node, graph, &mut Vec::new(), &mut done))
}

#[test]
fn api_modules_form_no_cycle() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("src/api");
    let mut files = Vec::new();
    rust_files(&root, &mut files);
    let sources: Vec<(String, String)> = files
        .iter()
        .map(|f| {
            let name = f.file_stem().and_then(|s| s.to_str()).expect("file name").to_string();
            (name, std::fs::read_to_string(f).expect("source readable"))
        })
        .collect();
    assert!(sources.len() > 10, "expected the service sources under {}, found {}", root.display(), sources.len());
    let (graph, of_root) = uses(&sources);
    assert!(of_root.is_empty(), "modules under src/api use items of mod.rs:\n{}", of_root.join("\n"));
    assert_eq!(cycle(&graph), None, "modules under src/api use each other in a cycle: {graph:?}");
}

#[test]
fn the_check_finds_a_cycle_and_a_use_of_the_root() {
    // Three modules in a cycle through a path attribute and an import; doc links, a
    // comment and the test module do not count; `super::AppState` is an item of mod.rs.
    let module = |name: &str, text: &str| (name.to_string(), text.to_string());
    let sources = vec![
        module("mod", "pub mod a;\npub mod b;\npub mod c;\n"),
        module("a", "//! See [`super::c`].\nuse super::b::thing;\n"),
        module("b", "#[utoipa::path(x)]\nfn f() { crate::api::c::g(); }\n// super::a is named only here\n"),
        module("c", "use super::a;\nuse super::AppState;\n#[cfg(test)]\nmod tests {\n    use super::super::b;\n}\n"),
    ];
    let (graph, of_root) = uses(&sources);
    assert_eq!(of_root, vec!["c.rs:2: use super::AppState;".to_string()]);
    let expected: Vec<String> = ["a", "b", "c", "a"].map(String::from).to_vec();
    assert_eq!(cycle(&graph), Some(expected));
    let mut broken = graph.clone();
    broken.entry("c".into()).or_default().remove("a");
    assert_eq!(cycle(&broken), None);
}
