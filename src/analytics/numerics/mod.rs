//! Generic numerical kernels, apart from the finance: special functions, polynomial and
//! batched sums, quadrature, a smoothing spline, a bounded least-squares solver. Each file
//! names the reference it follows. Nothing here knows about options or swaps.

pub mod batched;
pub mod digamma;
pub mod double_double;
pub mod erfcx;
#[rustfmt::skip]
#[cfg_attr(feature = "crate-kernels", allow(dead_code))]
mod erfcx_table;
pub mod exp;
// Entry 32 of the generated table is 2^(1/2), computed like the others.
#[allow(clippy::approx_constant)]
#[rustfmt::skip]
mod exp_table;
pub mod gamma;
pub mod kronrod_table;
pub mod levenberg;
pub mod polynomial;
pub mod quadrature;
pub mod small_solve;
pub mod smoothing_spline;
pub mod stats;
pub mod tanh_sinh;
