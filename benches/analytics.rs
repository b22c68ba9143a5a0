//! Criterion benches on the invented 35-expiry, 60-points-per-slice snapshot:
//! the smiles and replication alone, the rough Heston fit alone, and both.

use criterion::{criterion_group, criterion_main, Criterion};
use logstrip::analytics::analysis::{analyze, leverage_target, AnalyzeOptions};
use logstrip::analytics::calibrate::{fit_leverage, FitSpec};
use std::hint::black_box;

fn snapshot() -> logstrip::wire::ValidSnapshot {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/demo-data/kestrel50-snapshot.json");
    let text = std::fs::read_to_string(path).expect("demo snapshot present");
    logstrip::wire::parse_snapshot(&text).expect("demo snapshot valid")
}

fn benches(c: &mut Criterion) {
    let snap = snapshot();
    let no_fit = AnalyzeOptions { smile: snap.options.smile, fit: None };
    let with_fit = AnalyzeOptions { smile: snap.options.smile, fit: Some(FitSpec::default()) };
    let analysis = analyze(&snap.slices, &no_fit).expect("analysis");
    // The fit `analyze` runs, weights from the quotes' spreads included.
    let target = leverage_target(&snap.slices, &analysis.slices);
    c.bench_function("smiles_and_replication_35x60", |b| b.iter(|| analyze(black_box(&snap.slices), &no_fit)));
    c.bench_function("rough_heston_fit_35", |b| b.iter(|| fit_leverage(black_box(&target), &FitSpec::default())));
    c.bench_function("full_analyze_35x60", |b| b.iter(|| analyze(black_box(&snap.slices), &with_fit)));
}

criterion_group!(analytics, benches);
criterion_main!(analytics);
