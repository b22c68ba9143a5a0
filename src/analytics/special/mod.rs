//! Special functions the models need and no crate provides.

pub mod mittag_leffler;
