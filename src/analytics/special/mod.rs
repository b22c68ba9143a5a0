//! Special functions the models need and no crate provides.

pub mod digamma;
pub mod mittag_leffler;
