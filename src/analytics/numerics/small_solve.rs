//! Dense linear systems of size 1 to 3 (the SVI fit's inner least squares and its
//! Newton steps): `nalgebra`'s LU decomposition with partial pivoting on stack matrices.

use nalgebra::{SMatrix, SVector};

/// Pivots below this fraction of the largest diagonal entry make the system singular
/// (the rule of the elimination this replaced; common practice for a relative pivot test).
const SINGULAR_PIVOT: f64 = 1e-13;

/// Solves `A t = r` for an `n x n` system (n <= 3, the leading block of `a` and `r`) by LU
/// decomposition with partial pivoting; `None` when (numerically) singular or `n` is not 1
/// to 3.
#[inline]
pub fn solve_small(n: usize, a: [[f64; 3]; 3], r: [f64; 3]) -> Option<[f64; 3]> {
    match n {
        1 => solve_fixed::<1>(a, r),
        2 => solve_fixed::<2>(a, r),
        3 => solve_fixed::<3>(a, r),
        _ => None,
    }
}

/// [`solve_small`] for `N x N`.
#[inline]
fn solve_fixed<const N: usize>(a: [[f64; 3]; 3], r: [f64; 3]) -> Option<[f64; 3]>
where
    nalgebra::Const<N>: nalgebra::DimMin<nalgebra::Const<N>, Output = nalgebra::Const<N>>,
{
    let scale = (0..N).map(|i| a[i][i].abs()).fold(0.0, f64::max);
    if !(scale > 0.0) || !scale.is_finite() {
        return None;
    }
    let lu = SMatrix::<f64, N, N>::from_fn(|i, j| a[i][j]).lu();
    let pivots = lu.u().diagonal();
    if pivots.iter().any(|p| !(p.abs() > SINGULAR_PIVOT * scale)) {
        return None;
    }
    let t = lu.solve(&SVector::<f64, N>::from_fn(|i, _| r[i]))?;
    let mut out = [0.0; 3];
    out[..N].copy_from_slice(t.as_slice());
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exact solutions of small integer systems (solved by hand): the LU solve reproduces
    /// them to a few rounding errors (1e-14 relative, a handful of ulps of the entries).
    #[test]
    fn solves_exact_systems() {
        // [[4, 1, 2], [1, 3, 0], [2, 0, 5]] t = [4 + 1 + 4, 1 + 3, 2 + 10] with t = [1, 1, 2]
        let a = [[4.0, 1.0, 2.0], [1.0, 3.0, 0.0], [2.0, 0.0, 5.0]];
        let t = solve_small(3, a, [9.0, 4.0, 12.0]).expect("regular");
        for (got, want) in t.iter().zip([1.0, 1.0, 2.0]) {
            assert!((got - want).abs() <= 1e-14, "{got} vs {want}");
        }
        // 2 x 2 needing a row swap: [[0, 1], [1, 1]] t = [2, 3], t = [1, 2]
        let t = solve_small(2, [[0.0, 1.0, 9.0], [1.0, 1.0, 9.0], [9.0; 3]], [2.0, 3.0, 9.0]).expect("regular");
        assert!((t[0] - 1.0).abs() <= 1e-14 && (t[1] - 2.0).abs() <= 1e-14, "{t:?}");
        let t = solve_small(1, [[4.0, 0.0, 0.0], [0.0; 3], [0.0; 3]], [2.0, 0.0, 0.0]).expect("regular");
        assert!((t[0] - 0.5).abs() <= f64::EPSILON, "{t:?}");
    }

    #[test]
    fn refuses_singular_and_bad_systems() {
        // Rank 2: the third row is the sum of the first two.
        let a = [[1.0, 2.0, 3.0], [2.0, 1.0, 1.0], [3.0, 3.0, 4.0]];
        assert!(solve_small(3, a, [1.0, 1.0, 1.0]).is_none());
        assert!(solve_small(2, [[0.0; 3]; 3], [1.0; 3]).is_none());
        assert!(solve_small(2, [[f64::NAN, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0; 3]], [1.0; 3]).is_none());
        assert!(solve_small(4, [[1.0; 3]; 3], [1.0; 3]).is_none());
        assert!(solve_small(0, [[1.0; 3]; 3], [1.0; 3]).is_none());
    }
}
