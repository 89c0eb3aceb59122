//! Vectorisable cosine and sine of f64 slices, in place.
//!
//! # Algorithm
//!
//! Cody–Waite range reduction (Cody & Waite, *Software Manual for the Elementary
//! Functions*, 1980) followed by a polynomial:
//!
//! 1. `q = 2·round(x/π − ½) + 1` (cosine) or `q = 2·round(x/π)` (sine), the rounding done
//!    with the magic constant `1.5·2⁵²` so that the parity of the rounded integer is read
//!    from the low bit of its bit pattern (no integer conversion, no branch);
//! 2. `r = x − q·π/2 ∈ [−π/2, π/2]`, with π/2 split in three parts (`P1 + P2 + P3`, the
//!    first two with 31 significant bits) so that `q·P1` and `q·P2` are exact for
//!    `|q| < 2²²`;
//! 3. `cos x = ±sin r`, `sin x = ±sin r`, the sign from the parity of the rounded integer;
//! 4. `sin r` by its Taylor polynomial to degree 21 evaluated by Horner's rule in `r²`
//!    (truncation error below `(π/2)²³/23! ≈ 1.2·10⁻¹⁸`).
//!
//! Inputs with `|x| > 10⁶` or infinite are handed to the standard library (with their
//! neighbours, in groups of four on the AVX2 path), so every input gets an accurate
//! answer; NaN stays NaN.
//!
//! # Accuracy
//!
//! The largest absolute difference from `f64::cos` / `f64::sin` measured by the tests
//! (`tests/features.rs`, a dense grid on `[−300, 300]` and random points up to `10⁶`) is
//! `2.2·10⁻¹⁶` (one unit in the last place of values near 1) on both code paths; the
//! tests accept at most `1e-15`.
//!
//! # Code paths
//!
//! On x86-64 with AVX2 and FMA (detected once at run time with
//! `is_x86_feature_detected!` and cached) the same algorithm is compiled with those
//! features and fused multiply–adds; elsewhere a generic build is used. The two paths may
//! differ in the last bit; on one machine the choice is fixed, so results are
//! reproducible.

use std::sync::atomic::{AtomicU8, Ordering};

/// Which compiled version of the kernel runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CosPath {
    /// Portable build (any CPU).
    Generic,
    /// x86-64 build with AVX2 and FMA enabled.
    Avx2Fma,
}

/// Above this magnitude the standard library takes over (keeps `|q| < 2²¹`).
const LIMIT: f64 = 1.0e6;
/// `1.5·2⁵²`: adding and subtracting it rounds to the nearest integer.
const MAGIC: f64 = 6_755_399_441_055_744.0;
const FRAC_1_PI: f64 = std::f64::consts::FRAC_1_PI;
/// π/2 = P1 + P2 + P3 (fdlibm's `pio2_1`, `pio2_2`, `pio2_2t`).
const P1: f64 = f64::from_bits(0x3FF9_21FB_5440_0000);
const P2: f64 = f64::from_bits(0x3DD0_B461_1A60_0000);
const P3: f64 = f64::from_bits(0x3BA3_198A_2E03_7073);

// Taylor coefficients of sin: (−1)^k / (2k+1)!.
const S3: f64 = -1.0 / 6.0;
const S5: f64 = 1.0 / 120.0;
const S7: f64 = -1.0 / 5_040.0;
const S9: f64 = 1.0 / 362_880.0;
const S11: f64 = -1.0 / 39_916_800.0;
const S13: f64 = 1.0 / 6_227_020_800.0;
const S15: f64 = -1.0 / 1_307_674_368_000.0;
const S17: f64 = 1.0 / 355_687_428_096_000.0;
const S19: f64 = -1.0 / 121_645_100_408_832_000.0;
const S21: f64 = 1.0 / 51_090_942_171_709_440_000.0;

static DETECTED: AtomicU8 = AtomicU8::new(0);

/// The code path this CPU uses (detected on first call, then cached).
pub fn detected_path() -> CosPath {
    match DETECTED.load(Ordering::Relaxed) {
        1 => CosPath::Generic,
        2 => CosPath::Avx2Fma,
        _ => {
            let path = detect();
            let code = if path == CosPath::Avx2Fma { 2 } else { 1 };
            DETECTED.store(code, Ordering::Relaxed);
            path
        }
    }
}

#[cfg(target_arch = "x86_64")]
fn detect() -> CosPath {
    if is_x86_feature_detected!("avx2") && is_x86_feature_detected!("fma") {
        CosPath::Avx2Fma
    } else {
        CosPath::Generic
    }
}

#[cfg(not(target_arch = "x86_64"))]
fn detect() -> CosPath {
    CosPath::Generic
}

/// Replaces every `x` in `xs` by `scale·cos(x)`.
pub fn cos_in_place(xs: &mut [f64], scale: f64) {
    run(detected_path(), xs, scale, false);
}

/// Replaces every `x` in `xs` by `scale·sin(x)`.
pub fn sin_in_place(xs: &mut [f64], scale: f64) {
    run(detected_path(), xs, scale, true);
}

/// [`cos_in_place`] (or the sine when `sine` is true) on a chosen code path, for tests
/// and benchmarks.
///
/// # Panics
/// If `path` is [`CosPath::Avx2Fma`] and this CPU does not support it.
pub fn eval_with(path: CosPath, xs: &mut [f64], scale: f64, sine: bool) {
    assert!(
        path == CosPath::Generic || detected_path() == CosPath::Avx2Fma,
        "the AVX2+FMA cosine was requested on a CPU without AVX2 and FMA"
    );
    run(path, xs, scale, sine);
}

fn run(path: CosPath, xs: &mut [f64], scale: f64, sine: bool) {
    match (path, sine) {
        #[cfg(target_arch = "x86_64")]
        (CosPath::Avx2Fma, false) => {
            // SAFETY: the path is only chosen when the CPU reports AVX2 and FMA.
            unsafe { apply_avx2::<false>(xs, scale) }
        }
        #[cfg(target_arch = "x86_64")]
        (CosPath::Avx2Fma, true) => {
            // SAFETY: as above.
            unsafe { apply_avx2::<true>(xs, scale) }
        }
        (_, false) => apply::<false, false>(xs, scale),
        (_, true) => apply::<false, true>(xs, scale),
    }
}

/// The AVX2+FMA path: four values per step with explicit intrinsics (the same
/// operations as [`eval`] with fused multiply–adds, so the scalar tail agrees bit for bit).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn apply_avx2<const SIN: bool>(xs: &mut [f64], scale: f64) {
    use std::arch::x86_64::*;
    let limit = _mm256_set1_pd(LIMIT);
    let abs_mask = _mm256_castsi256_pd(_mm256_set1_epi64x(i64::MAX));
    let inv_pi = _mm256_set1_pd(FRAC_1_PI);
    let magic = _mm256_set1_pd(MAGIC);
    let (p1, p2, p3) = (_mm256_set1_pd(P1), _mm256_set1_pd(P2), _mm256_set1_pd(P3));
    let vscale = _mm256_set1_pd(scale);
    let sign = _mm256_set1_epi64x(i64::MIN);
    let mut quads = xs.chunks_exact_mut(4);
    for c in &mut quads {
        let ptr = c.as_mut_ptr();
        let x = _mm256_loadu_pd(ptr);
        // NaN compares false and goes through the polynomial, which returns NaN.
        let big = _mm256_cmp_pd::<_CMP_GT_OQ>(_mm256_and_pd(x, abs_mask), limit);
        if _mm256_movemask_pd(big) != 0 {
            slow::<SIN>(c, scale);
            continue;
        }
        let t = if SIN {
            _mm256_mul_pd(x, inv_pi)
        } else {
            _mm256_fmadd_pd(x, inv_pi, _mm256_set1_pd(-0.5))
        };
        let shifted = _mm256_add_pd(t, magic);
        let n = _mm256_sub_pd(shifted, magic);
        let q = if SIN {
            _mm256_add_pd(n, n)
        } else {
            _mm256_add_pd(_mm256_add_pd(n, n), _mm256_set1_pd(1.0))
        };
        let r = _mm256_fnmadd_pd(q, p1, x);
        let r = _mm256_fnmadd_pd(q, p2, r);
        let r = _mm256_fnmadd_pd(q, p3, r);
        let r2 = _mm256_mul_pd(r, r);
        let mut p = _mm256_set1_pd(S21);
        for k in [S19, S17, S15, S13, S11, S9, S7, S5, S3] {
            p = _mm256_fmadd_pd(p, r2, _mm256_set1_pd(k));
        }
        let sv = _mm256_mul_pd(_mm256_fmadd_pd(_mm256_mul_pd(r, r2), p, r), vscale);
        let odd = _mm256_slli_epi64::<63>(_mm256_castpd_si256(shifted));
        let flip = if SIN {
            odd
        } else {
            _mm256_xor_si256(odd, sign)
        };
        let out = _mm256_castsi256_pd(_mm256_xor_si256(_mm256_castpd_si256(sv), flip));
        _mm256_storeu_pd(ptr, out);
    }
    for v in quads.into_remainder() {
        *v = if v.abs() <= LIMIT || v.is_nan() {
            eval::<true, SIN>(*v, scale)
        } else {
            scale * if SIN { v.sin() } else { v.cos() }
        };
    }
}

#[inline(always)]
fn madd<const FMA: bool>(a: f64, b: f64, c: f64) -> f64 {
    if FMA {
        a.mul_add(b, c)
    } else {
        a * b + c
    }
}

/// `scale·cos(x)` (or `scale·sin(x)`) for `|x| ≤ LIMIT`; see the module docs.
#[inline(always)]
fn eval<const FMA: bool, const SIN: bool>(x: f64, scale: f64) -> f64 {
    // t rounded to the nearest integer n; q = 2n + 1 (cos) or 2n (sin).
    let t = if SIN {
        x * FRAC_1_PI
    } else {
        madd::<FMA>(x, FRAC_1_PI, -0.5)
    };
    let shifted = t + MAGIC;
    let n = shifted - MAGIC;
    let q = if SIN { n + n } else { n + n + 1.0 };
    let r = madd::<FMA>(-q, P1, x);
    let r = madd::<FMA>(-q, P2, r);
    let r = madd::<FMA>(-q, P3, r);
    let r2 = r * r;
    let mut p = S21;
    p = madd::<FMA>(p, r2, S19);
    p = madd::<FMA>(p, r2, S17);
    p = madd::<FMA>(p, r2, S15);
    p = madd::<FMA>(p, r2, S13);
    p = madd::<FMA>(p, r2, S11);
    p = madd::<FMA>(p, r2, S9);
    p = madd::<FMA>(p, r2, S7);
    p = madd::<FMA>(p, r2, S5);
    p = madd::<FMA>(p, r2, S3);
    let s = madd::<FMA>(r * r2, p, r) * scale;
    // cos x = (−1)^(n+1) sin r; sin x = (−1)^n sin r.
    let odd = shifted.to_bits() & 1;
    let flip = if SIN { odd } else { odd ^ 1 };
    f64::from_bits(s.to_bits() ^ (flip << 63))
}

/// The generic path: one pass for the largest magnitude, then a plain loop the compiler
/// vectorises for the target (values beyond [`LIMIT`] or infinite go to the standard
/// library; NaN goes through the polynomial, which returns NaN).
fn apply<const FMA: bool, const SIN: bool>(xs: &mut [f64], scale: f64) {
    let largest = xs.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    if largest <= LIMIT {
        for v in xs.iter_mut() {
            *v = eval::<FMA, SIN>(*v, scale);
        }
    } else {
        for v in xs.iter_mut() {
            *v = if v.abs() <= LIMIT || v.is_nan() {
                eval::<FMA, SIN>(*v, scale)
            } else {
                scale * if SIN { v.sin() } else { v.cos() }
            };
        }
    }
}

#[cold]
fn slow<const SIN: bool>(xs: &mut [f64], scale: f64) {
    for v in xs.iter_mut() {
        *v = scale * if SIN { v.sin() } else { v.cos() };
    }
}
