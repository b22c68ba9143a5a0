//! The Mittag-Leffler function, the one special function the rough Heston formulas need
//! that no crate provides to double precision (MATH.md section 6). The generic kernels it
//! uses (gamma, double-double sums, Horner sums, tanh-sinh) live in
//! [`crate::analytics::numerics`].

pub mod mittag_leffler;
