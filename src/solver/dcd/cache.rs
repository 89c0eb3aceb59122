//! Rows kept in memory from one block to the next: the free support vectors
//! (0 < |β_i| < U), which couple the blocks' sub-problems through w. Joining them to every
//! block's sub-problem is the selective block minimization of Chang & Roth ("Selective
//! block minimization for faster convergence of limited memory large-scale linear
//! models", KDD 2011); without it each block must absorb alone the corrections that the
//! free variables of all blocks share, and block minimization stalls with the L1 loss.

use ndarray::{ArrayView1, ArrayView2};

/// Cached rows: features (row-major, D each), targets and global row indices.
#[derive(Clone, Debug, Default)]
pub(crate) struct RowCache {
    /// Most rows kept; `None` means 2·(D + 1) (free support vectors of the L1 loss are
    /// generically at most D + 1).
    pub(crate) capacity: Option<usize>,
    d: usize,
    z: Vec<f64>,
    y: Vec<f64>,
    global: Vec<usize>,
    /// Per cached row: whether it is also a row of the current block.
    in_block: Vec<bool>,
    next_z: Vec<f64>,
    next_y: Vec<f64>,
    next_global: Vec<usize>,
    sorted: Vec<(usize, usize)>,
}

impl RowCache {
    /// Number of cached rows.
    pub(crate) fn len(&self) -> usize {
        self.global.len()
    }

    /// Features of cached row `k`.
    #[inline]
    pub(crate) fn row(&self, k: usize) -> &[f64] {
        &self.z[k * self.d..(k + 1) * self.d]
    }

    /// Target of cached row `k`.
    #[inline]
    pub(crate) fn target(&self, k: usize) -> f64 {
        self.y[k]
    }

    /// Global index of cached row `k`.
    #[inline]
    pub(crate) fn global(&self, k: usize) -> usize {
        self.global[k]
    }

    /// Whether cached row `k` belongs to the current block (then it is visited as a block
    /// row, not as a cached one).
    #[inline]
    pub(crate) fn in_block(&self, k: usize) -> bool {
        self.in_block[k]
    }

    /// Prepares for a block with `d` features and global indices `rows`: drops the cache
    /// if the dimension changed and marks cached rows that the block contains.
    pub(crate) fn begin_block(&mut self, d: usize, rows: &[usize]) {
        if d != self.d {
            self.d = d;
            self.z.clear();
            self.y.clear();
            self.global.clear();
        }
        self.in_block.clear();
        self.in_block.resize(self.global.len(), false);
        if self.global.is_empty() {
            return;
        }
        self.sorted.clear();
        self.sorted
            .extend(self.global.iter().enumerate().map(|(k, &g)| (g, k)));
        self.sorted.sort_unstable();
        for &r in rows {
            if let Ok(pos) = self.sorted.binary_search_by(|&(g, _)| g.cmp(&r)) {
                self.in_block[self.sorted[pos].1] = true;
            }
        }
    }

    /// Keeps the free rows (0 < |β| < `upper`) of the old cache and then of the block,
    /// up to the capacity.
    pub(crate) fn end_block(
        &mut self,
        z: &ArrayView2<f64>,
        y: &ArrayView1<f64>,
        rows: &[usize],
        beta: &[f64],
        upper: f64,
    ) {
        let capacity = self.capacity.unwrap_or(2 * (self.d + 1));
        let free = |b: f64| b != 0.0 && b.abs() < upper;
        self.next_z.clear();
        self.next_y.clear();
        self.next_global.clear();
        let d = self.d;
        for k in 0..self.global.len() {
            if self.next_global.len() >= capacity {
                break;
            }
            let g = self.global[k];
            if !self.in_block[k] && free(beta[g]) {
                self.next_z.extend_from_slice(&self.z[k * d..(k + 1) * d]);
                self.next_y.push(self.y[k]);
                self.next_global.push(g);
            }
        }
        for (i, &g) in rows.iter().enumerate() {
            if self.next_global.len() >= capacity {
                break;
            }
            if free(beta[g]) {
                self.next_z.extend(z.row(i).iter().copied());
                self.next_y.push(y[i]);
                self.next_global.push(g);
            }
        }
        std::mem::swap(&mut self.z, &mut self.next_z);
        std::mem::swap(&mut self.y, &mut self.next_y);
        std::mem::swap(&mut self.global, &mut self.next_global);
        self.in_block.clear();
        self.in_block.resize(self.global.len(), false);
    }
}
