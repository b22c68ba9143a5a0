//! Polynomial sums by Horner's rule: one argument ([`horner`], [`horner2`] with two
//! independent chains), and the truncation counts of a power series summed to an absolute
//! tolerance. The batched, SIMD-dispatched sums over many arguments are in
//! [`super::batched`].

/// `sum_k c_k t^k` for a fixed-length coefficient list (`c_0` first) by Horner's rule.
#[inline]
pub fn horner<const N: usize>(coefficients: &[f64; N], t: f64) -> f64 {
    let mut acc = coefficients[N - 1];
    for c in coefficients[..N - 1].iter().rev() {
        acc = c + t * acc;
    }
    acc
}

/// `sum_k c_k z^k` by Horner's rule split into even and odd powers (two independent chains).
#[inline]
pub fn horner2(c: &[f64], z: f64) -> f64 {
    let n = c.len();
    if n == 0 {
        return 0.0;
    }
    let z2 = z * z;
    // even chain: c0 + c2 z2 + c4 z2^2 ...; odd chain: c1 + c3 z2 + ...
    let mut even = 0.0_f64;
    let mut odd = 0.0_f64;
    let mut k = n;
    // make k even-aligned: process from the top
    if n % 2 == 1 {
        even = c[n - 1];
        k = n - 1;
    }
    while k >= 2 {
        // plain multiply-add: f64::mul_add is a slow library call without hardware FMA
        odd = odd * z2 + c[k - 1];
        even = even * z2 + c[k - 2];
        k -= 2;
    }
    odd * z + even
}

/// Terms needed per block of arguments sorted by `|z|`, found by walking up from the previous
/// block's count. The count never falls, so it is enough for every block whatever the order;
/// sorting only keeps it small.
pub struct TermCounter<'a> {
    coeffs: &'a [f64],
    /// `suffix_max[k] = max_{j >= k} |c_j|`.
    suffix_max: Vec<f64>,
    tol: f64,
    n: usize,
}

impl<'a> TermCounter<'a> {
    /// A counter for `coeffs` under the absolute tolerance `tol`, starting at one term.
    pub fn new(coeffs: &'a [f64], tol: f64) -> Self {
        let mut suffix_max = vec![0.0; coeffs.len()];
        let mut m = 0.0_f64;
        for (k, c) in coeffs.iter().enumerate().rev() {
            m = m.max(c.abs());
            suffix_max[k] = m;
        }
        Self { coeffs, suffix_max, tol, n: 1.min(coeffs.len()) }
    }

    /// At least [`terms_needed`] for `|z| <= r`. For `r <= 1` every term from `k` on is at most
    /// `max_{j >= k} |c_j| r^k`, so the first `k` where that bound is within `tol` is enough;
    /// beyond 1 every term is checked.
    pub fn at(&mut self, r: f64) -> usize {
        if r > 1.0 {
            self.n = self.n.max(terms_needed(self.coeffs, r, self.tol));
            return self.n;
        }
        let mut p = r.powi(self.n as i32);
        while self.n < self.coeffs.len() && self.suffix_max[self.n] * p > self.tol {
            self.n += 1;
            p *= r;
        }
        self.n
    }
}

/// `1 +` the last `k` with `|c_k| r^k > tol` (at least 1): the terms a sum for `|z| <= r`
/// keeps under the absolute tolerance `tol`.
pub fn terms_needed(coeffs: &[f64], r: f64, tol: f64) -> usize {
    let mut n = 1;
    let mut p = 1.0;
    for (k, c) in coeffs.iter().enumerate() {
        if (c * p).abs() > tol {
            n = k + 1;
        }
        p *= r;
    }
    n
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::analytics::numerics::digamma::digamma;
    use crate::analytics::numerics::gamma::rgamma;

    /// Coefficients like those the leverage model sums: `c_k = 1/Gamma(a k + a + 2)` (the
    /// series of `E_{a,a+2}`), its derivative's `(k+1) c_{k+1}` and the digamma-weighted
    /// `(k+1) psi(a(k+1)+2) c_k`, to 60 terms (|z| <= 2 needs fewer).
    pub(crate) struct Coefficients {
        pub(crate) coeffs: Vec<f64>,
        pub(crate) dcoeffs: Vec<f64>,
        pub(crate) psi_coeffs: Vec<f64>,
    }

    impl Coefficients {
        pub(crate) fn new(alpha: f64) -> Self {
            let b = alpha + 2.0;
            let coeffs: Vec<f64> = (0..60).map(|k| rgamma(alpha * k as f64 + b)).collect();
            let dcoeffs = (1..coeffs.len()).map(|k| k as f64 * coeffs[k]).collect();
            let psi_coeffs =
                (0..coeffs.len()).map(|k| (k + 1) as f64 * digamma(alpha * k as f64 + b) * coeffs[k]).collect();
            Self { coeffs, dcoeffs, psi_coeffs }
        }
    }

    /// The walking term counter never keeps fewer terms than a full scan, also for the
    /// derivative and digamma-weighted coefficients (which rise over the first few terms).
    #[test]
    fn term_counter_is_never_short() {
        for alpha in [0.5, 0.61, 0.8, 1.0] {
            let series = Coefficients::new(alpha);
            for coeffs in [&series.coeffs, &series.dcoeffs, &series.psi_coeffs] {
                for tol in [1e-3, 1e-12, 1e-19] {
                    let mut counter = TermCounter::new(coeffs, tol);
                    for i in 0..=400 {
                        let r = i as f64 * 0.005;
                        let n = counter.at(r);
                        assert!(n >= terms_needed(coeffs, r, tol), "a {alpha} tol {tol} r {r}: {n} terms");
                    }
                }
            }
        }
    }
}
