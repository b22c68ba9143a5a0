//! Special functions the models need and no crate provides, and an inlinable
//! exponential for the innermost loops ([`exp`]).

pub mod digamma;
pub mod erfcx;
#[rustfmt::skip]
mod erfcx_table;
pub mod exp;
#[rustfmt::skip]
mod exp_table;
pub mod mittag_leffler;
