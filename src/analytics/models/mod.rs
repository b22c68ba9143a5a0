//! Affine forward-variance models and the leverage swap they imply (MATH.md section 5).

mod expiry_gaps;
pub mod leverage;
