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
//! Inputs with `|x| > 10⁶` (or non-finite) are handed to the standard library in groups of
//! eight, so every input gets an accurate answer.
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
/// Group size: a group with any input beyond [`LIMIT`] goes to the standard library.
const GROUP: usize = 8;
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

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn apply_avx2<const SIN: bool>(xs: &mut [f64], scale: f64) {
    apply::<true, SIN>(xs, scale)
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

#[inline(always)]
fn apply<const FMA: bool, const SIN: bool>(xs: &mut [f64], scale: f64) {
    let mut groups = xs.chunks_exact_mut(GROUP);
    for g in &mut groups {
        let g: &mut [f64; GROUP] = g.try_into().expect("exact chunk");
        let mut ok = true;
        for v in g.iter() {
            ok &= v.abs() <= LIMIT;
        }
        if ok {
            for v in g.iter_mut() {
                *v = eval::<FMA, SIN>(*v, scale);
            }
        } else {
            slow::<SIN>(g.as_mut_slice(), scale);
        }
    }
    let rest = groups.into_remainder();
    if rest.iter().all(|v| v.abs() <= LIMIT) {
        for v in rest.iter_mut() {
            *v = eval::<FMA, SIN>(*v, scale);
        }
    } else {
        slow::<SIN>(rest, scale);
    }
}

#[cold]
fn slow<const SIN: bool>(xs: &mut [f64], scale: f64) {
    for v in xs.iter_mut() {
        *v = scale * if SIN { v.sin() } else { v.cos() };
    }
}
