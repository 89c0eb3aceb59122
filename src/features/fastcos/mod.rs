//! Vectorisable cosine and sine of f64 slices, in place.
//!
//! # Algorithm
//!
//! Cody–Waite range reduction (Cody & Waite, *Software Manual for the Elementary
//! Functions*, 1980) followed by a polynomial:
//!
//! 1. `h = round(x/π − ½) + ½` (cosine) or `h = round(x/π)` (sine), the rounding done
//!    with the magic constant `1.5·2⁵²` so that the parity of the rounded integer is read
//!    from the low bit of its bit pattern (no integer conversion, no branch);
//! 2. `r = x − h·π ∈ [−π/2, π/2]`, with π split in two parts (`PI_A` with 31 significant
//!    bits, so `h·PI_A` is exact for `|h| < 2²¹` and so is `x − h·PI_A` for `|x| ≥ 1`,
//!    then `PI_B`; `PI_A + PI_B` is π within `7·10⁻²⁷`): the rounding falls on `r`
//!    itself, where its effect is damped by `|cos r|` (for `|x| < 1` the cosine's
//!    `x − ½PI_A` is rounded near `|r| = π/2`, where `sin r` is flat);
//! 3. `cos x = ∓sin r`, `sin x = ±sin r`, the sign from the parity of the rounded integer;
//! 4. `sin r = r + r³·P(r²)` with `P` of degree 7: the Chebyshev interpolant of
//!    `(sin r − r)/r³` in `r²` on `|r| ≤ 1.5708` (Chebyshev economisation; Fox & Parker,
//!    *Chebyshev Polynomials in Numerical Analysis*, 1968), evaluated by Horner's rule;
//!    with its coefficients rounded to f64 it is within `3.6·10⁻¹⁷` of `sin r` there
//!    (checked in 80-digit arithmetic).
//!
//! The output scale and an optional per-value shift (the phase of a random Fourier
//! feature, added on load) are applied in the same pass, so a feature map needs one pass
//! over its product. The SIMD paths work on four vectors per step (four independent
//! dependency chains): sixteen values with AVX2, thirty-two with AVX-512.
//!
//! Inputs with `|x| > 10⁶` or infinite are handed to the standard library (with their
//! neighbours, in groups of four or eight on the SIMD paths), so every input gets an
//! accurate answer; NaN stays NaN.
//!
//! # Accuracy
//!
//! The largest absolute difference from `f64::cos` / `f64::sin` measured by the tests
//! (`tests/features.rs`, a dense grid on `[−300, 300]` and random points up to `10⁶`) is
//! `2.2·10⁻¹⁶` (one unit in the last place of values near 1) on every code path; the
//! tests accept at most `1e-15`.
//!
//! # Code paths
//!
//! On x86-64 the CPU is probed once at run time ([`crate::cpu::Cpu`], cached) and
//! the widest supported build of the same algorithm runs: AVX-512F (eight values a
//! vector), else AVX2 with FMA, else a generic build. The two SIMD paths perform the
//! same correctly rounded operations (fused multiply–adds included) lane by lane, so they
//! agree bit for bit (tested); the generic path, without fused multiply–adds, may differ
//! in the last bit. On one machine the choice is fixed, so results are reproducible.

use crate::cpu::{Cpu, Kernel, Level};

#[cfg(target_arch = "x86_64")]
mod x86;

/// Which compiled version of the kernel runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CosPath {
    /// Portable build (any CPU).
    Generic,
    /// x86-64 build with AVX2 and FMA enabled.
    Avx2Fma,
    /// x86-64 build with AVX-512F (and AVX2, FMA) enabled.
    Avx512,
}

/// Above this magnitude the standard library takes over (keeps `|h| < 2²⁰`).
const LIMIT: f64 = 1.0e6;
/// `1.5·2⁵²`: adding and subtracting it rounds to the nearest integer.
const MAGIC: f64 = 6_755_399_441_055_744.0;
const FRAC_1_PI: f64 = std::f64::consts::FRAC_1_PI;

/// π = PI_A + PI_B (+ 7.0·10⁻²⁷); PI_A is twice fdlibm's `pio2_1`.
const PI_A: f64 = f64::from_bits(0x4009_21FB_5440_0000);
const PI_B: f64 = f64::from_bits(0x3DE0_B461_1A62_6331);
/// `sin r ≈ r + r³·Σₖ SIN_P[k]·r²ᵏ` on `|r| ≤ 1.5708` (see the module docs).
const SIN_P: [f64; 8] = [
    f64::from_bits(0xBFC5_5555_5555_5555),
    f64::from_bits(0x3F81_1111_1111_1107),
    f64::from_bits(0xBF2A_01A0_1A01_8AAD),
    f64::from_bits(0x3EC7_1DE3_A545_66FB),
    f64::from_bits(0xBE5A_E645_5A1D_5FA6),
    f64::from_bits(0x3DE6_1240_15B0_757D),
    f64::from_bits(0xBD6A_E513_8A52_DEF5),
    f64::from_bits(0x3CE8_9A48_2F31_D76C),
];

impl CosPath {
    /// The CPU level this path needs.
    fn level(self) -> Level {
        match self {
            CosPath::Generic => Level::Generic,
            CosPath::Avx2Fma => Level::Avx2Fma,
            CosPath::Avx512 => Level::Avx512,
        }
    }
}

/// The code path this CPU uses (detected on first call, then cached).
pub fn detected_path() -> CosPath {
    match Cpu::detect().level() {
        Level::Avx512 => CosPath::Avx512,
        Level::Avx2Fma => CosPath::Avx2Fma,
        Level::Avx2 | Level::Generic => CosPath::Generic,
    }
}

/// Whether this CPU can run `path` (the generic path runs everywhere).
pub fn path_supported(path: CosPath) -> bool {
    Cpu::detect().level() >= path.level()
}

/// Replaces every `x` in `xs` by `scale·cos(x)`.
pub fn cos_in_place(xs: &mut [f64], scale: f64) {
    run(detected_path(), xs, None, scale, false);
}

/// Replaces every `x` in `xs` by `scale·sin(x)`.
pub fn sin_in_place(xs: &mut [f64], scale: f64) {
    run(detected_path(), xs, None, scale, true);
}

/// Replaces every `x` in `xs` by `scale·cos(x + shift[i])` in one pass (the shift is added
/// first, one rounding), for example a random Fourier feature `√(2/D)·cos(wᵀx + b)` from
/// the product `wᵀx` and the phase `b`.
///
/// # Panics
/// If `shift.len() != xs.len()`.
#[track_caller]
pub fn cos_shifted_in_place(xs: &mut [f64], shift: &[f64], scale: f64) {
    check_shift(xs, shift);
    run(detected_path(), xs, Some(shift), scale, false);
}

/// Replaces every `x` in `xs` by `scale·sin(x + shift[i])` in one pass (the shift is added
/// first, one rounding). The sine needs two operations fewer than the cosine, so
/// `cos(x + b)` runs faster as `sin(x + (b + π/2))` when the shifts are fixed.
///
/// # Panics
/// If `shift.len() != xs.len()`.
#[track_caller]
pub fn sin_shifted_in_place(xs: &mut [f64], shift: &[f64], scale: f64) {
    check_shift(xs, shift);
    run(detected_path(), xs, Some(shift), scale, true);
}

/// [`cos_in_place`] (or [`sin_in_place`] when `sine` is true) on a chosen code path, for
/// tests and benchmarks.
///
/// # Panics
/// If this CPU cannot run `path` (see [`path_supported`]).
pub fn eval_with(path: CosPath, xs: &mut [f64], scale: f64, sine: bool) {
    check_path(path);
    run(path, xs, None, scale, sine);
}

/// [`cos_shifted_in_place`] (or [`sin_shifted_in_place`] when `sine` is true) on a chosen
/// code path, for tests and benchmarks.
///
/// # Panics
/// If `shift.len() != xs.len()`, or if this CPU cannot run `path` (see
/// [`path_supported`]).
#[track_caller]
pub fn eval_shifted_with(path: CosPath, xs: &mut [f64], shift: &[f64], scale: f64, sine: bool) {
    check_path(path);
    check_shift(xs, shift);
    run(path, xs, Some(shift), scale, sine);
}

#[track_caller]
fn check_shift(xs: &[f64], shift: &[f64]) {
    assert_eq!(
        xs.len(),
        shift.len(),
        "shifted cosine: {} values but {} shifts",
        xs.len(),
        shift.len()
    );
}

fn check_path(path: CosPath) {
    assert!(
        path_supported(path),
        "the {path:?} cosine was requested on a CPU that cannot run it"
    );
}

/// Dispatches on the code path, the function and the presence of shifts (`shift`, when
/// given, has as many values as `xs`: checked by the callers; `path` is supported:
/// checked by the callers or detected).
fn run(path: CosPath, xs: &mut [f64], shift: Option<&[f64]>, scale: f64, sine: bool) {
    let cpu = Cpu::detect().capped(path.level());
    let b = shift.unwrap_or(&[]);
    match (sine, shift.is_some()) {
        (false, false) => cpu.run(Apply::<false, false> {
            xs,
            shift: b,
            scale,
        }),
        (false, true) => cpu.run(Apply::<false, true> {
            xs,
            shift: b,
            scale,
        }),
        (true, false) => cpu.run(Apply::<true, false> {
            xs,
            shift: b,
            scale,
        }),
        (true, true) => cpu.run(Apply::<true, true> {
            xs,
            shift: b,
            scale,
        }),
    }
}

/// One call of the kernel: `scale·cos` (or `scale·sin` when `SIN`) of `xs` (plus `shift`
/// when `SHIFT`), in place.
struct Apply<'a, const SIN: bool, const SHIFT: bool> {
    xs: &'a mut [f64],
    shift: &'a [f64],
    scale: f64,
}

impl<const SIN: bool, const SHIFT: bool> Kernel for Apply<'_, SIN, SHIFT> {
    type Output = ();

    fn generic(self) {
        apply::<SIN, SHIFT>(self.xs, self.shift, self.scale);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn avx2_fma(self) {
        x86::apply_avx2::<SIN, SHIFT>(self.xs, self.shift, self.scale);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn avx512(self) {
        x86::apply_avx512::<SIN, SHIFT>(self.xs, self.shift, self.scale);
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

/// `scale·cos(y)` (or `scale·sin(y)`) for `|y| ≤ LIMIT`; see the module docs.
#[inline(always)]
fn eval<const FMA: bool, const SIN: bool>(y: f64, scale: f64) -> f64 {
    let shifted = if SIN {
        madd::<FMA>(y, FRAC_1_PI, MAGIC)
    } else {
        madd::<FMA>(y, FRAC_1_PI, -0.5) + MAGIC
    };
    let n = shifted - MAGIC;
    let h = if SIN { n } else { n + 0.5 };
    let r = madd::<FMA>(-h, PI_A, y);
    let r = madd::<FMA>(-h, PI_B, r);
    let s = r * r;
    let mut p = SIN_P[7];
    p = madd::<FMA>(p, s, SIN_P[6]);
    p = madd::<FMA>(p, s, SIN_P[5]);
    p = madd::<FMA>(p, s, SIN_P[4]);
    p = madd::<FMA>(p, s, SIN_P[3]);
    p = madd::<FMA>(p, s, SIN_P[2]);
    p = madd::<FMA>(p, s, SIN_P[1]);
    p = madd::<FMA>(p, s, SIN_P[0]);
    // sin y = (−1)ⁿ sin r; cos y = (−1)ⁿ⁺¹ sin r (the extra sign rides on the scale).
    let k = if SIN { scale } else { -scale };
    let v = madd::<FMA>(r * s, p, r) * k;
    f64::from_bits(v.to_bits() ^ ((shifted.to_bits() & 1) << 63))
}

/// The generic path: one pass for the largest magnitude, then a plain loop the compiler
/// vectorises for the target (values beyond [`LIMIT`] or infinite go to the standard
/// library; NaN goes through the polynomial, which returns NaN).
fn apply<const SIN: bool, const SHIFT: bool>(xs: &mut [f64], shift: &[f64], scale: f64) {
    let arg = |x: f64, i: usize| if SHIFT { x + shift[i] } else { x };
    let largest = xs
        .iter()
        .enumerate()
        .fold(0.0f64, |m, (i, v)| m.max(arg(*v, i).abs()));
    if largest <= LIMIT {
        for (i, v) in xs.iter_mut().enumerate() {
            *v = eval::<false, SIN>(arg(*v, i), scale);
        }
    } else {
        for (i, v) in xs.iter_mut().enumerate() {
            *v = accurate::<false, SIN>(arg(*v, i), scale);
        }
    }
}

/// [`eval`] within [`LIMIT`] (and for NaN), the standard library beyond it.
#[inline(always)]
fn accurate<const FMA: bool, const SIN: bool>(y: f64, scale: f64) -> f64 {
    if y.abs() <= LIMIT || y.is_nan() {
        eval::<FMA, SIN>(y, scale)
    } else {
        scale * if SIN { y.sin() } else { y.cos() }
    }
}
