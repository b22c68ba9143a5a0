//! Special functions the models need and no crate provides, and an inlinable
//! exponential for the innermost loops ([`exp`]).

pub mod digamma;
pub mod erfcx;
#[rustfmt::skip]
mod erfcx_table;
pub mod exp;
// Entry 32 of the generated table is 2^(1/2), computed like the others.
#[allow(clippy::approx_constant)]
#[rustfmt::skip]
mod exp_table;
pub mod mittag_leffler;
pub mod mittag_leffler_contour;
