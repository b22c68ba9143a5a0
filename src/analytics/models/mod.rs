//! Affine forward-variance models and the leverage swap they imply (MATH.md section 5).

pub mod leverage;
