//! Kernel rows for the SMO solver: computing them (in parallel, from the tiled rows of
//! `rows.rs`), and keeping the most recently used ones in a byte-budgeted cache with
//! least-recently-used eviction.
//!
//! A cached row holds `k(x_r, x_s)` for every training row `s` (f64, `8·n` bytes). While
//! shrinking is in force only the columns of the active rows are computed; such a row
//! stays valid until the active set grows again (an "epoch" ends), because between two
//! reconstructions the active set only shrinks (Joachims, *Making large-scale SVM
//! learning practical*, 1999; Fan, Chen & Lin, JMLR 6, 2005, section 5).

use std::time::Instant;

use super::rows::Tiles;
use crate::kernel::{Kernel, KernelKind};

/// Marks an empty link or an uncached row.
const NONE: u32 = u32::MAX;

/// Squared Euclidean distance with four independent accumulators (lets the compiler
/// vectorise; the sum order is fixed, so results do not depend on the caller).
#[inline]
fn sq_dist(a: &[f64], b: &[f64]) -> f64 {
    let mut acc = [0.0f64; 4];
    let (ac, bc) = (a.chunks_exact(4), b.chunks_exact(4));
    let (ar, br) = (ac.remainder(), bc.remainder());
    for (p, q) in ac.zip(bc) {
        for k in 0..4 {
            let t = p[k] - q[k];
            acc[k] += t * t;
        }
    }
    let mut tail = 0.0;
    for (p, q) in ar.iter().zip(br) {
        let t = p - q;
        tail += t * t;
    }
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// `k(a, b)` through [`Kernel`], with a vectorisable distance for the kernels that are
/// functions of the Euclidean distance.
#[inline]
pub(super) fn kernel_value(kernel: &Kernel, a: &[f64], b: &[f64]) -> f64 {
    if kernel.kind == KernelKind::Laplacian {
        kernel.eval(a, b)
    } else {
        kernel.from_sq_dist(sq_dist(a, b))
    }
}

/// The training rows, stored contiguously (row-major) and tiled, and the kernel.
pub(super) struct RowSource<'a> {
    /// The kernel.
    pub kernel: Kernel,
    /// `n × d` values, row-major.
    pub x: &'a [f64],
    /// Columns.
    pub d: usize,
    /// Rows.
    pub n: usize,
    /// Every row, tiled for kernel rows.
    pub tiles: Tiles,
}

impl<'a> RowSource<'a> {
    /// The rows of `x` (`n × d`, row-major) with `kernel`.
    pub fn new(kernel: Kernel, x: &'a [f64], d: usize, n: usize) -> Self {
        let mut tiles = Tiles::new(d);
        tiles.gather(x, 0..n);
        RowSource {
            kernel,
            x,
            d,
            n,
            tiles,
        }
    }

    /// Row `r` as a slice.
    #[inline]
    pub fn row(&self, r: usize) -> &[f64] {
        &self.x[r * self.d..(r + 1) * self.d]
    }

    /// `k(x_r, x_s)`.
    #[inline]
    pub fn value(&self, r: usize, s: usize) -> f64 {
        kernel_value(&self.kernel, self.row(r), self.row(s))
    }
}

/// The active rows: their indices (increasing) and a tiled copy of their inputs.
pub(super) struct ActiveRows {
    /// Indices of the active rows, increasing.
    pub idx: Vec<usize>,
    /// Their inputs, tiled (kept equal to `idx` while some rows are inactive).
    pub tiles: Tiles,
}

/// A least-recently-used cache of kernel rows within a memory budget.
pub(super) struct RowCache {
    n: usize,
    capacity: usize,
    rows: Vec<Vec<f64>>,
    owner: Vec<usize>,
    full: Vec<bool>,
    epoch: Vec<u64>,
    prev: Vec<u32>,
    next: Vec<u32>,
    head: u32,
    tail: u32,
    slot_of: Vec<u32>,
    current_epoch: u64,
    scratch: Vec<f64>,
    /// Kernel values computed so far.
    pub evaluations: u64,
    /// Wall-clock seconds spent computing kernel rows.
    pub seconds: f64,
}

impl RowCache {
    /// How many rows of length `n` fit in `bytes` (at most `n`).
    pub fn rows_in_budget(bytes: usize, n: usize) -> usize {
        (bytes / (n.max(1) * std::mem::size_of::<f64>())).min(n)
    }

    /// A cache for rows of length `n` holding at most `capacity` rows (≥ 2, or `n` if
    /// smaller). Memory is allocated as rows are first needed.
    pub fn new(n: usize, capacity: usize) -> Self {
        assert!(capacity >= 2.min(n), "row cache needs room for two rows");
        RowCache {
            n,
            capacity,
            rows: Vec::new(),
            owner: Vec::new(),
            full: Vec::new(),
            epoch: Vec::new(),
            prev: Vec::new(),
            next: Vec::new(),
            head: NONE,
            tail: NONE,
            slot_of: vec![NONE; n],
            current_epoch: 0,
            scratch: vec![0.0; n],
            evaluations: 0,
            seconds: 0.0,
        }
    }

    /// Ends an epoch: rows computed on part of the columns are no longer trusted.
    pub fn new_epoch(&mut self) {
        self.current_epoch += 1;
    }

    /// The row held in `slot`.
    #[inline]
    pub fn row(&self, slot: usize) -> &[f64] {
        &self.rows[slot]
    }

    fn unlink(&mut self, s: u32) {
        let (p, q) = (self.prev[s as usize], self.next[s as usize]);
        if p == NONE {
            self.head = q;
        } else {
            self.next[p as usize] = q;
        }
        if q == NONE {
            self.tail = p;
        } else {
            self.prev[q as usize] = p;
        }
    }

    fn push_front(&mut self, s: u32) {
        self.prev[s as usize] = NONE;
        self.next[s as usize] = self.head;
        if self.head != NONE {
            self.prev[self.head as usize] = s;
        }
        self.head = s;
        if self.tail == NONE {
            self.tail = s;
        }
    }

    /// The slot holding row `r` valid on the columns `active` (all columns when
    /// `all_active`, and then `active.tiles` is not used), computing it if needed. The returned slot stays valid until the
    /// next call that must evict (the least recently used row goes first, so with room
    /// for two rows the previous call's slot survives one more call).
    pub fn fetch(
        &mut self,
        r: usize,
        src: &RowSource,
        active: &ActiveRows,
        all_active: bool,
    ) -> usize {
        let s = self.slot_of[r];
        if s != NONE {
            let su = s as usize;
            self.unlink(s);
            self.push_front(s);
            if self.full[su] || self.epoch[su] == self.current_epoch {
                return su;
            }
            self.compute(su, r, src, active, all_active);
            return su;
        }
        let su = if self.rows.len() < self.capacity {
            // Written once here (NaN: never a kernel value, so a read of a column that
            // was not computed shows), so that the memory is mapped before, and not
            // timed as part of, the row's kernel values.
            let mut row = Vec::with_capacity(self.n);
            row.resize(self.n, f64::NAN);
            self.rows.push(row);
            self.owner.push(r);
            self.full.push(false);
            self.epoch.push(0);
            self.prev.push(NONE);
            self.next.push(NONE);
            self.rows.len() - 1
        } else {
            let victim = self.tail;
            self.unlink(victim);
            self.slot_of[self.owner[victim as usize]] = NONE;
            victim as usize
        };
        self.owner[su] = r;
        self.slot_of[r] = su as u32;
        self.push_front(su as u32);
        self.compute(su, r, src, active, all_active);
        su
    }

    fn compute(&mut self, su: usize, r: usize, src: &RowSource, active: &ActiveRows, all: bool) {
        let t0 = Instant::now();
        let out = &mut self.rows[su];
        let xr = src.row(r);
        if all {
            src.tiles.row_into(&src.kernel, xr, out);
            self.evaluations += self.n as u64;
        } else {
            let m = active.idx.len();
            let scratch = &mut self.scratch[..m];
            active.tiles.row_into(&src.kernel, xr, scratch);
            for (&col, &v) in active.idx.iter().zip(scratch.iter()) {
                out[col] = v;
            }
            self.evaluations += m as u64;
        }
        self.full[su] = all;
        self.epoch[su] = self.current_epoch;
        self.seconds += t0.elapsed().as_secs_f64();
    }
}
