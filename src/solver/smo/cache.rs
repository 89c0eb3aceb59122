//! Kernel rows for the SMO solver: computing them in parallel, and keeping the most
//! recently used ones in a byte-budgeted cache with least-recently-used eviction.
//!
//! A cached row holds `k(x_r, x_s)` for every training row `s` (f64, `8·n` bytes). While
//! shrinking is in force only the columns of the active rows are computed; such a row
//! stays valid until the active set grows again (an "epoch" ends), because between two
//! reconstructions the active set only shrinks (Joachims, *Making large-scale SVM
//! learning practical*, 1999; Fan, Chen & Lin, JMLR 6, 2005, section 5).

use std::time::Instant;

use rayon::prelude::*;

use crate::kernel::{Kernel, KernelKind};

/// Columns per parallel task when a row is computed; each entry is independent, so the
/// result does not depend on the number of threads.
const CHUNK: usize = 512;
/// Rows shorter than this are computed on the calling thread (parallel overhead).
const PARALLEL_MIN: usize = 2048;
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

/// The training rows, stored contiguously (row-major), and the kernel.
pub(super) struct RowSource<'a> {
    /// The kernel.
    pub kernel: Kernel,
    /// `n × d` values, row-major.
    pub x: &'a [f64],
    /// Columns.
    pub d: usize,
    /// Rows.
    pub n: usize,
}

impl RowSource<'_> {
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

    /// Fills `out[s] = k(x_r, x_s)` for every `s`.
    fn fill_all(&self, r: usize, out: &mut [f64]) {
        let xr = self.row(r);
        let work = |(c, chunk): (usize, &mut [f64])| {
            let base = c * CHUNK;
            for (k, o) in chunk.iter_mut().enumerate() {
                *o = kernel_value(&self.kernel, xr, self.row(base + k));
            }
        };
        if out.len() >= PARALLEL_MIN {
            out.par_chunks_mut(CHUNK).enumerate().for_each(work);
        } else {
            out.chunks_mut(CHUNK).enumerate().for_each(work);
        }
    }

    /// Fills `out[s] = k(x_r, x_s)` for `s` in `cols`, through the compact `scratch`.
    fn fill_some(&self, r: usize, cols: &[usize], scratch: &mut [f64], out: &mut [f64]) {
        let xr = self.row(r);
        let scratch = &mut scratch[..cols.len()];
        let work = |(s, c): (&mut [f64], &[usize])| {
            for (o, &col) in s.iter_mut().zip(c) {
                *o = kernel_value(&self.kernel, xr, self.row(col));
            }
        };
        if cols.len() >= PARALLEL_MIN {
            scratch
                .par_chunks_mut(CHUNK)
                .zip(cols.par_chunks(CHUNK))
                .for_each(work);
        } else {
            scratch
                .chunks_mut(CHUNK)
                .zip(cols.chunks(CHUNK))
                .for_each(work);
        }
        for (&col, &v) in cols.iter().zip(scratch.iter()) {
            out[col] = v;
        }
    }
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
    /// `all_active`), computing it if needed. The returned slot stays valid until the
    /// next call that must evict (the least recently used row goes first, so with room
    /// for two rows the previous call's slot survives one more call).
    pub fn fetch(
        &mut self,
        r: usize,
        src: &RowSource,
        active: &[usize],
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
            self.rows.push(vec![0.0; self.n]);
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

    fn compute(&mut self, su: usize, r: usize, src: &RowSource, active: &[usize], all: bool) {
        let t0 = Instant::now();
        let out = &mut self.rows[su];
        if all {
            src.fill_all(r, out);
            self.evaluations += self.n as u64;
        } else {
            src.fill_some(r, active, &mut self.scratch, out);
            self.evaluations += active.len() as u64;
        }
        self.full[su] = all;
        self.epoch[su] = self.current_epoch;
        self.seconds += t0.elapsed().as_secs_f64();
    }
}
