//! The AVX-512 builds of the dot products, with explicit registers (the compiler's own
//! vectorisation mixes scalar and two-lane code): lane q of a column's partial sums is
//! lane q mod 8 (f64) or q (f32) of its registers, so the sums are those of the other
//! builds with fused multiply-add.

use std::arch::x86_64::{
    __m512, __m512d, _mm512_fmadd_pd, _mm512_fmadd_ps, _mm512_loadu_pd, _mm512_loadu_ps,
    _mm512_setzero_pd, _mm512_setzero_ps, _mm512_storeu_pd, _mm512_storeu_ps,
};

use super::{lane_sum, LANES};

/// [`super::dots`]: the columns two at a time, the last alone when their number is odd.
#[target_feature(enable = "avx512f,avx2,fma")]
pub(super) fn dots(z: &[f64], cols: &[f64], out: &mut [f64]) {
    let n = z.len();
    for (k0, o) in (0..).step_by(2).zip(out.chunks_mut(2)) {
        match o {
            [a] => [*a] = group::<1>(z, &cols[k0 * n..]),
            [a, b] => [*a, *b] = group::<2>(z, &cols[k0 * n..]),
            _ => unreachable!("chunks of at most two"),
        }
    }
}

/// M dot products of `z` with the columns `cols[k·n..(k+1)·n]`, two registers
/// ([`LANES`] lanes) of partial sums each, then the tail into lane 0 and the pairwise
/// lane sum.
#[inline]
#[target_feature(enable = "avx512f,avx2,fma")]
fn group<const M: usize>(z: &[f64], cols: &[f64]) -> [f64; M] {
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
        out[k] = lane_sum(&mut lanes);
    }
    out
}

/// [`super::dots_f32`]: four columns at a time, one register of 16 lanes each.
#[target_feature(enable = "avx512f,avx2,fma")]
pub(super) fn dots32(z: &[f32], cols: &[f32], out: &mut [f64]) {
    let n = z.len();
    assert_eq!(cols.len(), n * out.len(), "dots_f32: shape mismatch");
    let body = n - n % 16;
    for (k0, o) in (0..out.len()).step_by(4).zip(out.chunks_mut(4)) {
        let m = o.len();
        let mut acc: [__m512; 4] = [_mm512_setzero_ps(); 4];
        let mut j0 = 0;
        while j0 < body {
            // SAFETY: j0 + 16 ≤ body ≤ n, and column k holds n entries from k·n
            // (asserted above).
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
