//! Small order statistics shared by the smile fits and the calibration.

/// Median of a sample (`None` when empty); NaNs sort last (`f64::total_cmp`).
pub fn median(values: &[f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    // A selection, not a sort: the same order statistics in linear time.
    let mut v = values.to_vec();
    let mid = v.len() / 2;
    let (below, upper, _) = v.select_nth_unstable_by(mid, f64::total_cmp);
    let upper = *upper;
    Some(if values.len() % 2 == 1 {
        upper
    } else {
        // The largest of the lower half is the other middle value.
        0.5 * (below.iter().copied().max_by(f64::total_cmp).unwrap_or(upper) + upper)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn median_of_odd_even_and_empty_samples() {
        assert_eq!(median(&[]), None);
        assert_eq!(median(&[3.0, 1.0, 2.0]).map(f64::to_bits), Some(2.0_f64.to_bits()));
        assert_eq!(median(&[4.0, 1.0, 2.0, 3.0]).map(f64::to_bits), Some(2.5_f64.to_bits()));
        // Definition check: the middle values of the sorted sample, ties and signs included.
        let sample = [0.5, -2.0, 7.0, 0.5, 3.0, -1.0, 9.0, 0.25];
        assert_eq!(median(&sample).map(f64::to_bits), Some(0.5_f64.to_bits()));
        assert_eq!(median(&sample[..7]).map(f64::to_bits), Some(0.5_f64.to_bits()));
        assert_eq!(median(&[2.0, -3.0]).map(f64::to_bits), Some((-0.5_f64).to_bits()));
    }
}
