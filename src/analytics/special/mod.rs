//! Special functions the models need and no crate provides.

pub mod digamma;
pub mod erfcx;
#[rustfmt::skip]
mod erfcx_table;
pub mod mittag_leffler;
