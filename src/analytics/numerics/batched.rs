//! Sums over many arguments at once, written so that independent chains run side by side:
//! a power series at many points by Horner's rule (one or two series per pass, truncated
//! per block of arguments, with fused multiply-adds where the processor has them, chosen
//! at run time by [`pulp`]) and gathered dot products.

use super::polynomial::TermCounter;

/// Gaps per block of the batched Horner sums of two series: the accumulators and arguments
/// of one block stay in registers through all coefficients (16 SSE2 registers hold 8
/// arguments and two sets of 8 accumulators).
const HORNER_BLOCK: usize = 8;

/// Gaps per block when a single series is summed: twice `HORNER_BLOCK`, so that as many
/// independent chains are in flight as with two series. Measured on the demo curve: one
/// value evaluation (35 expiries) took 8.3 us against 8.9 us with 8 (minimum of 50 x 200).
const HORNER_BLOCK_SINGLE: usize = 16;

/// `out[g] = sum_k c_k z[g]^k` for all `g` by Horner's rule, over consecutive blocks of
/// `HORNER_BLOCK_SINGLE` arguments (the gaps are ascending, so a block's arguments have
/// similar `|z|`): each block keeps only the terms its largest `|z|` needs for the absolute
/// tolerance `tol` (see [`super::polynomial::terms_needed`]), and its chains are independent and stay in
/// registers.
///
/// Where the processor has AVX2 and FMA (x86-64-v3, detected at run time by [`pulp`]) the
/// blocks are worked four gaps per instruction and each step is one fused multiply-add: a fit
/// of the demo snapshot takes about 8% less time (fastest of 300 batches of 25 fits, three
/// runs: 61 to 63 us against 67 to 69). Elsewhere the steps are a product and a sum, as
/// before; the two differ by a rounding per step (test below).
pub fn horner_many(c: &[f64], tol: f64, z: &[f64], out: &mut Vec<f64>) {
    pulp::Arch::new().dispatch(Dispatched(HornerMany { c, tol, z, out }))
}

/// A computation with plain (`FUSED = false`) or fused multiply-add steps, for
/// [`Dispatched`].
trait FusableSteps {
    fn run<const FUSED: bool>(self);
}

/// Runs a [`FusableSteps`] under [`pulp`]'s dispatch to the widest instruction set this
/// processor has: compiled once per set, with the computation inlined, so its loops use that
/// set's vectors; its steps are fused except on the scalar fallback.
struct Dispatched<T>(T);

impl<T: FusableSteps> pulp::WithSimd for Dispatched<T> {
    type Output = ();

    #[inline(always)]
    fn with_simd<S: pulp::Simd>(self, _simd: S) {
        if S::IS_SCALAR {
            self.0.run::<false>()
        } else {
            self.0.run::<true>()
        }
    }
}

/// [`horner_many`]'s arguments.
struct HornerMany<'a> {
    c: &'a [f64],
    tol: f64,
    z: &'a [f64],
    out: &'a mut Vec<f64>,
}

impl FusableSteps for HornerMany<'_> {
    #[inline(always)]
    fn run<const FUSED: bool>(self) {
        horner_many_body::<FUSED>(self.c, self.tol, self.z, self.out)
    }
}

/// [`horner_many`] with plain (`FUSED = false`) or fused multiply-add steps.
#[inline(always)]
fn horner_many_body<const FUSED: bool>(c: &[f64], tol: f64, z: &[f64], out: &mut Vec<f64>) {
    out.clear();
    out.reserve(z.len());
    let mut counter = TermCounter::new(c, tol);
    for block in z.chunks(HORNER_BLOCK_SINGLE) {
        let zz: [f64; HORNER_BLOCK_SINGLE] = padded(block);
        let zb = block.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        let n = counter.at(zb);
        let mut acc = [0.0_f64; HORNER_BLOCK_SINGLE];
        for &ck in c[..n].iter().rev() {
            for i in 0..HORNER_BLOCK_SINGLE {
                acc[i] = horner_step::<FUSED>(acc[i], zz[i], ck);
            }
        }
        push_block(out, &acc, block.len());
    }
}

/// One Horner step `acc z + c`: one rounding when `FUSED` (a fused multiply-add, one
/// instruction where the processor has FMA), else a product and a sum.
#[inline(always)]
fn horner_step<const FUSED: bool>(acc: f64, z: f64, c: f64) -> f64 {
    if FUSED {
        acc.mul_add(z, c)
    } else {
        acc * z + c
    }
}

/// `block` padded with zeros to `N` values. A full block is copied as a fixed-size array:
/// a copy of variable length becomes a call to `memcpy`, which cost about 4% of a fit's
/// wall time at three copies per block (sampled with `perf`).
#[inline(always)]
fn padded<const N: usize>(block: &[f64]) -> [f64; N] {
    match <[f64; N]>::try_from(block) {
        Ok(full) => full,
        Err(_) => {
            let mut zz = [0.0; N];
            zz[..block.len()].copy_from_slice(block);
            zz
        }
    }
}

/// Appends the first `len` values of `acc` to `out` (a full block as a fixed-size copy,
/// see [`padded`]).
#[inline(always)]
fn push_block<const N: usize>(out: &mut Vec<f64>, acc: &[f64; N], len: usize) {
    if len == N {
        out.extend_from_slice(acc);
    } else {
        out.extend_from_slice(&acc[..len]);
    }
}

/// Two series at the same arguments in one pass, like [`horner_many`] (and dispatched like it):
/// `out1[g] = sum_k c1_k z[g]^k` and `out2[g] = sum_k c2_k z[g]^k`.
pub fn horner_many2(
    (c1, tol1): (&[f64], f64),
    (c2, tol2): (&[f64], f64),
    z: &[f64],
    out1: &mut Vec<f64>,
    out2: &mut Vec<f64>,
) {
    pulp::Arch::new().dispatch(Dispatched(HornerMany2 { c1: (c1, tol1), c2: (c2, tol2), z, out1, out2 }))
}

/// [`horner_many2`]'s arguments.
struct HornerMany2<'a> {
    c1: (&'a [f64], f64),
    c2: (&'a [f64], f64),
    z: &'a [f64],
    out1: &'a mut Vec<f64>,
    out2: &'a mut Vec<f64>,
}

impl FusableSteps for HornerMany2<'_> {
    #[inline(always)]
    fn run<const FUSED: bool>(self) {
        horner_many2_body::<FUSED>(self.c1, self.c2, self.z, self.out1, self.out2)
    }
}

/// [`horner_many2`] with plain or fused steps (see [`horner_many_body`]).
#[inline(always)]
fn horner_many2_body<const FUSED: bool>(
    (c1, tol1): (&[f64], f64),
    (c2, tol2): (&[f64], f64),
    z: &[f64],
    out1: &mut Vec<f64>,
    out2: &mut Vec<f64>,
) {
    out1.clear();
    out1.reserve(z.len());
    out2.clear();
    out2.reserve(z.len());
    let mut counter1 = TermCounter::new(c1, tol1);
    let mut counter2 = TermCounter::new(c2, tol2);
    for block in z.chunks(HORNER_BLOCK) {
        let zz: [f64; HORNER_BLOCK] = padded(block);
        let zb = block.iter().fold(0.0_f64, |m, v| m.max(v.abs()));
        let n = counter1.at(zb).max(counter2.at(zb));
        let mut a1 = [0.0_f64; HORNER_BLOCK];
        let mut a2 = [0.0_f64; HORNER_BLOCK];
        // Both series take `n` terms (as far as their lists reach; zero beyond).
        for k in (0..n).rev() {
            let k1 = c1.get(k).copied().unwrap_or(0.0);
            let k2 = c2.get(k).copied().unwrap_or(0.0);
            for i in 0..HORNER_BLOCK {
                a1[i] = horner_step::<FUSED>(a1[i], zz[i], k1);
                a2[i] = horner_step::<FUSED>(a2[i], zz[i], k2);
            }
        }
        push_block(out1, &a1, block.len());
        push_block(out2, &a2, block.len());
    }
}

/// `sum_j a_j b[m][index_j]` for each of the `M` value lists `b[m]`, with four partial sums
/// per list (independent chains; the order of rounding differs from a plain left-to-right
/// sum only at the level of `2^-53 sum |a_j b_j|`). The weights and indices are read once
/// for all lists (the Jacobian sums values and two derivatives over the same pairs).
pub fn dot_gather<const M: usize>(a: &[f64], b: [&[f64]; M], index: &[u32]) -> [f64; M] {
    let mut acc = [[0.0; 4]; M];
    let mut ca = a.chunks_exact(4);
    let mut ci = index.chunks_exact(4);
    for (x, k) in (&mut ca).zip(&mut ci) {
        for i in 0..4 {
            let g = k[i] as usize;
            for (acc, b) in acc.iter_mut().zip(b) {
                acc[i] += x[i] * b[g];
            }
        }
    }
    let (ra, ri) = (ca.remainder(), ci.remainder());
    std::array::from_fn(|m| {
        let tail: f64 = ra.iter().zip(ri).map(|(x, &k)| x * b[m][k as usize]).sum();
        let acc = acc[m];
        (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
    })
}

#[cfg(test)]
mod tests {
    use crate::analytics::numerics::polynomial::tests::Coefficients;

    /// The fused and the plain Horner steps differ by less than twice the standard rounding
    /// bound of Horner's rule, `2 n u sum_k |c_k| |z|^k` (`u = 2^-53`, `n` terms), so results on
    /// processors with and without FMA differ only at rounding level; where the sum is well
    /// conditioned (the values), that is within 1e-15 relative.
    #[test]
    fn fused_and_plain_horner_steps_agree() {
        for alpha in [0.55, 0.8, 1.0] {
            let series = Coefficients::new(alpha);
            let z: Vec<f64> = (0..=200).map(|i| -1.5 + 0.01 * i as f64).collect();
            let (mut plain, mut fused) = (Vec::new(), Vec::new());
            super::horner_many_body::<false>(&series.coeffs, 0.0, &z, &mut plain);
            super::horner_many_body::<true>(&series.coeffs, 0.0, &z, &mut fused);
            let (mut p1, mut p2, mut f1, mut f2) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
            super::horner_many2_body::<false>((&series.dcoeffs, 0.0), (&series.psi_coeffs, 0.0), &z, &mut p1, &mut p2);
            super::horner_many2_body::<true>((&series.dcoeffs, 0.0), (&series.psi_coeffs, 0.0), &z, &mut f1, &mut f2);
            let lists = [
                ("E", series.coeffs.as_slice(), &plain, &fused),
                ("dE/dz", series.dcoeffs.as_slice(), &p1, &f1),
                ("S2", series.psi_coeffs.as_slice(), &p2, &f2),
            ];
            for (what, coeffs, a, b) in lists {
                assert_eq!(a.len(), z.len());
                for ((x, y), zz) in a.iter().zip(b.iter()).zip(&z) {
                    let abs_sum: f64 = coeffs.iter().rev().fold(0.0, |acc, c| acc * zz.abs() + c.abs());
                    let bound = 2.0 * (coeffs.len() as f64) * f64::EPSILON * abs_sum;
                    assert!((x - y).abs() <= bound, "a {alpha} {what} at z {zz}: {x:e} against {y:e}");
                    if what == "E" {
                        let rel = ((y - x) / x).abs();
                        assert!(rel <= 1e-15, "a {alpha} {what} at z {zz}: {y:e} against {x:e}");
                    }
                }
            }
        }
    }
}
