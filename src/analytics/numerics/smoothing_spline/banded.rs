//! The smoothing spline's banded algebra: the second-difference matrix `Q`, the Gram
//! matrix `R`, the `L D L'` factor of `R + lambda Q' W^-1 Q`, its solves (also for
//! several right-hand sides at once, "lanes") and the hat matrix's diagonal from the
//! central band of the inverse (see the module docs of [`super`]).

use super::SmoothingError;

/// Diagonal of the hat matrix `H = I - lambda W^-1 Q B^-1 Q'` of a factorised system,
/// from the central band of `B^-1` (its three bands by the backward recurrence of the
/// `L D L'` factor, no full inverse).
pub(super) fn hat_diagonal(system: &System, factor: &Factor, lambda: f64) -> Vec<f64> {
    let n = system.inverse_weight.len();
    let m = system.columns.len();
    let (columns, inverse_weight) = (&system.columns, &system.inverse_weight);
    let q = |j: usize| columns[j];
    let (inverse_d, l1, l2) = (&factor.inverse_d, &factor.l1, &factor.l2);
    // Central band of S = B^-1: s0[j] = S[j][j], s1[j] = S[j][j+1], s2[j] = S[j][j+2].
    let mut s0 = vec![0.0; m];
    let mut s1 = vec![0.0; m];
    let mut s2 = vec![0.0; m];
    for j in (0..m).rev() {
        let (a1, a2) = (if j + 1 < m { l1[j] } else { 0.0 }, if j + 2 < m { l2[j] } else { 0.0 });
        let s11 = if j + 1 < m { s0[j + 1] } else { 0.0 };
        let s12 = if j + 1 < m { s1[j + 1] } else { 0.0 };
        let s22 = if j + 2 < m { s0[j + 2] } else { 0.0 };
        s2[j] = -a1 * s12 - a2 * s22;
        s1[j] = -a1 * s11 - a2 * s12;
        s0[j] = inverse_d[j] - a1 * s1[j] - a2 * s2[j];
    }
    let band = |a: usize, b: usize| -> f64 {
        let (lo, hi) = if a <= b { (a, b) } else { (b, a) };
        match hi - lo {
            0 => s0[lo],
            1 => s1[lo],
            2 => s2[lo],
            _ => 0.0,
        }
    };
    // (Q S Q')_ii over the columns j with a non-zero Q[i][j]: j = i - 2, i - 1, i.
    let mut hat_diagonal = vec![0.0; n];
    for (i, hat) in hat_diagonal.iter_mut().enumerate() {
        if i >= 2 && i < m {
            // All three columns exist: the general sum below written out, term by
            // term in its order (the same number to the bit, without its branches).
            let (c0, c1, c2) = (q(i - 2)[2], q(i - 1)[1], q(i)[0]);
            let (a, b) = (i - 2, i - 1);
            let mut quad = 0.0;
            quad += c0 * c0 * s0[a];
            quad += c0 * c1 * s1[a];
            quad += c0 * c2 * s2[a];
            quad += c1 * c0 * s1[a];
            quad += c1 * c1 * s0[b];
            quad += c1 * c2 * s1[b];
            quad += c2 * c0 * s2[a];
            quad += c2 * c1 * s1[b];
            quad += c2 * c2 * s0[i];
            *hat = 1.0 - lambda * quad * inverse_weight[i];
            continue;
        }
        let mut cols = [(0usize, 0.0f64); 3];
        let mut count = 0;
        for j in i.saturating_sub(2)..=i {
            if j < m {
                cols[count] = (j, q(j)[i - j]);
                count += 1;
            }
        }
        let mut quad = 0.0;
        for &(a, qa) in &cols[..count] {
            for &(b, qb) in &cols[..count] {
                quad += qa * qb * band(a, b);
            }
        }
        *hat = 1.0 - lambda * quad * inverse_weight[i];
    }
    hat_diagonal
}

/// What every smoothing of data at one set of knots and weights shares, whatever
/// `lambda` and data: `Q` by columns, `W^-1`, and the bands of `R` and of
/// `Q' W^-1 Q` (so that `B = R + lambda Q' W^-1 Q` is two additions a band entry).
pub(super) struct System {
    /// Second-difference coefficients of column `j` of `Q` (rows `j .. j+2`).
    pub(super) columns: Vec<[f64; 3]>,
    /// `1 / omega_i`.
    pub(super) inverse_weight: Vec<f64>,
    /// Main and first off-diagonal of `R`.
    pub(super) gram: [Vec<f64>; 2],
    /// Main, first and second off-diagonals of `Q' W^-1 Q`.
    pub(super) penalty: [Vec<f64>; 3],
}

impl System {
    /// The system of knots `x` (at least three, increasing) and weights `weight`,
    /// checked by the caller.
    pub(super) fn new(x: &[f64], weight: &[f64]) -> Self {
        let m = x.len() - 2;
        let h: Vec<f64> = x.windows(2).map(|p| p[1] - p[0]).collect();
        // Column j of Q (interior knot j + 1) has entries at rows j, j + 1, j + 2; taken
        // once, as are the inverse weights (divisions are most of a fit's cost).
        let columns: Vec<[f64; 3]> = (0..m)
            .map(|j| {
                let (a, b) = (1.0 / h[j], 1.0 / h[j + 1]);
                [a, -a - b, b]
            })
            .collect();
        let inverse_weight: Vec<f64> = weight.iter().map(|w| 1.0 / w).collect();
        let iw = &inverse_weight;
        let gram = [
            (0..m).map(|j| (h[j] + h[j + 1]) / 3.0).collect(),
            (0..m).map(|j| if j + 1 < m { h[j + 1] / 6.0 } else { 0.0 }).collect(),
        ];
        let penalty = [
            (0..m)
                .map(|j| {
                    let q = columns[j];
                    q[0] * q[0] * iw[j] + q[1] * q[1] * iw[j + 1] + q[2] * q[2] * iw[j + 2]
                })
                .collect(),
            (0..m)
                .map(|j| {
                    if j + 1 < m {
                        let (q, r) = (columns[j], columns[j + 1]);
                        q[1] * r[0] * iw[j + 1] + q[2] * r[1] * iw[j + 2]
                    } else {
                        0.0
                    }
                })
                .collect(),
            (0..m).map(|j| if j + 2 < m { columns[j][2] * columns[j + 2][0] * iw[j + 2] } else { 0.0 }).collect(),
        ];
        Self { columns, inverse_weight, gram, penalty }
    }

    /// `Q' y`.
    pub(super) fn q_transpose_times(&self, y: &[f64]) -> Vec<f64> {
        from_lanes(self.q_transpose_lanes(&to_lanes(y)))
    }

    /// `Q' y` for `L` data vectors given by knot (`y[i][l]`).
    pub(super) fn q_transpose_lanes<const L: usize>(&self, y: &[[f64; L]]) -> Vec<[f64; L]> {
        self.columns
            .iter()
            .enumerate()
            .map(|(j, q)| std::array::from_fn(|l| q[0] * y[j][l] + q[1] * y[j + 1][l] + q[2] * y[j + 2][l]))
            .collect()
    }

    /// Fitted values `g = y - lambda W^-1 Q gamma` from the data and `gamma = B^-1 Q' y`.
    pub(super) fn values(&self, y: &[f64], lambda: f64, gamma: &[f64]) -> Vec<f64> {
        from_lanes(self.values_lanes(&to_lanes(y), lambda, &to_lanes(gamma)))
    }

    /// [`System::values`] for `L` data vectors given by knot.
    pub(super) fn values_lanes<const L: usize>(
        &self,
        y: &[[f64; L]],
        lambda: f64,
        gamma: &[[f64; L]],
    ) -> Vec<[f64; L]> {
        let mut values = y.to_vec();
        for (j, q) in self.columns.iter().enumerate() {
            for (r, qv) in q.iter().enumerate() {
                let scale = lambda * qv;
                for l in 0..L {
                    values[j + r][l] -= scale * gamma[j][l] * self.inverse_weight[j + r];
                }
            }
        }
        values
    }
}

/// `B = L D L'` for one `lambda`, `L` unit lower triangular of bandwidth 2:
/// `l1[j] = L[j+1][j]`, `l2[j] = L[j+2][j]` (zero past the last rows).
pub(super) struct Factor {
    pub(super) inverse_d: Vec<f64>,
    pub(super) l1: Vec<f64>,
    pub(super) l2: Vec<f64>,
}

impl Factor {
    /// Factorises `R + lambda Q' W^-1 Q` of `system`.
    pub(super) fn new(system: &System, lambda: f64) -> Result<Self, SmoothingError> {
        if !(lambda.is_finite() && lambda >= 0.0) {
            return Err(SmoothingError::NotPositiveDefinite);
        }
        let m = system.columns.len();
        let [r0, r1] = &system.gram;
        let [p0, p1, p2] = &system.penalty;
        let (mut dd, mut inverse_d, mut l1, mut l2) = (vec![0.0; m], vec![0.0; m], vec![0.0; m], vec![0.0; m]);
        for j in 0..m {
            let mut dj = r0[j] + lambda * p0[j];
            if j >= 1 {
                dj -= l1[j - 1] * l1[j - 1] * dd[j - 1];
            }
            if j >= 2 {
                dj -= l2[j - 2] * l2[j - 2] * dd[j - 2];
            }
            if !(dj > 0.0 && dj.is_finite()) {
                return Err(SmoothingError::NotPositiveDefinite);
            }
            dd[j] = dj;
            inverse_d[j] = 1.0 / dj;
            if j + 1 < m {
                let mut b = r1[j] + lambda * p1[j];
                if j >= 1 {
                    b -= l2[j - 1] * l1[j - 1] * dd[j - 1];
                }
                l1[j] = b * inverse_d[j];
            }
            if j + 2 < m {
                l2[j] = lambda * p2[j] * inverse_d[j];
            }
        }
        Ok(Self { inverse_d, l1, l2 })
    }

    /// `B^-1 rhs`.
    pub(super) fn solve(&self, rhs: Vec<f64>) -> Vec<f64> {
        from_lanes(self.solve_lanes(to_lanes(&rhs)))
    }

    /// `B^-1 rhs` for `L` right-hand sides given by row (`rhs[j][l]`): each lane's
    /// arithmetic is that of a single solve, and `L` chains of dependent
    /// multiply-adds side by side take about the time of one.
    pub(super) fn solve_lanes<const L: usize>(&self, mut rhs: Vec<[f64; L]>) -> Vec<[f64; L]> {
        let m = rhs.len();
        for j in 0..m {
            if j >= 1 {
                let (previous, a) = (rhs[j - 1], self.l1[j - 1]);
                for l in 0..L {
                    rhs[j][l] -= a * previous[l];
                }
            }
            if j >= 2 {
                let (previous, a) = (rhs[j - 2], self.l2[j - 2]);
                for l in 0..L {
                    rhs[j][l] -= a * previous[l];
                }
            }
        }
        for (g, d) in rhs.iter_mut().zip(&self.inverse_d) {
            for v in g.iter_mut() {
                *v *= d;
            }
        }
        for j in (0..m).rev() {
            if j + 1 < m {
                let (next, a) = (rhs[j + 1], self.l1[j]);
                for l in 0..L {
                    rhs[j][l] -= a * next[l];
                }
            }
            if j + 2 < m {
                let (next, a) = (rhs[j + 2], self.l2[j]);
                for l in 0..L {
                    rhs[j][l] -= a * next[l];
                }
            }
        }
        rhs
    }
}

/// One data vector as one-lane rows, for the lane forms of the solves.
pub(super) fn to_lanes(v: &[f64]) -> Vec<[f64; 1]> {
    v.iter().map(|x| [*x]).collect()
}

/// One-lane rows back to a vector.
pub(super) fn from_lanes(v: Vec<[f64; 1]>) -> Vec<f64> {
    v.into_iter().map(|[x]| x).collect()
}
