//! Criterion benches over a set of snapshots: the invented demo day (35 expiries, 60
//! quotes each, bid/ask) and every snapshot of the tuning smile sets
//! (`tests/fixtures/smile_sets/tuning/`: dense, 35 x 60, sparse, from prices, noisy
//! with and without bid/ask, stale quotes, rough Heston, flat, a broken expiry), plus
//! `tests/fixtures/bench_sets/` (70 irregular expiries; a positive skew, where the
//! leverage model's Mittag-Leffler argument is positive). Per snapshot: the smiles and replication alone, the rough Heston fit alone, and both.
//! The README reports the slowest snapshot.

use criterion::{criterion_group, criterion_main, Criterion};
use logstrip::analytics::analysis::{analyze, leverage_target, AnalyzeOptions};
use logstrip::analytics::calibrate::{fit_leverage, FitSpec};
use std::hint::black_box;
use std::path::{Path, PathBuf};

/// The snapshots benchmarked, with a short name each.
fn snapshots() -> Vec<(String, PathBuf)> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut out = vec![("demo".to_string(), root.join("demo-data/kestrel50-snapshot.json"))];
    let dir = root.join("tests/fixtures/smile_sets/tuning");
    let mut sets: Vec<PathBuf> = std::fs::read_dir(&dir)
        .expect("tuning smile sets present")
        .map(|entry| entry.expect("directory entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "json") && !p.to_string_lossy().ends_with(".truth.json"))
        .collect();
    sets.sort();
    // The two extra benchmark snapshots: 70 irregular expiries, and rho nu > lambda.
    for name in ["70_irregular_expiries", "positive_skew"] {
        sets.push(root.join(format!("tests/fixtures/bench_sets/{name}.json")));
    }
    for path in sets {
        let name = path.file_stem().and_then(|s| s.to_str()).unwrap_or("set").to_string();
        out.push((name, path));
    }
    out
}

fn benches(c: &mut Criterion) {
    for (name, path) in snapshots() {
        let text = std::fs::read_to_string(&path).expect("snapshot readable");
        let snap = logstrip::wire::parse_snapshot(&text).expect("snapshot valid");
        let no_fit = AnalyzeOptions { smile: snap.options.smile, fit: None };
        let with_fit = AnalyzeOptions { smile: snap.options.smile, fit: Some(FitSpec::default()) };
        let analysis = analyze(&snap.slices, &no_fit).expect("analysis");
        // The fit `analyze` runs, weights from the quotes' spreads included.
        let target = leverage_target(&snap.slices, &analysis.slices);
        let mut group = c.benchmark_group(name);
        group.sample_size(20);
        group.bench_function("smiles_and_replication", |b| b.iter(|| analyze(black_box(&snap.slices), &no_fit)));
        group.bench_function("rough_heston_fit", |b| b.iter(|| fit_leverage(black_box(&target), &FitSpec::default())));
        group.bench_function("full_analyze", |b| b.iter(|| analyze(black_box(&snap.slices), &with_fit)));
        group.finish();
    }
}

criterion_group!(analytics, benches);
criterion_main!(analytics);
