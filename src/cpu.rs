//! Run-time CPU dispatch: the one place that decides which compiled build of a kernel
//! runs, and the only place that calls into builds compiled for instruction sets beyond
//! the baseline target (AVX2, AVX2 with fused multiply–add, AVX-512F on x86-64).
//!
//! A [`Cpu`] is a capability: its fields are private and the only ways to obtain one are
//! [`Cpu::detect`] (run-time detection, cached) and [`Cpu::capped`] on one already held,
//! which can only lower its level. So holding a `Cpu` of some [`Level`] proves that the
//! CPU runs that level, and `Cpu::run` can call the matching build of a `Kernel`
//! safely. A kernel states its builds as the methods of `Kernel`; a build for a level
//! it does not provide falls back to the level below, down to the generic build.

use std::sync::atomic::{AtomicU8, Ordering};

/// Instruction-set levels, each including every level before it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Level {
    /// The baseline target (any CPU).
    Generic,
    /// x86-64 with AVX2.
    Avx2,
    /// x86-64 with AVX2 and FMA.
    Avx2Fma,
    /// x86-64 with AVX-512F, AVX2 and FMA.
    Avx512,
}

/// What this CPU runs, as found by run-time detection (see the module docs).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Cpu {
    level: Level,
}

/// The detected level, 0 until the first detection.
static DETECTED: AtomicU8 = AtomicU8::new(0);

impl Cpu {
    /// The widest level this CPU runs (detected on the first call, then cached).
    pub fn detect() -> Cpu {
        let level = match DETECTED.load(Ordering::Relaxed) {
            1 => Level::Generic,
            2 => Level::Avx2,
            3 => Level::Avx2Fma,
            4 => Level::Avx512,
            _ => {
                let level = probe();
                DETECTED.store(level as u8 + 1, Ordering::Relaxed);
                level
            }
        };
        Cpu { level }
    }

    /// The level this capability allows.
    pub fn level(self) -> Level {
        self.level
    }

    /// This capability lowered to at most `most` (for tests and benchmarks that compare
    /// the builds of one kernel; it never raises the level).
    pub fn capped(self, most: Level) -> Cpu {
        Cpu {
            level: self.level.min(most),
        }
    }

    /// Runs the widest build of `kernel` that this capability allows.
    #[inline(always)]
    pub(crate) fn run<K: Kernel>(self, kernel: K) -> K::Output {
        match self.level {
            Level::Generic => kernel.generic(),
            #[cfg(target_arch = "x86_64")]
            // SAFETY: a `Cpu` of this level exists only if detection found AVX2.
            Level::Avx2 => unsafe { kernel.avx2() },
            #[cfg(target_arch = "x86_64")]
            // SAFETY: a `Cpu` of this level exists only if detection found AVX2 and FMA.
            Level::Avx2Fma => unsafe { kernel.avx2_fma() },
            #[cfg(target_arch = "x86_64")]
            // SAFETY: a `Cpu` of this level exists only if detection found AVX-512F,
            // AVX2 and FMA.
            Level::Avx512 => unsafe { kernel.avx512() },
            #[cfg(not(target_arch = "x86_64"))]
            _ => kernel.generic(),
        }
    }
}

/// The widest level the CPU reports.
fn probe() -> Level {
    #[cfg(target_arch = "x86_64")]
    {
        let avx2 = is_x86_feature_detected!("avx2");
        let fma = avx2 && is_x86_feature_detected!("fma");
        if fma && is_x86_feature_detected!("avx512f") {
            return Level::Avx512;
        }
        if fma {
            return Level::Avx2Fma;
        }
        if avx2 {
            return Level::Avx2;
        }
    }
    Level::Generic
}

/// A computation with one build per [`Level`], run by [`Cpu::run`]. Implementations
/// override the builds they have, each with `#[target_feature(enable = …)]` for its
/// level, so that its body is compiled for (and may safely call functions compiled for)
/// that level; the others fall back to the level below.
pub(crate) trait Kernel: Sized {
    /// What the computation returns.
    type Output;

    /// The build for any CPU.
    fn generic(self) -> Self::Output;

    /// The build for [`Level::Avx2`].
    ///
    /// # Safety
    /// The CPU must support AVX2.
    #[cfg(target_arch = "x86_64")]
    #[inline]
    unsafe fn avx2(self) -> Self::Output {
        self.generic()
    }

    /// The build for [`Level::Avx2Fma`].
    ///
    /// # Safety
    /// The CPU must support AVX2 and FMA.
    #[cfg(target_arch = "x86_64")]
    #[inline]
    unsafe fn avx2_fma(self) -> Self::Output {
        // SAFETY: the caller guarantees AVX2 (and FMA).
        unsafe { self.avx2() }
    }

    /// The build for [`Level::Avx512`].
    ///
    /// # Safety
    /// The CPU must support AVX-512F, AVX2 and FMA.
    #[cfg(target_arch = "x86_64")]
    #[inline]
    unsafe fn avx512(self) -> Self::Output {
        // SAFETY: the caller guarantees AVX2 and FMA (and AVX-512F).
        unsafe { self.avx2_fma() }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Detection agrees with the standard library's probe and is stable; capping never
    /// raises the level (common practice: a capability can only be narrowed).
    #[test]
    fn detection_is_cached_and_capping_only_lowers() {
        let cpu = Cpu::detect();
        assert_eq!(cpu, Cpu::detect());
        assert_eq!(cpu.level(), probe());
        for most in [Level::Generic, Level::Avx2, Level::Avx2Fma, Level::Avx512] {
            let capped = cpu.capped(most);
            assert!(capped.level() <= most && capped.level() <= cpu.level());
        }
        assert_eq!(cpu.capped(Level::Avx512), cpu);
    }
}
