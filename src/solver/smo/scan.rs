//! The passes over the active variables that dominate an SMO iteration: the maximal
//! violating values `m(α)`, `M(α)` (fused with the gradient update `g += δᵢKᵢ + δⱼKⱼ`,
//! as in Fan, Chen & Lin, JMLR 6, 2005, §4 and §6) and the second-order choice of the
//! second variable (their WSS2).
//!
//! The active rows are stored contiguously (see `engine.rs`), so every pass is a
//! straight loop over slices. It runs [`LANES`] positions at a time, each lane keeping
//! its own best value and the position reaching it with a strict comparison (the
//! earliest in that lane wins ties); the lanes are then merged taking the best value and,
//! among equal values, the smallest position. That is exactly the result of one
//! sequential scan with a strict comparison, so the chosen variables do not depend on
//! the lane count, the instruction set or the thread count; no sum is reordered.
//!
//! The two variables of one row share their gradient, so a row contributes at most one
//! candidate to each choice: with `v⁺ = −g − ε ≤ v⁻ = −g + ε` (rounding is monotone),
//! the up-movable `α⁻` beats `α⁺` exactly when `v⁻ > v⁺`, the down-movable `α⁺` always
//! beats `α⁻`, and in WSS2 `α⁺` (whose gap `b` is the larger) always beats `α⁻`. A
//! candidate is coded `2·position + 1` for `α⁻`, `2·position` for `α⁺`.
//!
//! A long pass is split over the crew (`team.rs`) in parts of whole lane groups; the
//! parts' results are merged by the same rule (best value, then smallest code), so the
//! choice is again that of one sequential scan, and the gradient update is the same
//! element-wise operation wherever it runs. In test builds every pass is compared with
//! the scalar scans of `scan/reference.rs`.

use std::ops::Range;

use crate::cpu::{Cpu, Kernel};

/// Positions handled together.
const LANES: usize = 8;
/// Fewest positions a thread takes of a pass split over the crew: a hand-off costs
/// about as much as scanning a few hundred positions.
const MIN_PART: usize = 1024;
/// Code of "no candidate".
pub(super) const NONE: u64 = u64::MAX;

/// `m(α)` with the code of a variable reaching it, and `M(α)` likewise.
#[derive(Clone, Copy, Debug)]
pub(super) struct Extremes {
    /// `m(α)` (−∞ when no variable can move up).
    pub m: f64,
    /// Its variable, or [`NONE`].
    pub i: u64,
    /// `M(α)` (+∞ when no variable can move down).
    pub big_m: f64,
    /// Its variable, or [`NONE`].
    pub j: u64,
}

/// The state of the active rows a pass reads.
#[derive(Clone, Copy)]
pub(super) struct View<'s> {
    /// `α⁺` of each active row.
    pub ap: &'s [f64],
    /// `α⁻` of each active row.
    pub am: &'s [f64],
    /// The box bound C.
    pub c: f64,
    /// The tube half-width ε.
    pub eps: f64,
}

/// Lane-wise best values and codes (maximum when `MAX`, else minimum).
struct Best<const MAX: bool> {
    v: [f64; LANES],
    code: [u64; LANES],
}

impl<const MAX: bool> Best<MAX> {
    fn new() -> Self {
        let start = if MAX {
            f64::NEG_INFINITY
        } else {
            f64::INFINITY
        };
        Best {
            v: [start; LANES],
            code: [NONE; LANES],
        }
    }

    #[inline(always)]
    fn offer(&mut self, q: usize, v: f64, code: u64) {
        let better = if MAX { v > self.v[q] } else { v < self.v[q] };
        self.v[q] = if better { v } else { self.v[q] };
        self.code[q] = if better { code } else { self.code[q] };
    }

    /// The best over lanes, the smallest code among equal values.
    fn merge(&self) -> (f64, u64) {
        (1..LANES).fold((self.v[0], self.code[0]), |best, q| {
            better::<MAX>(best, (self.v[q], self.code[q]))
        })
    }
}

/// The up and down candidates of one row with gradient `g` at position `p`: value and
/// code of each (±∞ and [`NONE`] when the row has none).
#[inline(always)]
fn candidates(p: u64, g: f64, ap: f64, am: f64, c: f64, eps: f64) -> (f64, u64, f64, u64) {
    let vp = -g - eps;
    let vm = -g + eps;
    let (up_p, up_m) = (ap < c, am > 0.0);
    let take_m = up_m & (!up_p | (vm > vp));
    let up_v = if take_m {
        vm
    } else if up_p {
        vp
    } else {
        f64::NEG_INFINITY
    };
    let up_c = if take_m { 2 * p + 1 } else { 2 * p };
    let (down_p, down_m) = (ap > 0.0, am < c);
    let down_v = if down_p {
        vp
    } else if down_m {
        vm
    } else {
        f64::INFINITY
    };
    let down_c = if down_p { 2 * p } else { 2 * p + 1 };
    (up_v, up_c, down_v, down_c)
}

/// The gradient update of a step, `g += di·ki + dj·kj`, over the positions of a pass.
#[derive(Clone, Copy)]
pub(super) struct Update<'s> {
    /// The first variable's kernel row.
    pub ki: &'s [f64],
    /// The second variable's kernel row.
    pub kj: &'s [f64],
    /// The change of `β_i`.
    pub di: f64,
    /// The change of `β_j`.
    pub dj: f64,
}

/// What WSS2 reads besides the state of the rows.
#[derive(Clone, Copy)]
pub(super) struct Second<'s> {
    /// `K_tt` of each position.
    pub diag: &'s [f64],
    /// The first variable's kernel row.
    pub ki: &'s [f64],
    /// `K_ii`.
    pub kii: f64,
    /// `m(α)`.
    pub m: f64,
    /// The curvature used when `a_t ≤ 0`.
    pub tau: f64,
}

impl<'s> View<'s> {
    /// The state of the positions `r`.
    fn part(&self, r: Range<usize>) -> View<'s> {
        View {
            ap: &self.ap[r.clone()],
            am: &self.am[r],
            ..*self
        }
    }
}

impl<'s> Update<'s> {
    fn part(&self, r: Range<usize>) -> Update<'s> {
        Update {
            ki: &self.ki[r.clone()],
            kj: &self.kj[r],
            ..*self
        }
    }
}

impl<'s> Second<'s> {
    fn part(&self, r: Range<usize>) -> Second<'s> {
        Second {
            diag: &self.diag[r.clone()],
            ki: &self.ki[r],
            ..*self
        }
    }
}

/// Gradient update `g += di·ki + dj·kj` when `UPDATE`, then `m(α)`, `M(α)` of the
/// (new) point, in one pass over positions `offset..offset + g.len()`.
#[inline(always)]
fn extremes_generic<const UPDATE: bool>(
    g: &mut [f64],
    u: &Update,
    s: &View,
    offset: usize,
) -> Extremes {
    let n = g.len();
    let (ki, kj, di, dj) = (u.ki, u.kj, u.di, u.dj);
    assert!(
        s.ap.len() == n && s.am.len() == n && ki.len() == n && kj.len() == n,
        "scan: lengths"
    );
    let (c, eps) = (s.c, s.eps);
    let mut up = Best::<true>::new();
    let mut down = Best::<false>::new();
    let full = n - n % LANES;
    let chunks = g[..full]
        .chunks_exact_mut(LANES)
        .zip(s.ap.chunks_exact(LANES))
        .zip(s.am.chunks_exact(LANES))
        .zip(ki.chunks_exact(LANES).zip(kj.chunks_exact(LANES)));
    for (b, (((gc, apc), amc), (kic, kjc))) in chunks.enumerate() {
        let gc: &mut [f64; LANES] = gc.try_into().expect("chunk");
        let apc: &[f64; LANES] = apc.try_into().expect("chunk");
        let amc: &[f64; LANES] = amc.try_into().expect("chunk");
        let kic: &[f64; LANES] = kic.try_into().expect("chunk");
        let kjc: &[f64; LANES] = kjc.try_into().expect("chunk");
        let base = (offset + b * LANES) as u64;
        for q in 0..LANES {
            if UPDATE {
                gc[q] += di * kic[q] + dj * kjc[q];
            }
            let (uv, uc, dv, dc) = candidates(base + q as u64, gc[q], apc[q], amc[q], c, eps);
            up.offer(q, uv, uc);
            down.offer(q, dv, dc);
        }
    }
    for p in full..n {
        if UPDATE {
            g[p] += di * ki[p] + dj * kj[p];
        }
        let (uv, uc, dv, dc) = candidates((offset + p) as u64, g[p], s.ap[p], s.am[p], c, eps);
        up.offer(0, uv, uc);
        down.offer(0, dv, dc);
    }
    let (m, i) = up.merge();
    let (big_m, j) = down.merge();
    Extremes { m, i, big_m, j }
}

/// One row's WSS2 objective `−b²/a` and code, `+∞` when it offers no candidate, from
/// its state `(g, α⁺, α⁻)` and kernel values `(K_tt, K_it)`.
#[inline(always)]
fn wss2_row(
    p: u64,
    (g, ap, am): (f64, f64, f64),
    (d, k): (f64, f64),
    w: &Second,
    s: &View,
) -> (f64, u64) {
    let (c, eps) = (s.c, s.eps);
    let a = w.kii + d - 2.0 * k;
    let a = if a > 0.0 { a } else { w.tau };
    let bp = w.m - (-g - eps);
    let bm = w.m - (-g + eps);
    let take_p = (ap > 0.0) & (bp > 0.0);
    let take_m = (am < c) & (bm > 0.0);
    let b = if take_p { bp } else { bm };
    let o = -b * b / a;
    let o = if take_p | take_m { o } else { f64::INFINITY };
    (o, if take_p { 2 * p } else { 2 * p + 1 })
}

/// WSS2 (Fan, Chen & Lin 2005): among the down-movable variables `t` with `v_t < m`,
/// the one minimising `−(m − v_t)² / a_t`, with `a_t = K_ii + K_tt − 2K_it` (or `tau`
/// when not positive), over positions `offset..offset + g.len()`: its objective and code.
#[inline(always)]
fn wss2_generic(g: &[f64], w: &Second, s: &View, offset: usize) -> (f64, u64) {
    let n = g.len();
    let (diag, ki) = (w.diag, w.ki);
    assert!(
        s.ap.len() == n && s.am.len() == n && diag.len() == n && ki.len() == n,
        "wss2: lengths"
    );
    let mut best = Best::<false>::new();
    let full = n - n % LANES;
    let chunks = g[..full]
        .chunks_exact(LANES)
        .zip(s.ap.chunks_exact(LANES))
        .zip(s.am.chunks_exact(LANES))
        .zip(diag.chunks_exact(LANES).zip(ki.chunks_exact(LANES)));
    for (b, (((gc, apc), amc), (dc, kc))) in chunks.enumerate() {
        let gc: &[f64; LANES] = gc.try_into().expect("chunk");
        let apc: &[f64; LANES] = apc.try_into().expect("chunk");
        let amc: &[f64; LANES] = amc.try_into().expect("chunk");
        let dc: &[f64; LANES] = dc.try_into().expect("chunk");
        let kc: &[f64; LANES] = kc.try_into().expect("chunk");
        let base = (offset + b * LANES) as u64;
        for q in 0..LANES {
            let p = base + q as u64;
            let (o, code) = wss2_row(p, (gc[q], apc[q], amc[q]), (dc[q], kc[q]), w, s);
            best.offer(q, o, code);
        }
    }
    for p in full..n {
        let at = (offset + p) as u64;
        let (o, code) = wss2_row(at, (g[p], s.ap[p], s.am[p]), (diag[p], ki[p]), w, s);
        best.offer(0, o, code);
    }
    best.merge()
}

/// [`extremes_generic`] as a kernel with a build for AVX2 (four f64 a register instead
/// of two; without FMA the operations, and so the results, are the same).
struct ExtremesPart<'a, 's, const UPDATE: bool> {
    g: &'a mut [f64],
    u: &'a Update<'s>,
    s: &'a View<'s>,
    offset: usize,
}

impl<const UPDATE: bool> Kernel for ExtremesPart<'_, '_, UPDATE> {
    type Output = Extremes;

    fn generic(self) -> Extremes {
        extremes_generic::<UPDATE>(self.g, self.u, self.s, self.offset)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn avx2(self) -> Extremes {
        extremes_generic::<UPDATE>(self.g, self.u, self.s, self.offset)
    }
}

/// [`wss2_generic`] as a kernel, built like [`ExtremesPart`].
struct Wss2Part<'a, 's> {
    g: &'a [f64],
    w: &'a Second<'s>,
    s: &'a View<'s>,
    offset: usize,
}

impl Kernel for Wss2Part<'_, '_> {
    type Output = (f64, u64);

    fn generic(self) -> (f64, u64) {
        wss2_generic(self.g, self.w, self.s, self.offset)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn avx2(self) -> (f64, u64) {
        wss2_generic(self.g, self.w, self.s, self.offset)
    }
}

/// [`extremes_generic`], compiled for AVX2 when the CPU has it.
fn extremes_part<const UPDATE: bool>(
    g: &mut [f64],
    u: &Update,
    s: &View,
    offset: usize,
) -> Extremes {
    Cpu::detect().run(ExtremesPart::<UPDATE> { g, u, s, offset })
}

/// [`wss2_generic`], dispatched like [`extremes_part`].
fn wss2_part(g: &[f64], w: &Second, s: &View, offset: usize) -> (f64, u64) {
    Cpu::detect().run(Wss2Part { g, w, s, offset })
}

/// The better of two candidates (lanes or parts): the best value, the smallest code
/// among equal values (the order of one sequential scan); a candidate coded [`NONE`]
/// never wins.
pub(super) fn better<const MAX: bool>(a: (f64, u64), b: (f64, u64)) -> (f64, u64) {
    let wins = if MAX { b.0 > a.0 } else { b.0 < a.0 };
    if b.1 != NONE && (a.1 == NONE || wins || (b.0 == a.0 && b.1 < a.1)) {
        b
    } else {
        a
    }
}

mod split;
pub(super) use split::{extremes, wss2};

#[cfg(test)]
mod reference;
#[cfg(test)]
mod tests;
