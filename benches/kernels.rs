//! The hand-written kernels kept over a crate, and why: each one against its crate over
//! the arguments the analysis gives it, and the whole analysis of a 35 x 60 snapshot
//! built once with the hand kernels and once with the crates in their place.
//!
//! ```sh
//! cargo bench --bench kernels                            # hand kernels
//! cargo bench --bench kernels --features crate-kernels   # exp and erfcx from the crates
//! ```
//!
//! The second run's `whole_analysis` line reports its change against the first (criterion
//! keeps the last run as the baseline). Wall time moves by 20 to 30% on a shared machine; the
//! figures quoted at the top of `numerics/exp.rs` and `numerics/erfcx.rs` are instruction
//! counts of `logstrip bench` under callgrind, built with and without the feature
//! (DEVELOPERS.md, "Benchmarks and profiling").

use criterion::{criterion_group, criterion_main, Criterion};
use logstrip::analytics::analysis::{analyze, AnalyzeOptions};
use logstrip::analytics::calibrate::FitSpec;
use logstrip::analytics::numerics::erfcx::erfcx_nonnegative;
use logstrip::analytics::numerics::exp::exp;
use std::hint::black_box;
use std::path::Path;

/// `n` points spread evenly over `[lo, hi]`.
fn spread(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    (0..n).map(|i| lo + (hi - lo) * i as f64 / (n - 1) as f64).collect()
}

/// The whole analysis (smiles, replication, rough Heston fit) of the 35 x 60 tuning set.
fn whole_analysis(c: &mut Criterion) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/smile_sets/tuning/02_grid_35x60.json");
    let text = std::fs::read_to_string(&path).expect("35 x 60 snapshot readable");
    let snap = logstrip::wire::parse_snapshot(&text).expect("snapshot valid");
    let options = AnalyzeOptions { smile: snap.options.smile, fit: Some(FitSpec::default()) };
    let mut group = c.benchmark_group("whole_analysis");
    group.sample_size(20);
    let kernels = if cfg!(feature = "crate-kernels") { "crate_kernels" } else { "hand_kernels" };
    // One name for both builds, so that criterion compares the second run with the first.
    group.bench_function("grid_35x60", |b| b.iter(|| analyze(black_box(&snap.slices), &options)));
    println!("whole_analysis/grid_35x60 built with the {kernels}");
    group.finish();
}

/// `exp` against `f64::exp` (the C library) and `libm::exp` on `[-40, 2]`: the Black
/// price's Gaussian factor `exp(-x^2)` (`x^2` up to about 40 in the wings), the
/// replication's change of variable and `e^-|k|`, the leverage model's `t^a`.
fn exp_kernel(c: &mut Criterion) {
    let xs = spread(-40.0, 2.0, 1024);
    let mut group = c.benchmark_group("exp_1024_points");
    group.bench_function("hand", |b| b.iter(|| black_box(&xs).iter().map(|&x| exp(x)).sum::<f64>()));
    group.bench_function("f64_exp", |b| b.iter(|| black_box(&xs).iter().map(|&x| x.exp()).sum::<f64>()));
    group.bench_function("libm_exp", |b| b.iter(|| black_box(&xs).iter().map(|&x| libm::exp(x)).sum::<f64>()));
    group.finish();
}

/// `erfcx` on `[0, 10]` (the Black price's `d1 / sqrt 2` and `-d2 / sqrt 2`, up to about 9
/// in the wings) against the `errorfunctions` crate.
fn erfcx_kernel(c: &mut Criterion) {
    use errorfunctions::RealErrorFunctions;
    let xs = spread(0.0, 10.0, 1024);
    let mut group = c.benchmark_group("erfcx_1024_points");
    group.bench_function("hand", |b| b.iter(|| black_box(&xs).iter().map(|&x| erfcx_nonnegative(x)).sum::<f64>()));
    group.bench_function("errorfunctions", |b| b.iter(|| black_box(&xs).iter().map(|&x| x.erfcx()).sum::<f64>()));
    group.finish();
}

criterion_group!(kernels, whole_analysis, exp_kernel, erfcx_kernel);
criterion_main!(kernels);
