//! Row kernels of the Newton pass: a few dot products of one mapped row with fixed
//! columns, and a few scaled additions of one row into gradient sums.
//!
//! A pass touches every mapped row once. Doing the whole per-row job (the dots that give
//! the residual, the leverage sketch, the additions into the gradient sums) while the row
//! is in the first-level cache reads each row from memory once, where two matrix products
//! per chunk (one for the dots, one for Σ β_i ẑ_i) read it twice and pack it twice; and it
//! skips the rows inside the tube, whose β is zero at every candidate step, and the
//! sketch of every such row.
//!
//! Each dot product keeps `L` partial sums in lanes (element j goes to lane j mod L, the
//! tail to lane 0 in order) and adds the lanes in a fixed pairwise tree, so a result
//! depends only on the inputs and the build, never on threads. The build is chosen by a
//! [`Cpu`] capability: on x86-64 the loops are compiled for AVX-512 or AVX2 with fused
//! multiply-add; the generic build (no FMA, also used for AVX2 without FMA) rounds
//! differently but sums in the same order.

#[cfg(target_arch = "x86_64")]
mod avx512;

use crate::cpu::{Cpu, Kernel};

/// Multiply-add as the path does it.
trait Madd {
    fn madd(a: f64, b: f64, c: f64) -> f64;
}

/// a·b + c rounded twice (no FMA instruction assumed).
struct Plain;
impl Madd for Plain {
    #[inline(always)]
    fn madd(a: f64, b: f64, c: f64) -> f64 {
        a * b + c
    }
}

/// a·b + c rounded once (only inside functions compiled with the `fma` feature).
#[cfg(target_arch = "x86_64")]
struct Fused;
#[cfg(target_arch = "x86_64")]
impl Madd for Fused {
    #[inline(always)]
    fn madd(a: f64, b: f64, c: f64) -> f64 {
        a.mul_add(b, c)
    }
}

/// `out[k] = Σ_j z[j]·cols[k·z.len() + j]` for the M = `out.len()` columns stored one
/// after another in `cols`.
///
/// # Panics
/// If `cols` does not hold `out.len()` columns of `z.len()` entries.
#[track_caller]
pub(crate) fn dots(cpu: Cpu, z: &[f64], cols: &[f64], out: &mut [f64]) {
    assert_eq!(cols.len(), z.len() * out.len(), "dots: shape mismatch");
    cpu.run(Dots { z, cols, out });
}

struct Dots<'a> {
    z: &'a [f64],
    cols: &'a [f64],
    out: &'a mut [f64],
}

impl Kernel for Dots<'_> {
    type Output = ();

    fn generic(self) {
        dots_any::<Plain>(self.z, self.cols, self.out);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn avx2_fma(self) {
        dots_any::<Fused>(self.z, self.cols, self.out);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn avx512(self) {
        avx512::dots(self.z, self.cols, self.out);
    }
}

/// `g[k·z.len() + j] += b[k]·z[j]` for the M = `b.len()` sums stored one after another
/// in `g`.
///
/// # Panics
/// If `g` does not hold `b.len()` sums of `z.len()` entries.
#[track_caller]
pub(crate) fn add_scaled(cpu: Cpu, z: &[f64], b: &[f64], g: &mut [f64]) {
    assert_eq!(g.len(), z.len() * b.len(), "add_scaled: shape mismatch");
    cpu.run(AddScaled { z, b, g });
}

struct AddScaled<'a> {
    z: &'a [f64],
    b: &'a [f64],
    g: &'a mut [f64],
}

impl Kernel for AddScaled<'_> {
    type Output = ();

    fn generic(self) {
        add_scaled_any::<Plain>(self.z, self.b, self.g);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn avx2_fma(self) {
        add_scaled_any::<Fused>(self.z, self.b, self.g);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn avx512(self) {
        add_scaled_any::<Fused>(self.z, self.b, self.g);
    }
}

/// [`add_scaled`] for four rows at once: `g[k·n + j] += b[r·M + k]·z[r][j]` for r = 0..4
/// in that order, M = `b.len() / 4`. Each sum is loaded and stored once for the four rows;
/// the operations and their order are those of four calls of [`add_scaled`], so the
/// results are identical.
///
/// # Panics
/// If the rows differ in length or `g` does not hold M sums of that length.
#[track_caller]
pub(crate) fn add_scaled4(cpu: Cpu, z: [&[f64]; 4], b: &[f64], g: &mut [f64]) {
    let n = z[0].len();
    assert!(
        z.iter().all(|r| r.len() == n),
        "add_scaled4: rows differ in length"
    );
    assert_eq!(b.len() % 4, 0, "add_scaled4: four rows of scales");
    assert_eq!(g.len(), n * (b.len() / 4), "add_scaled4: shape mismatch");
    cpu.run(AddScaled4 { z, b, g });
}

struct AddScaled4<'a> {
    z: [&'a [f64]; 4],
    b: &'a [f64],
    g: &'a mut [f64],
}

impl Kernel for AddScaled4<'_> {
    type Output = ();

    fn generic(self) {
        add_scaled4_any::<Plain>(self.z, self.b, self.g);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn avx2_fma(self) {
        add_scaled4_any::<Fused>(self.z, self.b, self.g);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn avx512(self) {
        add_scaled4_any::<Fused>(self.z, self.b, self.g);
    }
}

#[inline(always)]
fn add_scaled4_any<F: Madd>(z: [&[f64]; 4], b: &[f64], g: &mut [f64]) {
    let n = z[0].len();
    let m = b.len() / 4;
    let [z0, z1, z2, z3] = z;
    let (z0, z1, z2, z3) = (&z0[..n], &z1[..n], &z2[..n], &z3[..n]);
    if m == 3 {
        let (g0, rest) = g.split_at_mut(n);
        let (g1, g2) = rest.split_at_mut(n);
        let g2 = &mut g2[..n];
        let bk = |k: usize| [b[k], b[3 + k], b[6 + k], b[9 + k]];
        let (b0, b1, b2) = (bk(0), bk(1), bk(2));
        for j in 0..n {
            let zj = [z0[j], z1[j], z2[j], z3[j]];
            let (mut a0, mut a1, mut a2) = (g0[j], g1[j], g2[j]);
            for r in 0..4 {
                a0 = F::madd(b0[r], zj[r], a0);
                a1 = F::madd(b1[r], zj[r], a1);
                a2 = F::madd(b2[r], zj[r], a2);
            }
            g0[j] = a0;
            g1[j] = a1;
            g2[j] = a2;
        }
        return;
    }
    for k in 0..m {
        let gk = &mut g[k * n..(k + 1) * n];
        let br = [b[k], b[m + k], b[2 * m + k], b[3 * m + k]];
        for j in 0..n {
            let mut a = gk[j];
            a = F::madd(br[0], z0[j], a);
            a = F::madd(br[1], z1[j], a);
            a = F::madd(br[2], z2[j], a);
            a = F::madd(br[3], z3[j], a);
            gk[j] = a;
        }
    }
}

/// Lanes of partial sums per column in [`dots`].
const LANES: usize = 16;

/// Takes the columns two at a time (2·[`LANES`] partial sums live in registers), the last
/// alone when their number is odd.
#[inline(always)]
fn dots_any<F: Madd>(z: &[f64], cols: &[f64], out: &mut [f64]) {
    let n = z.len();
    for (k0, o) in (0..).step_by(2).zip(out.chunks_mut(2)) {
        match o {
            [a] => [*a] = dots_group::<F, 1>(z, &cols[k0 * n..]),
            [a, b] => [*a, *b] = dots_group::<F, 2>(z, &cols[k0 * n..]),
            _ => unreachable!("chunks of at most two"),
        }
    }
}

/// M dot products of `z` with the columns `cols[k·n..(k+1)·n]`, [`LANES`] lanes each.
#[inline(always)]
fn dots_group<F: Madd, const M: usize>(z: &[f64], cols: &[f64]) -> [f64; M] {
    let n = z.len();
    let body = n - n % LANES;
    let mut acc = [[0.0f64; LANES]; M];
    for j0 in (0..body).step_by(LANES) {
        let zc: &[f64; LANES] = z[j0..j0 + LANES].try_into().expect("lane block");
        for (k, a) in acc.iter_mut().enumerate() {
            let c: &[f64; LANES] = cols[k * n + j0..k * n + j0 + LANES]
                .try_into()
                .expect("lane block");
            for q in 0..LANES {
                a[q] = F::madd(zc[q], c[q], a[q]);
            }
        }
    }
    let mut out = [0.0; M];
    for (k, a) in acc.iter_mut().enumerate() {
        for j in body..n {
            a[0] = F::madd(z[j], cols[k * n + j], a[0]);
        }
        out[k] = lane_sum(a);
    }
    out
}

/// Sum of the lanes in a fixed pairwise tree.
#[inline(always)]
fn lane_sum<T: Copy + std::ops::AddAssign, const LL: usize>(a: &mut [T; LL]) -> T {
    let mut width = LL;
    while width > 1 {
        width /= 2;
        for q in 0..width {
            a[q] += a[q + width];
        }
    }
    a[0]
}

#[inline(always)]
fn add_scaled_any<F: Madd>(z: &[f64], b: &[f64], g: &mut [f64]) {
    let n = z.len();
    let mut k = 0;
    // Three sums at once (the pass's three candidate steps) share each load of z.
    while b.len() - k >= 3 {
        let (g0, rest) = g[k * n..].split_at_mut(n);
        let (g1, rest) = rest.split_at_mut(n);
        let g2 = &mut rest[..n];
        let (b0, b1, b2) = (b[k], b[k + 1], b[k + 2]);
        for j in 0..n {
            let zj = z[j];
            g0[j] = F::madd(b0, zj, g0[j]);
            g1[j] = F::madd(b1, zj, g1[j]);
            g2[j] = F::madd(b2, zj, g2[j]);
        }
        k += 3;
    }
    while k < b.len() {
        let bk = b[k];
        if bk != 0.0 {
            for (gj, &zj) in g[k * n..(k + 1) * n].iter_mut().zip(z) {
                *gj = F::madd(bk, zj, *gj);
            }
        }
        k += 1;
    }
}

/// `out[k] = Σ_j z[j]·cols[k·z.len() + j]` in single precision (16 lanes of partial sums,
/// four columns at a time; the tail into lane 0; lanes added pairwise), for the leverage
/// sketch: its result only sets a sampling probability, so f32 is ample, and it moves half
/// the bytes and fills twice the lanes of the f64 product.
///
/// # Panics
/// If `cols` does not hold `out.len()` columns of `z.len()` entries.
#[track_caller]
pub(crate) fn dots_f32(cpu: Cpu, z: &[f32], cols: &[f32], out: &mut [f64]) {
    assert_eq!(cols.len(), z.len() * out.len(), "dots_f32: shape mismatch");
    cpu.run(Dots32 { z, cols, out });
}

struct Dots32<'a> {
    z: &'a [f32],
    cols: &'a [f32],
    out: &'a mut [f64],
}

impl Kernel for Dots32<'_> {
    type Output = ();

    fn generic(self) {
        dots32_any::<false>(self.z, self.cols, self.out);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn avx2_fma(self) {
        dots32_any::<true>(self.z, self.cols, self.out);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn avx512(self) {
        avx512::dots32(self.z, self.cols, self.out);
    }
}

/// The portable form of [`dots_f32`]: the same lanes and order (`FMA` chooses fused
/// multiply-add, only inside functions compiled with the `fma` feature).
#[inline(always)]
fn dots32_any<const FMA: bool>(z: &[f32], cols: &[f32], out: &mut [f64]) {
    let n = z.len();
    let body = n - n % 16;
    for (k, o) in out.iter_mut().enumerate() {
        let c = &cols[k * n..(k + 1) * n];
        let mut lanes = [0.0f32; 16];
        for j0 in (0..body).step_by(16) {
            let zc: &[f32; 16] = z[j0..j0 + 16].try_into().expect("lane block");
            let cc: &[f32; 16] = c[j0..j0 + 16].try_into().expect("lane block");
            for q in 0..16 {
                lanes[q] = if FMA {
                    zc[q].mul_add(cc[q], lanes[q])
                } else {
                    zc[q] * cc[q] + lanes[q]
                };
            }
        }
        for j in body..n {
            lanes[0] = if FMA {
                z[j].mul_add(c[j], lanes[0])
            } else {
                z[j] * c[j] + lanes[0]
            };
        }
        *o = f64::from(lane_sum(&mut lanes));
    }
}

#[cfg(test)]
mod tests;
