//! Small order statistics shared by the smile fits and the calibration.

/// Median of a sample (`None` when empty); NaNs sort last (`f64::total_cmp`).
pub fn median(values: &[f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let mid = v.len() / 2;
    Some(if v.len() % 2 == 1 { v[mid] } else { 0.5 * (v[mid - 1] + v[mid]) })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_of_odd_even_and_empty_samples() {
        assert_eq!(median(&[]), None);
        assert_eq!(median(&[3.0, 1.0, 2.0]).map(f64::to_bits), Some(2.0_f64.to_bits()));
        assert_eq!(median(&[4.0, 1.0, 2.0, 3.0]).map(f64::to_bits), Some(2.5_f64.to_bits()));
    }
}
