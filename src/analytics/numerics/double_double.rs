//! Error-free transformations of double-precision arithmetic (the building blocks of
//! double-double numbers): a product and a sum returned as a rounded value plus its exact
//! error. The split product follows Numer. Math. 18 (1971), "A floating-point technique for
//! extending the available precision"; the branch-free sum is the one in The Art of
//! Computer Programming, vol. 2, section 4.2.2. No FMA is needed, so the results are the
//! same on every processor.

/// Error-free product: `a * b = hi + lo` exactly (operands split into 26-bit halves, no FMA needed).
pub fn two_prod(a: f64, b: f64) -> (f64, f64) {
    const SPLIT: f64 = 134_217_729.0; // 2^27 + 1
    let p = a * b;
    let split = |v: f64| {
        let t = SPLIT * v;
        let hi = t - (t - v);
        (hi, v - hi)
    };
    let (ah, al) = split(a);
    let (bh, bl) = split(b);
    let err = ((ah * bh - p) + ah * bl + al * bh) + al * bl;
    (p, err)
}

/// Error-free sum: `a + b = s + e` exactly (branch-free two-sum).
pub fn two_sum(a: f64, b: f64) -> (f64, f64) {
    let s = a + b;
    let bb = s - a;
    let e = (a - (s - bb)) + (b - bb);
    (s, e)
}
