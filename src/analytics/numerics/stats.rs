//! Small order statistics shared by the smile fits and the calibration.

/// Median of a sample (`None` when empty); NaNs sort last (`f64::total_cmp`).
pub fn median(values: &[f64]) -> Option<f64> {
    median_of(values.iter().copied())
}

/// [`median`] of the values an iterator yields (a filtered sample without
/// collecting it first: the keys below are the only copy, allocated once at the
/// iterator's upper size bound).
pub fn median_of(values: impl IntoIterator<Item = f64>) -> Option<f64> {
    // A selection, not a sort: the same order statistics in linear time. It runs on
    // integer keys that order as `f64::total_cmp` orders the values (one conversion
    // each way instead of one per comparison), so the result is the same double.
    let values = values.into_iter();
    let (lower, upper) = values.size_hint();
    let mut keys: Vec<i64> = Vec::with_capacity(upper.unwrap_or(lower));
    keys.extend(values.map(total_order_key));
    if keys.is_empty() {
        return None;
    }
    let mid = keys.len() / 2;
    let odd = keys.len() % 2 == 1;
    let (below, upper, _) = keys.select_nth_unstable(mid);
    let upper = from_total_order_key(*upper);
    Some(if odd {
        upper
    } else {
        // The largest of the lower half is the other middle value.
        0.5 * (below.iter().max().map_or(upper, |k| from_total_order_key(*k)) + upper)
    })
}

/// An integer that orders as [`f64::total_cmp`] orders `x` (the same key as the
/// standard library's).
fn total_order_key(x: f64) -> i64 {
    flip_magnitude_if_negative(x.to_bits() as i64)
}

/// The double whose [`total_order_key`] is `key`.
fn from_total_order_key(key: i64) -> f64 {
    f64::from_bits(flip_magnitude_if_negative(key) as u64)
}

/// Flips the 63 magnitude bits when the sign bit is set. It leaves the sign bit as it
/// is, so applying it twice gives back the input: it maps bit patterns to total-order
/// keys and back.
fn flip_magnitude_if_negative(bits: i64) -> i64 {
    bits ^ ((((bits >> 63) as u64) >> 1) as i64)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn total_order_keys_round_trip_and_order_as_total_cmp() {
        let values = [f64::NEG_INFINITY, -2.5, -0.0, 0.0, 1e-300, 3.0, f64::INFINITY, f64::NAN, -f64::NAN];
        for a in values {
            assert_eq!(from_total_order_key(total_order_key(a)).to_bits(), a.to_bits());
            for b in values {
                assert_eq!(total_order_key(a).cmp(&total_order_key(b)), a.total_cmp(&b), "{a} vs {b}");
            }
        }
    }

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
