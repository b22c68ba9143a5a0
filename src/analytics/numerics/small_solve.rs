//! Dense linear systems of size 1 to 3 (the SVI fit's inner least squares and its
//! Newton steps), by Gaussian elimination with partial pivoting, unrolled per size.

/// Solves `A t = r` for a symmetric `n x n` system (n <= 3) by Gaussian elimination
/// with partial pivoting; `None` when (numerically) singular or `n` is not 1 to 3.
#[inline]
pub fn solve_small(n: usize, a: [[f64; 3]; 3], r: [f64; 3]) -> Option<[f64; 3]> {
    // One copy per size, so that the loops unroll (the same operations in the same order
    // as a loop over a run-time `n`, hence the same result to the bit).
    match n {
        1 => solve_fixed::<1>(a, r),
        2 => solve_fixed::<2>(a, r),
        3 => solve_fixed::<3>(a, r),
        _ => None,
    }
}

/// [`solve_small`] for `N x N`.
#[inline]
fn solve_fixed<const N: usize>(mut a: [[f64; 3]; 3], mut r: [f64; 3]) -> Option<[f64; 3]> {
    let n = N;
    let scale = (0..n).map(|i| a[i][i].abs()).fold(0.0, f64::max);
    if !(scale > 0.0) || !scale.is_finite() {
        return None;
    }
    for col in 0..n {
        let pivot = (col..n).max_by(|&i, &j| a[i][col].abs().total_cmp(&a[j][col].abs()))?;
        if a[pivot][col].abs() <= 1e-13 * scale {
            return None;
        }
        a.swap(col, pivot);
        r.swap(col, pivot);
        for row in col + 1..n {
            let f = a[row][col] / a[col][col];
            for c in col..n {
                a[row][c] -= f * a[col][c];
            }
            r[row] -= f * r[col];
        }
    }
    let mut t = [0.0; 3];
    for row in (0..n).rev() {
        let mut s = r[row];
        for c in row + 1..n {
            s -= a[row][c] * t[c];
        }
        t[row] = s / a[row][row];
    }
    Some(t)
}
