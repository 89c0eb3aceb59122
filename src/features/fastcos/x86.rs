//! The x86-64 code paths of the fast cosine: explicit AVX2+FMA and AVX-512 intrinsics
//! performing, lane by lane, the operations of [`super::eval`] with fused multiply–adds.
//! Every operation is an IEEE 754 operation rounded once (fused multiply–add included), so
//! the two paths and the scalar tail give the same bits for the same input.
//!
//! The AVX-512 intrinsics are stable since Rust 1.89, the manifest's `rust-version`.

use std::arch::x86_64::*;

use super::{accurate, FRAC_1_PI, LIMIT, MAGIC, PI_A, PI_B, SIN_P};

/// The AVX2+FMA path: four values per vector, sixteen per step.
///
/// # Panics
/// If `SHIFT` and `shift.len() != xs.len()`.
#[target_feature(enable = "avx2,fma")]
pub(super) fn apply_avx2<const SIN: bool, const SHIFT: bool>(
    xs: &mut [f64],
    shift: &[f64],
    scale: f64,
) {
    assert!(!SHIFT || shift.len() == xs.len(), "shifted cosine: lengths");
    let limit = _mm256_set1_pd(LIMIT);
    let abs_mask = _mm256_castsi256_pd(_mm256_set1_epi64x(i64::MAX));
    let inv_pi = _mm256_set1_pd(FRAC_1_PI);
    let magic = _mm256_set1_pd(MAGIC);
    let half = _mm256_set1_pd(0.5);
    let (pi_a, pi_b) = (_mm256_set1_pd(PI_A), _mm256_set1_pd(PI_B));
    let k = _mm256_set1_pd(if SIN { scale } else { -scale });
    let len = xs.len();
    let quads = len / 4 * 4;
    let xp = xs.as_mut_ptr();
    // One group of four values, `$y` already shifted and within LIMIT.
    macro_rules! quad {
        ($y:expr) => {{
            let y = $y;
            let shifted = if SIN {
                _mm256_fmadd_pd(y, inv_pi, magic)
            } else {
                _mm256_add_pd(_mm256_fmsub_pd(y, inv_pi, half), magic)
            };
            let n = _mm256_sub_pd(shifted, magic);
            let h = if SIN { n } else { _mm256_add_pd(n, half) };
            let r = _mm256_fnmadd_pd(h, pi_a, y);
            let r = _mm256_fnmadd_pd(h, pi_b, r);
            let s = _mm256_mul_pd(r, r);
            let mut p = _mm256_set1_pd(SIN_P[7]);
            for c in [6, 5, 4, 3, 2, 1, 0] {
                p = _mm256_fmadd_pd(p, s, _mm256_set1_pd(SIN_P[c]));
            }
            let v = _mm256_mul_pd(_mm256_fmadd_pd(_mm256_mul_pd(r, s), p, r), k);
            let flip = _mm256_slli_epi64::<63>(_mm256_castpd_si256(shifted));
            _mm256_castsi256_pd(_mm256_xor_si256(_mm256_castpd_si256(v), flip))
        }};
    }
    // Loads four values at offset `$i`, adding the shift.
    macro_rules! load {
        ($i:expr) => {{
            let y = _mm256_loadu_pd(xp.add($i));
            if SHIFT {
                _mm256_add_pd(y, _mm256_loadu_pd(shift.as_ptr().add($i)))
            } else {
                y
            }
        }};
    }
    // Lanes beyond LIMIT (NaN compares false and goes through the polynomial, which
    // returns NaN).
    macro_rules! big {
        ($y:expr) => {
            _mm256_cmp_pd::<_CMP_GT_OQ>(_mm256_and_pd($y, abs_mask), limit)
        };
    }
    let mut i = 0;
    // SAFETY: for all loads and stores in the loop, every offset + 4 <= quads <= len, and
    // shift.len() == len when SHIFT (asserted above).
    unsafe {
        while i < quads {
            // Sixteen values per step: four independent chains keep both FMA pipes busy.
            if i + 16 <= quads {
                let (y0, y1, y2, y3) = (load!(i), load!(i + 4), load!(i + 8), load!(i + 12));
                let any = _mm256_or_pd(
                    _mm256_or_pd(big!(y0), big!(y1)),
                    _mm256_or_pd(big!(y2), big!(y3)),
                );
                if _mm256_movemask_pd(any) == 0 {
                    let (o0, o1, o2, o3) = (quad!(y0), quad!(y1), quad!(y2), quad!(y3));
                    _mm256_storeu_pd(xp.add(i), o0);
                    _mm256_storeu_pd(xp.add(i + 4), o1);
                    _mm256_storeu_pd(xp.add(i + 8), o2);
                    _mm256_storeu_pd(xp.add(i + 12), o3);
                    i += 16;
                    continue;
                }
            }
            let y = load!(i);
            if _mm256_movemask_pd(big!(y)) != 0 {
                let mut ys = [0.0; 8];
                _mm256_storeu_pd(ys.as_mut_ptr(), y);
                slow::<SIN>(&ys, std::slice::from_raw_parts_mut(xp.add(i), 4), scale);
            } else {
                _mm256_storeu_pd(xp.add(i), quad!(y));
            }
            i += 4;
        }
    }
    for (j, v) in xs[quads..].iter_mut().enumerate() {
        let y = if SHIFT { *v + shift[quads + j] } else { *v };
        *v = accurate::<true, SIN>(y, scale);
    }
}

/// A group of four or eight with a huge or infinite argument: every value of `out` by the
/// standard library, from the arguments in `ys`.
#[cold]
fn slow<const SIN: bool>(ys: &[f64; 8], out: &mut [f64], scale: f64) {
    for (o, y) in out.iter_mut().zip(ys) {
        *o = scale * if SIN { y.sin() } else { y.cos() };
    }
}

/// The AVX-512 path: eight values per vector, thirty-two per step; the last `len % 8`
/// values go through [`apply_avx2`].
///
/// # Panics
/// If `SHIFT` and `shift.len() != xs.len()`.
#[target_feature(enable = "avx512f,avx2,fma")]
pub(super) fn apply_avx512<const SIN: bool, const SHIFT: bool>(
    xs: &mut [f64],
    shift: &[f64],
    scale: f64,
) {
    assert!(!SHIFT || shift.len() == xs.len(), "shifted cosine: lengths");
    let limit = _mm512_set1_pd(LIMIT);
    let inv_pi = _mm512_set1_pd(FRAC_1_PI);
    let magic = _mm512_set1_pd(MAGIC);
    let half = _mm512_set1_pd(0.5);
    let (pi_a, pi_b) = (_mm512_set1_pd(PI_A), _mm512_set1_pd(PI_B));
    let k = _mm512_set1_pd(if SIN { scale } else { -scale });
    let len = xs.len();
    let octs = len / 8 * 8;
    let xp = xs.as_mut_ptr();
    // One group of eight values, `$y` already shifted and within LIMIT.
    macro_rules! oct {
        ($y:expr) => {{
            let y = $y;
            let shifted = if SIN {
                _mm512_fmadd_pd(y, inv_pi, magic)
            } else {
                _mm512_add_pd(_mm512_fmsub_pd(y, inv_pi, half), magic)
            };
            let n = _mm512_sub_pd(shifted, magic);
            let h = if SIN { n } else { _mm512_add_pd(n, half) };
            let r = _mm512_fnmadd_pd(h, pi_a, y);
            let r = _mm512_fnmadd_pd(h, pi_b, r);
            let s = _mm512_mul_pd(r, r);
            let mut p = _mm512_set1_pd(SIN_P[7]);
            for c in [6, 5, 4, 3, 2, 1, 0] {
                p = _mm512_fmadd_pd(p, s, _mm512_set1_pd(SIN_P[c]));
            }
            let v = _mm512_mul_pd(_mm512_fmadd_pd(_mm512_mul_pd(r, s), p, r), k);
            let flip = _mm512_slli_epi64::<63>(_mm512_castpd_si512(shifted));
            _mm512_castsi512_pd(_mm512_xor_si512(_mm512_castpd_si512(v), flip))
        }};
    }
    // Loads eight values at offset `$i`, adding the shift.
    macro_rules! load {
        ($i:expr) => {{
            let y = _mm512_loadu_pd(xp.add($i));
            if SHIFT {
                _mm512_add_pd(y, _mm512_loadu_pd(shift.as_ptr().add($i)))
            } else {
                y
            }
        }};
    }
    // Mask of the lanes beyond LIMIT (NaN compares false, as on the AVX2 path).
    macro_rules! big {
        ($y:expr) => {
            _mm512_cmp_pd_mask::<_CMP_GT_OQ>(_mm512_abs_pd($y), limit)
        };
    }
    let mut i = 0;
    // SAFETY: for all loads and stores in the loop, every offset + 8 <= octs <= len, and
    // shift.len() == len when SHIFT (asserted above).
    unsafe {
        while i < octs {
            if i + 32 <= octs {
                let (y0, y1, y2, y3) = (load!(i), load!(i + 8), load!(i + 16), load!(i + 24));
                if big!(y0) | big!(y1) | big!(y2) | big!(y3) == 0 {
                    let (o0, o1, o2, o3) = (oct!(y0), oct!(y1), oct!(y2), oct!(y3));
                    _mm512_storeu_pd(xp.add(i), o0);
                    _mm512_storeu_pd(xp.add(i + 8), o1);
                    _mm512_storeu_pd(xp.add(i + 16), o2);
                    _mm512_storeu_pd(xp.add(i + 24), o3);
                    i += 32;
                    continue;
                }
            }
            let y = load!(i);
            if big!(y) != 0 {
                let mut ys = [0.0; 8];
                _mm512_storeu_pd(ys.as_mut_ptr(), y);
                slow::<SIN>(&ys, std::slice::from_raw_parts_mut(xp.add(i), 8), scale);
            } else {
                _mm512_storeu_pd(xp.add(i), oct!(y));
            }
            i += 8;
        }
    }
    let rest_shift = if SHIFT { &shift[octs..] } else { shift };
    apply_avx2::<SIN, SHIFT>(&mut xs[octs..], rest_shift, scale);
}
