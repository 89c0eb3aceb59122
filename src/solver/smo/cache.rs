//! Kernel rows for the SMO solver: computing them (in parallel, from the tiled rows of
//! `rows.rs`), and keeping the most recently used ones in a byte-budgeted cache with
//! least-recently-used eviction.
//!
//! A cached row holds `k(x_r, x_s)` for the active rows `s`, in their order (f64, at
//! most `8·n` bytes), with the source's diagonal shift added at `s = r`. While shrinking is in force only the active columns are computed;
//! such a row stays usable until the active set grows again (an "epoch" ends), because
//! between two reconstructions the active set only shrinks (Joachims, *Making
//! large-scale SVM learning practical*, 1999; Fan, Chen & Lin, JMLR 6, 2005, section 5):
//! after a shrink it is compacted to the remaining rows when next used.

use std::time::Instant;

use super::rows::Tiles;
use super::team::Crew;
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
    /// Added to the diagonal of the kernel matrix: 1/(2C) for the squared loss, whose
    /// dual is the linear loss's with `K + I/(2C)` (Ho & Lin, JMLR 13, 2012, §2), else 0.
    pub shift: f64,
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
            shift: 0.0,
        }
    }

    /// The same rows with `shift` added to the kernel matrix's diagonal.
    pub fn with_shift(self, shift: f64) -> Self {
        RowSource { shift, ..self }
    }

    /// `k(x_r, x_r)` plus the diagonal shift.
    pub fn diagonal(&self, r: usize) -> f64 {
        self.value(r, r) + self.shift
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

/// The active rows: their indices (increasing), which rows are active, a tiled copy of
/// their inputs, and the layout their kernel rows are stored in.
pub(super) struct ActiveRows {
    /// Indices of the active rows, increasing.
    pub idx: Vec<usize>,
    /// Whether each training row is active.
    pub mask: Vec<bool>,
    /// Their inputs, tiled (kept equal to `idx` while some rows are inactive).
    pub tiles: Tiles,
}

/// A kernel row's layout: `(epoch, version)`; version 0 of any epoch is every row in
/// order, so a row computed on every row has epoch [`ANY`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Layout {
    epoch: u64,
    version: u32,
}

/// Epoch of a row computed on every training row.
const ANY: u64 = u64::MAX;

/// A least-recently-used cache of kernel rows within a memory budget.
///
/// A row is stored compactly for the active set it was computed (or last used) on: entry
/// `p` is `k(x_r, x_{idx[p]})`. Between two gradient reconstructions (an epoch) the
/// active set only shrinks, each shrink making a new layout version; a row of an older
/// version of the same epoch is filtered in place to the current active set (Joachims
/// 1999 and Fan, Chen & Lin 2005, §5, keep rows valid the same way; here the rows are
/// compacted so that the passes over them are contiguous).
pub(super) struct RowCache {
    n: usize,
    capacity: usize,
    rows: Vec<Vec<f64>>,
    owner: Vec<usize>,
    layout: Vec<Layout>,
    prev: Vec<u32>,
    next: Vec<u32>,
    head: u32,
    tail: u32,
    slot_of: Vec<u32>,
    epoch: u64,
    /// The members of each layout version of this epoch (version 0: every row, empty
    /// list), freed when no cached row uses them and they are not current.
    members: Vec<Vec<u32>>,
    /// Cached rows stored in each version of this epoch.
    users: Vec<usize>,
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
            layout: Vec::new(),
            prev: Vec::new(),
            next: Vec::new(),
            head: NONE,
            tail: NONE,
            slot_of: vec![NONE; n],
            epoch: 0,
            members: vec![Vec::new()],
            users: vec![0],
            evaluations: 0,
            seconds: 0.0,
        }
    }

    fn version(&self) -> u32 {
        (self.members.len() - 1) as u32
    }

    /// Starts an epoch with every row active: rows computed on part of the rows are no
    /// longer usable.
    pub fn new_epoch(&mut self) {
        self.epoch += 1;
        self.members = vec![Vec::new()];
        self.users = vec![0];
    }

    /// Records that the active set shrank to `idx` (a subset of the current one).
    pub fn shrunk(&mut self, idx: &[usize]) {
        let v = self.members.len() - 1;
        if v > 0 && self.users[v] == 0 {
            self.members[v] = Vec::new();
        }
        self.members.push(idx.iter().map(|&r| r as u32).collect());
        self.users.push(0);
    }

    /// The row held in `slot` (one entry per active row).
    #[inline]
    pub fn row(&self, slot: usize) -> &[f64] {
        &self.rows[slot]
    }

    /// Stops counting `slot` as a user of its layout version (version 0, every row, is
    /// not counted: it needs no member list).
    fn release(&mut self, slot: usize) {
        self.release_layout(self.layout[slot]);
    }

    /// Stops counting one user of layout `l` (see [`RowCache::release`]).
    fn release_layout(&mut self, l: Layout) {
        let v = l.version as usize;
        if l.epoch == self.epoch && v > 0 {
            self.users[v] -= 1;
            if self.users[v] == 0 && v + 1 < self.members.len() {
                self.members[v] = Vec::new();
            }
        }
    }

    /// Records `slot` as stored for the current version (on every row when `full`).
    fn acquire(&mut self, slot: usize, full: bool) {
        let version = self.version();
        self.layout[slot] = Layout {
            epoch: if full { ANY } else { self.epoch },
            version,
        };
        if !full && version > 0 {
            self.users[version as usize] += 1;
        }
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

    /// The slot holding row `r` on the current active rows, computing or filtering it
    /// if needed. The returned slot stays valid until the next call that must evict (the
    /// least recently used row goes first, so with room for two rows the previous call's
    /// slot survives one more call).
    pub fn fetch(&mut self, r: usize, src: &RowSource, active: &ActiveRows, crew: &Crew) -> usize {
        let s = self.slot_of[r];
        if s != NONE {
            let su = s as usize;
            self.unlink(s);
            self.push_front(s);
            let l = self.layout[su];
            let current = self.version();
            let same_epoch = l.epoch == self.epoch || (l.epoch == ANY && l.version == 0);
            if same_epoch && l.version == current {
                return su;
            }
            if same_epoch {
                // Filter before releasing the old version: releasing its last user frees
                // the member list the filter reads.
                self.filter(su, l.version as usize, active);
                self.release_layout(l);
                self.acquire(su, false);
            } else {
                self.release_layout(l);
                self.compute(su, r, src, active, crew);
            }
            return su;
        }
        let su = if self.rows.len() < self.capacity {
            // Written once here, so that the memory is mapped before, and not timed as
            // part of, the row's kernel values.
            let mut row = Vec::with_capacity(self.n);
            row.resize(self.n, f64::NAN);
            self.rows.push(row);
            self.owner.push(r);
            self.layout.push(Layout {
                epoch: ANY - 1,
                version: 0,
            });
            self.prev.push(NONE);
            self.next.push(NONE);
            self.rows.len() - 1
        } else {
            let victim = self.tail;
            self.unlink(victim);
            self.release(victim as usize);
            self.slot_of[self.owner[victim as usize]] = NONE;
            victim as usize
        };
        self.owner[su] = r;
        self.slot_of[r] = su as u32;
        self.push_front(su as u32);
        self.compute(su, r, src, active, crew);
        su
    }

    /// Keeps, in order, the entries of the row in `su` (stored for version `v`, whose
    /// member list must still be held) whose rows are still active. Branch-free: every entry is copied to the next free place,
    /// which advances only for a kept row (the place never passes the entry read).
    fn filter(&mut self, su: usize, v: usize, active: &ActiveRows) {
        let row = &mut self.rows[su];
        let mut out = 0;
        if v == 0 {
            for (p, &keep) in active.mask.iter().enumerate() {
                row[out] = row[p];
                out += usize::from(keep);
            }
        } else {
            for (p, &r) in self.members[v].iter().enumerate() {
                row[out] = row[p];
                out += usize::from(active.mask[r as usize]);
            }
        }
        assert_eq!(
            out,
            active.idx.len(),
            "kernel row filtered to the wrong length"
        );
        row.truncate(out);
    }

    fn compute(&mut self, su: usize, r: usize, src: &RowSource, active: &ActiveRows, crew: &Crew) {
        let t0 = Instant::now();
        let m = active.idx.len();
        let all = m == self.n;
        let out = &mut self.rows[su];
        // Never reallocates: the capacity is n.
        out.resize(m, 0.0);
        let xr = src.row(r);
        if all {
            src.tiles.row_into(crew, &src.kernel, xr, out);
        } else {
            active.tiles.row_into(crew, &src.kernel, xr, out);
        }
        if src.shift != 0.0 {
            // Rows are fetched for active variables only, so row r is among the columns.
            let at = if all {
                Ok(r)
            } else {
                active.idx.binary_search(&r)
            };
            if let Ok(p) = at {
                out[p] += src.shift;
            }
        }
        self.evaluations += m as u64;
        self.acquire(su, all);
        self.seconds += t0.elapsed().as_secs_f64();
    }
}
