//! Kernel rows from a tiled, feature-major copy of the training rows.
//!
//! SMO needs one kernel row `k(x_r, x_s)` over all active `s` at a time (Platt, 1998;
//! Fan, Chen & Lin, JMLR 6, 2005), a matrix–vector shape. Stored row by row, every entry
//! would be a short dot-like loop over the d inputs and a horizontal sum, which does not
//! vectorise across entries. Here the rows are copied into tiles of [`TILE`] rows, input
//! by input (value `k` of the tile's row `j` at `k·TILE + j`), so that one pass over the
//! inputs updates eight independent entries with the same instructions (a register-
//! blocked matrix–vector product; Goto & van de Geijn, ACM TOMS 34, 2008, on blocking),
//! and the kernel function is then applied to the whole tile in one tight loop.
//!
//! Distances are accumulated from explicit differences, `Σ_k (x_rk − x_sk)²` (or
//! `Σ_k |x_rk − x_sk|` for the Laplacian kernel), in the order k = 0, 1, …, d−1: the same
//! operations in the same order as [`Kernel::eval`], so every value equals it bit for bit,
//! whatever the kernel (the Matérn forms take `√r²`, for which the product form
//! `‖x‖² + ‖y‖² − 2x·y` would turn rounding into visible error for nearly equal rows).
//! Each entry depends only on its own row, so splitting a row over the threads of the
//! crew (`team.rs`) does not change any result.

use super::team::Crew;
use crate::cpu::{Cpu, Kernel as Build};
use crate::kernel::{Kernel, KernelKind};

/// Rows per tile (a multiple of [`LANES`]).
pub(super) const TILE: usize = 256;
/// Entries computed together in registers.
const LANES: usize = 16;
/// Work (row length × (inputs + 8), the 8 standing for the kernel function's cost per
/// entry) below which a kernel row is computed on the calling thread alone: a hand-off
/// to the crew costs about as much as a few dozen entries.
const PARALLEL_WORK: usize = 256 * 16;
/// Rows per task when a kernel row is split over the crew: parts of a tile that start on
/// a multiple of [`LANES`].
const SPANS: [usize; 3] = [TILE / 4, TILE / 2, TILE];
/// Tasks per thread aimed at when splitting a kernel row (some slack for a thread that
/// starts late).
const TASKS_PER_THREAD: usize = 4;

/// A set of rows stored in tiles, feature-major within each tile; padding rows are zero.
pub(super) struct Tiles {
    d: usize,
    len: usize,
    data: Vec<f64>,
}

impl Tiles {
    /// An empty set of rows of `d` inputs.
    pub fn new(d: usize) -> Self {
        Tiles {
            d,
            len: 0,
            data: Vec::new(),
        }
    }

    /// Rows held.
    #[inline]
    pub fn len(&self) -> usize {
        self.len
    }

    /// Replaces the contents with the rows `idx` of the row-major `x` (d columns),
    /// reusing the allocation.
    pub fn gather(&mut self, x: &[f64], idx: impl ExactSizeIterator<Item = usize>) {
        let d = self.d;
        self.len = idx.len();
        let tiles = self.len.div_ceil(TILE);
        self.data.clear();
        self.data.resize(tiles * d * TILE, 0.0);
        for (p, r) in idx.enumerate() {
            let base = (p / TILE) * d * TILE + p % TILE;
            for (k, &v) in x[r * d..(r + 1) * d].iter().enumerate() {
                self.data[base + k * TILE] = v;
            }
        }
    }

    /// `out[s] = k(xr, row s)` for every row held (`out.len() == self.len()`), split
    /// over the crew in parts of 64 to 256 rows when the row is long enough to pay for
    /// the hand-off.
    ///
    /// # Panics
    /// If `out` or `xr` has the wrong length.
    pub fn row_into(&self, crew: &Crew, kernel: &Kernel, xr: &[f64], out: &mut [f64]) {
        let threads = crew.threads();
        if threads == 1 || self.len * (self.d + 8) < PARALLEL_WORK {
            return self.row_into_seq(kernel, xr, out);
        }
        assert_eq!(out.len(), self.len, "kernel row: output length");
        assert_eq!(xr.len(), self.d, "kernel row: input length");
        let span = task_rows(self.len, threads);
        let step = self.d * TILE;
        crew.chunks_mut(out, span, |k, o| {
            let (t, j0) = ((k * span) / TILE, (k * span) % TILE);
            tile_row(kernel, xr, &self.data[t * step..(t + 1) * step], j0, o);
        });
    }

    /// Single-threaded form of [`Tiles::row_into`], for callers already running in
    /// parallel.
    pub fn row_into_seq(&self, kernel: &Kernel, xr: &[f64], out: &mut [f64]) {
        assert_eq!(out.len(), self.len, "kernel row: output length");
        assert_eq!(xr.len(), self.d, "kernel row: input length");
        for (o, t) in out.chunks_mut(TILE).zip(self.data.chunks(self.d * TILE)) {
            tile_row(kernel, xr, t, 0, o);
        }
    }
}

/// Rows per task when a kernel row of `len` entries is split over `threads` threads:
/// the smallest of [`SPANS`] giving at most [`TASKS_PER_THREAD`] tasks a thread.
fn task_rows(len: usize, threads: usize) -> usize {
    let want = len.div_ceil(TASKS_PER_THREAD * threads);
    SPANS.into_iter().find(|&s| s >= want).unwrap_or(TILE)
}

/// Distances from `xr` to the rows `j0..j0 + out.len()` of one tile, then the kernel on
/// them, into `out`.
#[inline]
fn tile_row(kernel: &Kernel, xr: &[f64], tile: &[f64], j0: usize, out: &mut [f64]) {
    let l1 = kernel.kind == KernelKind::Laplacian;
    Cpu::detect().run(Distances {
        l1,
        xr,
        tile,
        j0,
        out: &mut *out,
    });
    apply(kernel, out);
}

/// [`distances`] as a kernel with a build for AVX2 (four f64 a register instead of two).
/// Without FMA the operations, and so the results, are exactly those of the generic build.
struct Distances<'a> {
    l1: bool,
    xr: &'a [f64],
    tile: &'a [f64],
    j0: usize,
    out: &'a mut [f64],
}

impl Build for Distances<'_> {
    type Output = ();

    fn generic(self) {
        distances(self.l1, self.xr, self.tile, self.j0, self.out);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn avx2(self) {
        distances(self.l1, self.xr, self.tile, self.j0, self.out);
    }
}

/// `out[j] = Σ_k (xr_k − tile[k·TILE + j0 + j])²` (or `|·|` when `l1`), summed in the
/// order k = 0, 1, …, d−1, [`LANES`] entries at a time in registers (`j0` is a multiple
/// of [`LANES`]; the tile's padding rows make every group whole).
#[inline(always)]
fn distances(l1: bool, xr: &[f64], tile: &[f64], j0: usize, out: &mut [f64]) {
    for (g, o) in out.chunks_mut(LANES).enumerate() {
        let j = j0 + g * LANES;
        let mut acc = [0.0f64; LANES];
        if l1 {
            for (k, &a) in xr.iter().enumerate() {
                let c = &tile[k * TILE + j..k * TILE + j + LANES];
                for q in 0..LANES {
                    acc[q] += (a - c[q]).abs();
                }
            }
        } else {
            for (k, &a) in xr.iter().enumerate() {
                let c = &tile[k * TILE + j..k * TILE + j + LANES];
                for q in 0..LANES {
                    let t = a - c[q];
                    acc[q] += t * t;
                }
            }
        }
        o.copy_from_slice(&acc[..o.len()]);
    }
}

/// Replaces each distance in `v` (squared Euclidean, or L1 for the Laplacian kernel) by
/// the kernel value, with the kernel's family decided once for the whole slice.
#[inline]
fn apply(kernel: &Kernel, v: &mut [f64]) {
    let g = kernel.gamma;
    match kernel.kind {
        KernelKind::Laplacian => v.iter_mut().for_each(|e| *e = (-g * *e).exp()),
        KernelKind::Gaussian => v.iter_mut().for_each(|e| *e = (-g * e.max(0.0)).exp()),
        _ => v.iter_mut().for_each(|e| *e = kernel.from_sq_dist(*e)),
    }
}

#[cfg(test)]
mod tests {
    use super::super::team::with_crew;
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// Every entry equals `Kernel::eval` exactly, for every family, on subsets of rows
    /// that span several tiles and end in a partial one, whether the row is computed by
    /// one thread or split over crews of two and three (as the machine's cores allow)
    /// in parts of 64, 128 and 256 rows (reference: the definition in `kernel.rs`,
    /// common practice for a re-arranged computation).
    #[test]
    fn tiled_rows_equal_the_kernel_definition() {
        let d = 7;
        let mut spans = std::collections::BTreeSet::new();
        for n in [2 * TILE + 37, 1200, 8 * TILE + 37] {
            let mut rng = ChaCha8Rng::seed_from_u64(11);
            let x: Vec<f64> = (0..n * d).map(|_| rng.random_range(-2.0..2.0)).collect();
            let idx: Vec<usize> = (0..n).filter(|r| r % 3 != 1).collect();
            let mut tiles = Tiles::new(d);
            tiles.gather(&x, idx.iter().copied());
            assert_eq!(tiles.len(), idx.len());
            for threads in [1, 2, 3] {
                let pool = rayon::ThreadPoolBuilder::new()
                    .num_threads(threads)
                    .build()
                    .unwrap();
                pool.install(|| {
                    with_crew(|crew| {
                        for kind in KernelKind::ALL {
                            let kernel = Kernel::new(kind, 0.3).unwrap();
                            let r = 5;
                            let xr = &x[r * d..(r + 1) * d];
                            let mut out = vec![0.0; idx.len()];
                            tiles.row_into(crew, &kernel, xr, &mut out);
                            if crew.threads() > 1 {
                                spans.insert(task_rows(idx.len(), crew.threads()));
                            }
                            for (s, &c) in idx.iter().enumerate() {
                                let want = kernel.eval(xr, &x[c * d..(c + 1) * d]);
                                assert_eq!(out[s], want, "{kind:?}, {threads} threads");
                            }
                        }
                    })
                });
            }
        }
        // Every part size was exercised, wherever there is a second core to split over.
        if std::thread::available_parallelism().map_or(1, |c| c.get()) > 1 {
            assert_eq!(spans.into_iter().collect::<Vec<_>>(), SPANS);
        }
    }
}
