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
//! depends only on the inputs and the code path, never on threads. On x86-64 the CPU is
//! probed at run time and the loops are compiled for AVX-512 or AVX2 with fused
//! multiply-add; the generic path (no FMA) rounds differently but sums in the same order.

/// Code path for the row kernels, fixed once per process.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum Path {
    /// Plain multiply and add, any CPU.
    Generic,
    /// AVX2 with fused multiply-add.
    #[cfg(target_arch = "x86_64")]
    Avx2,
    /// AVX-512F with fused multiply-add.
    #[cfg(target_arch = "x86_64")]
    Avx512,
}

/// The best path this CPU runs.
pub(crate) fn detected() -> Path {
    #[cfg(target_arch = "x86_64")]
    {
        let avx2 = is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma");
        if avx2 && is_x86_feature_detected!("avx512f") {
            return Path::Avx512;
        }
        if avx2 {
            return Path::Avx2;
        }
    }
    Path::Generic
}

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
pub(crate) fn dots(path: Path, z: &[f64], cols: &[f64], out: &mut [f64]) {
    assert_eq!(cols.len(), z.len() * out.len(), "dots: shape mismatch");
    match path {
        Path::Generic => dots_any::<Plain>(z, cols, out),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detected` chose this path only if the CPU has AVX2 and FMA.
        Path::Avx2 => unsafe { dots_avx2(z, cols, out) },
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `detected` chose this path only if the CPU has AVX-512F, AVX2 and FMA.
        Path::Avx512 => unsafe { dots_avx512(z, cols, out) },
    }
}

/// `g[k·z.len() + j] += b[k]·z[j]` for the M = `b.len()` sums stored one after another
/// in `g`.
///
/// # Panics
/// If `g` does not hold `b.len()` sums of `z.len()` entries.
#[track_caller]
pub(crate) fn add_scaled(path: Path, z: &[f64], b: &[f64], g: &mut [f64]) {
    assert_eq!(g.len(), z.len() * b.len(), "add_scaled: shape mismatch");
    match path {
        Path::Generic => add_scaled_any::<Plain>(z, b, g),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: as in `dots`.
        Path::Avx2 => unsafe { add_scaled_avx2(z, b, g) },
        #[cfg(target_arch = "x86_64")]
        // SAFETY: as in `dots`.
        Path::Avx512 => unsafe { add_scaled_avx512(z, b, g) },
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
pub(crate) fn add_scaled4(path: Path, z: [&[f64]; 4], b: &[f64], g: &mut [f64]) {
    let n = z[0].len();
    assert!(
        z.iter().all(|r| r.len() == n),
        "add_scaled4: rows differ in length"
    );
    assert_eq!(b.len() % 4, 0, "add_scaled4: four rows of scales");
    assert_eq!(g.len(), n * (b.len() / 4), "add_scaled4: shape mismatch");
    match path {
        Path::Generic => add_scaled4_any::<Plain>(z, b, g),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: as in `dots`.
        Path::Avx2 => unsafe { add_scaled4_avx2(z, b, g) },
        #[cfg(target_arch = "x86_64")]
        // SAFETY: as in `dots`.
        Path::Avx512 => unsafe { add_scaled4_avx512(z, b, g) },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn add_scaled4_avx2(z: [&[f64]; 4], b: &[f64], g: &mut [f64]) {
    add_scaled4_any::<Fused>(z, b, g);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn add_scaled4_avx512(z: [&[f64]; 4], b: &[f64], g: &mut [f64]) {
    add_scaled4_any::<Fused>(z, b, g);
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

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn dots_avx2(z: &[f64], cols: &[f64], out: &mut [f64]) {
    dots_any::<Fused>(z, cols, out);
}

/// [`dots_any`] with explicit AVX-512 registers (the compiler's own vectorisation mixes
/// scalar and two-lane code): lane q of a column's partial sums is lane q mod 8 of
/// register q / 8, so the sums are those of the other paths with FMA.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn dots_avx512(z: &[f64], cols: &[f64], out: &mut [f64]) {
    let n = z.len();
    for (k0, o) in (0..).step_by(2).zip(out.chunks_mut(2)) {
        match o {
            [a] => [*a] = avx512::group::<1>(z, &cols[k0 * n..]),
            [a, b] => [*a, *b] = avx512::group::<2>(z, &cols[k0 * n..]),
            _ => unreachable!("chunks of at most two"),
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx512 {
    use std::arch::x86_64::{
        __m512d, _mm512_fmadd_pd, _mm512_loadu_pd, _mm512_setzero_pd, _mm512_storeu_pd,
    };

    use super::LANES;

    /// M dot products of `z` with the columns `cols[k·n..(k+1)·n]`, two registers
    /// ([`LANES`] lanes) of partial sums each, then the tail into lane 0 and the pairwise
    /// lane sum.
    #[inline]
    #[target_feature(enable = "avx512f,avx2,fma")]
    pub(super) fn group<const M: usize>(z: &[f64], cols: &[f64]) -> [f64; M] {
        let n = z.len();
        let body = n - n % LANES;
        assert!(cols.len() >= M * n, "dots: shape mismatch");
        let mut acc: [[__m512d; 2]; M] = [[_mm512_setzero_pd(); 2]; M];
        let zp = z.as_ptr();
        let cp = cols.as_ptr();
        let mut j0 = 0;
        while j0 < body {
            for r in 0..2 {
                // SAFETY: j0 + 8·r + 8 ≤ body ≤ n, and column k holds n entries from k·n.
                unsafe {
                    let zv = _mm512_loadu_pd(zp.add(j0 + 8 * r));
                    for (k, a) in acc.iter_mut().enumerate() {
                        let cv = _mm512_loadu_pd(cp.add(k * n + j0 + 8 * r));
                        a[r] = _mm512_fmadd_pd(zv, cv, a[r]);
                    }
                }
            }
            j0 += LANES;
        }
        let mut out = [0.0; M];
        for (k, a) in acc.iter().enumerate() {
            let mut lanes = [0.0f64; LANES];
            for (r, v) in a.iter().enumerate() {
                // SAFETY: 8·r + 8 ≤ 16 = LANES entries of `lanes`.
                unsafe { _mm512_storeu_pd(lanes.as_mut_ptr().add(8 * r), *v) };
            }
            for j in body..n {
                lanes[0] = z[j].mul_add(cols[k * n + j], lanes[0]);
            }
            out[k] = super::lane_sum(&mut lanes);
        }
        out
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn add_scaled_avx2(z: &[f64], b: &[f64], g: &mut [f64]) {
    add_scaled_any::<Fused>(z, b, g);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn add_scaled_avx512(z: &[f64], b: &[f64], g: &mut [f64]) {
    add_scaled_any::<Fused>(z, b, g);
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
pub(crate) fn dots_f32(path: Path, z: &[f32], cols: &[f32], out: &mut [f64]) {
    assert_eq!(cols.len(), z.len() * out.len(), "dots_f32: shape mismatch");
    match path {
        Path::Generic => dots32_any::<false>(z, cols, out),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: as in `dots`.
        Path::Avx2 => unsafe { dots32_avx2(z, cols, out) },
        #[cfg(target_arch = "x86_64")]
        // SAFETY: as in `dots`.
        Path::Avx512 => unsafe { dots32_avx512(z, cols, out) },
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn dots32_avx2(z: &[f32], cols: &[f32], out: &mut [f64]) {
    dots32_any::<true>(z, cols, out);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f,avx2,fma")]
unsafe fn dots32_avx512(z: &[f32], cols: &[f32], out: &mut [f64]) {
    use std::arch::x86_64::{
        __m512, _mm512_fmadd_ps, _mm512_loadu_ps, _mm512_setzero_ps, _mm512_storeu_ps,
    };
    let n = z.len();
    let body = n - n % 16;
    for (k0, o) in (0..out.len()).step_by(4).zip(out.chunks_mut(4)) {
        let m = o.len();
        let mut acc: [__m512; 4] = [_mm512_setzero_ps(); 4];
        let mut j0 = 0;
        while j0 < body {
            // SAFETY: j0 + 16 ≤ body ≤ n, and column k holds n entries from k·n.
            unsafe {
                let zv = _mm512_loadu_ps(z.as_ptr().add(j0));
                for (q, a) in acc.iter_mut().enumerate().take(m) {
                    let cv = _mm512_loadu_ps(cols.as_ptr().add((k0 + q) * n + j0));
                    *a = _mm512_fmadd_ps(zv, cv, *a);
                }
            }
            j0 += 16;
        }
        for (q, a) in acc.iter().enumerate().take(m) {
            let mut lanes = [0.0f32; 16];
            // SAFETY: 16 entries of `lanes`.
            unsafe { _mm512_storeu_ps(lanes.as_mut_ptr(), *a) };
            for j in body..n {
                lanes[0] = z[j].mul_add(cols[(k0 + q) * n + j], lanes[0]);
            }
            o[q] = f64::from(lane_sum(&mut lanes));
        }
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
mod tests {
    use super::*;

    fn paths() -> Vec<Path> {
        let mut p = vec![Path::Generic];
        #[cfg(target_arch = "x86_64")]
        {
            if detected() != Path::Generic {
                p.push(Path::Avx2);
            }
            if detected() == Path::Avx512 {
                p.push(Path::Avx512);
            }
        }
        p
    }

    /// Every path against plain sums in exact-enough arithmetic: integer-valued inputs
    /// small enough that every product and partial sum is exact in f64, so each path must
    /// give the exact value whatever its order or rounding (common practice).
    #[test]
    fn every_path_gives_exact_sums_on_integer_data() {
        for n in [1usize, 7, 16, 33, 1025] {
            let z: Vec<f64> = (0..n).map(|j| ((j * 7 + 3) % 11) as f64 - 5.0).collect();
            for m in [1usize, 2, 3, 8, 10] {
                let cols: Vec<f64> = (0..m * n)
                    .map(|j| ((j * 5 + 1) % 13) as f64 - 6.0)
                    .collect();
                let want: Vec<f64> = (0..m)
                    .map(|k| (0..n).map(|j| z[j] * cols[k * n + j]).sum())
                    .collect();
                let b: Vec<f64> = (0..m).map(|k| k as f64 - 1.0).collect();
                let mut want_g = cols.clone();
                for k in 0..m {
                    for j in 0..n {
                        want_g[k * n + j] += b[k] * z[j];
                    }
                }
                let z32: Vec<f32> = z.iter().map(|&v| v as f32).collect();
                let cols32: Vec<f32> = cols.iter().map(|&v| v as f32).collect();
                for path in paths() {
                    // Integers below 2^24 are exact in f32 too.
                    let mut out32 = vec![0.0; m];
                    dots_f32(path, &z32, &cols32, &mut out32);
                    assert_eq!(out32, want, "dots_f32 n {n} m {m} {path:?}");
                    let mut out = vec![0.0; m];
                    dots(path, &z, &cols, &mut out);
                    assert_eq!(out, want, "dots n {n} m {m} {path:?}");
                    let mut g = cols.clone();
                    add_scaled(path, &z, &b, &mut g);
                    assert_eq!(g, want_g, "add_scaled n {n} m {m} {path:?}");
                }
            }
        }
    }

    /// Four rows at once against four single-row calls, bit for bit, on data whose
    /// rounding matters (the same operations in the same order must give the same bits).
    #[test]
    fn four_rows_at_once_equal_four_single_rows() {
        for m in [1usize, 2, 3] {
            let n = 37;
            let rows: Vec<Vec<f64>> = (0..4)
                .map(|r| {
                    (0..n)
                        .map(|j| ((r * 31 + j) as f64 * 0.7381).sin() / 3.0)
                        .collect()
                })
                .collect();
            let b: Vec<f64> = (0..4 * m).map(|q| (q as f64 * 1.37).cos() * 5.1).collect();
            let g0: Vec<f64> = (0..m * n).map(|q| (q as f64 * 0.11).tan()).collect();
            for path in paths() {
                let mut one = g0.clone();
                for r in 0..4 {
                    add_scaled(path, &rows[r], &b[r * m..(r + 1) * m], &mut one);
                }
                let mut four = g0.clone();
                let z: [&[f64]; 4] = std::array::from_fn(|r| &rows[r][..]);
                add_scaled4(path, z, &b, &mut four);
                assert_eq!(one, four, "m {m} {path:?}");
            }
        }
    }
}
