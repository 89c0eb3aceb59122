//! One block's sub-problem: a few sweeps of dual coordinate descent over the dual
//! variables of the rows in memory (block minimization, Yu, Hsieh, Chang & Lin, KDD 2010),
//! with the one-variable closed-form step of Ho & Lin (JMLR 2012, §3) and their
//! projected-gradient shrinking (after Hsieh et al., ICML 2008).

use super::cache::RowCache;
use super::{DcdSettings, DcdState};
use ndarray::{ArrayView1, ArrayView2};
use rand::seq::SliceRandom;
use rand_chacha::ChaCha8Rng;

/// A block stops sweeping once its largest violation has fallen to this share of the
/// violation seen in its first sweep (a relative inner tolerance, as in Yu et al., KDD
/// 2010, where each block's sub-problem is solved only loosely).
const INNER_RELATIVE_TOL: f64 = 0.1;

/// Rows visited together before jumping elsewhere: at D = 1,024 in f64 a chunk of 256
/// rows is 2 MiB and stays in cache, while a random order over a large block would not.
const CHUNK_ROWS: usize = 256;

/// What one call of [`solve_block`] did.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct BlockStats {
    /// Dual variables that changed value.
    pub updates: u64,
    /// Largest projected-gradient violation met in the first sweep: how far the block's
    /// dual variables were from optimal (for the current w) when the block arrived.
    pub max_violation: f64,
    /// Sweeps run (a sweep over a shrunk active set counts as one).
    pub sweeps: usize,
}

/// Preallocated scratch for [`solve_block`]: visiting order of the active rows, the
/// cached diagonal ‖z_i‖² + 1 + λ, shrinking marks, the chunk order, and the rows kept
/// from block to block (the free support vectors, after Chang & Roth, KDD 2011). Reused
/// across the blocks of one problem, it allocates only when a block is larger than any
/// before. Use one workspace per solver state.
#[derive(Clone, Debug, Default)]
pub struct BlockWorkspace {
    order: Vec<usize>,
    diag: Vec<f64>,
    shrunk: Vec<bool>,
    chunks: Vec<usize>,
    cache: RowCache,
}

impl BlockWorkspace {
    /// An empty workspace keeping up to 2·(D + 1) free support vectors across blocks.
    pub fn new() -> Self {
        Self::default()
    }

    /// An empty workspace keeping up to `rows` free support vectors across blocks
    /// (0: plain block minimization, each block alone).
    pub fn with_cache_rows(rows: usize) -> Self {
        let mut ws = Self::default();
        ws.cache.capacity = Some(rows);
        ws
    }

    /// Rows `0..n` are the block's, `n + k` cached row `k`; sets the diagonal of both and
    /// the visiting order of every row not already in the block.
    fn prepare(&mut self, z: &ArrayView2<f64>, rows: &[usize], lambda: f64) {
        let n = z.nrows();
        self.cache.begin_block(z.ncols(), rows);
        self.diag.clear();
        self.diag
            .extend(z.rows().into_iter().map(|r| r.dot(&r) + 1.0 + lambda));
        for k in 0..self.cache.len() {
            let r = ArrayView1::from(self.cache.row(k));
            self.diag.push(r.dot(&r) + 1.0 + lambda);
        }
        self.shrunk.clear();
        self.shrunk.resize(self.diag.len(), false);
        fill_order(&mut self.order, n, &self.cache);
    }
}

/// Every block row, then every cached row that is not in the block.
fn fill_order(order: &mut Vec<usize>, n: usize, cache: &RowCache) {
    order.clear();
    order.extend(0..n);
    order.extend(
        (0..cache.len())
            .filter(|&k| !cache.in_block(k))
            .map(|k| n + k),
    );
}

/// Inner product of the weights with one row; 4-way unrolled on a contiguous row, in a
/// fixed order (so results do not depend on threads or alignment).
#[inline]
pub(crate) fn dot_row(w: &[f64], z: ArrayView1<f64>) -> f64 {
    match z.as_slice() {
        Some(z) => dot_slice(w, z),
        None => w.iter().zip(z.iter()).map(|(a, b)| a * b).sum(),
    }
}

#[inline]
fn dot_slice(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let mut acc = [0.0f64; 4];
    let mut ca = a.chunks_exact(4);
    let mut cb = b.chunks_exact(4);
    for (x, y) in (&mut ca).zip(&mut cb) {
        acc[0] += x[0] * y[0];
        acc[1] += x[1] * y[1];
        acc[2] += x[2] * y[2];
        acc[3] += x[3] * y[3];
    }
    let mut tail = 0.0;
    for (x, y) in ca.remainder().iter().zip(cb.remainder()) {
        tail += x * y;
    }
    (acc[0] + acc[1]) + (acc[2] + acc[3]) + tail
}

/// w += a·z, on the first D entries of w.
#[inline]
fn axpy(w: &mut [f64], a: f64, z: ArrayView1<f64>) {
    match z.as_slice() {
        Some(z) => {
            for (wi, zi) in w.iter_mut().zip(z) {
                *wi += a * zi;
            }
        }
        None => {
            for (wi, zi) in w.iter_mut().zip(z.iter()) {
                *wi += a * zi;
            }
        }
    }
}

/// Runs up to `settings.sweeps_per_block` sweeps of dual coordinate descent (Ho & Lin,
/// JMLR 2012, Algorithm 3 with the shrinking of their §3) over the rows of one block, in
/// a random order drawn from `rng`, updating `state.w` and `state.beta` in place.
///
/// `z` holds the block's mapped features (rows × D, no bias column), `y` its targets in
/// solver units, and `rows[i]` the global index into `state.beta` of block row i. The
/// sweeps stop early once the block's largest projected-gradient violation has fallen
/// tenfold (all rows re-checked after shrinking). This is one block-minimization step of
/// Yu, Hsieh, Chang & Lin (KDD 2010).
///
/// # Panics
/// If `y` or `rows` do not have one entry per row of `z`, if `state.w` does not have
/// D + 1 entries, or if a global row index is out of range of `state.beta`.
#[track_caller]
pub fn solve_block(
    state: &mut DcdState,
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    rows: &[usize],
    settings: &DcdSettings,
    rng: &mut ChaCha8Rng,
    ws: &mut BlockWorkspace,
) -> BlockStats {
    let (n, d) = z.dim();
    assert_eq!(
        y.len(),
        n,
        "solve_block: {n} feature rows but {} targets",
        y.len()
    );
    assert_eq!(
        rows.len(),
        n,
        "solve_block: {n} feature rows but {} row indices",
        rows.len()
    );
    assert_eq!(
        state.w.len(),
        d + 1,
        "solve_block: {d} features but the state has {} weights (expected D + 1)",
        state.w.len()
    );
    if let Some(&bad) = rows.iter().find(|&&r| r >= state.beta.len()) {
        panic!(
            "solve_block: row index {bad} is out of range for {} dual variables",
            state.beta.len()
        );
    }
    let mut stats = BlockStats::default();
    if n == 0 {
        return stats;
    }
    let lambda = settings.lambda();
    let upper = settings.upper();
    let eps = settings.epsilon;
    ws.prepare(&z, rows, lambda);

    let BlockWorkspace {
        order,
        diag,
        shrunk,
        chunks,
        cache,
    } = ws;
    let full = order.len();
    let mut w_all = std::mem::take(&mut state.w);
    let w_slice = w_all.as_slice_mut().expect("weights are contiguous");
    let (w, bias) = w_slice.split_at_mut(d);
    let mut active = full;
    let mut bound_old = f64::INFINITY;
    let mut inner_tol = 0.0;
    for sweep in 0..settings.sweeps_per_block {
        stats.sweeps += 1;
        arrange(&mut order[..active], chunks, rng);
        let mut max_v = 0.0f64;
        for &c in chunks.iter() {
            let start = c * CHUNK_ROWS;
            let end = (start + CHUNK_ROWS).min(active);
            for &i in &order[start..end] {
                let (zi, yi, gi) = if i < n {
                    (z.row(i), y[i], rows[i])
                } else {
                    let k = i - n;
                    (
                        ArrayView1::from(cache.row(k)),
                        cache.target(k),
                        cache.global(k),
                    )
                };
                let beta = state.beta[gi];
                let g = dot_row(w, zi) + bias[0] - yi + lambda * beta;
                let gp = g + eps;
                let gn = g - eps;
                // Projected-gradient violation and the shrinking test (Ho & Lin 2012, §3):
                // a variable at a bound whose gradient points outward by more than the
                // previous sweep's largest violation is unlikely to move again.
                let (violation, shrink) = if beta == 0.0 {
                    if gp < 0.0 {
                        (-gp, false)
                    } else if gn > 0.0 {
                        (gn, false)
                    } else {
                        (0.0, gp > bound_old && gn < -bound_old)
                    }
                } else if beta >= upper {
                    if gp > 0.0 {
                        (gp, false)
                    } else {
                        (0.0, gp < -bound_old)
                    }
                } else if beta <= -upper {
                    if gn < 0.0 {
                        (-gn, false)
                    } else {
                        (0.0, gn > bound_old)
                    }
                } else if beta > 0.0 {
                    (gp.abs(), false)
                } else {
                    (gn.abs(), false)
                };
                if settings.shrinking && shrink {
                    shrunk[i] = true;
                    continue;
                }
                max_v = max_v.max(violation);
                if violation == 0.0 {
                    continue;
                }
                // Closed-form minimiser of ½H·δ² + g·δ + ε|β + δ| with H = Q_ii + λ,
                // then clipped to ±U (Ho & Lin 2012, §3).
                let h = diag[i];
                let hb = h * beta;
                let step = if gp < hb {
                    -gp / h
                } else if gn > hb {
                    -gn / h
                } else {
                    -beta
                };
                let new = (beta + step).clamp(-upper, upper);
                let delta = new - beta;
                if delta != 0.0 {
                    axpy(w, delta, zi);
                    bias[0] += delta;
                    state.beta[gi] = new;
                    state.record_change(yi, beta, new);
                    stats.updates += 1;
                }
            }
        }
        if sweep == 0 {
            stats.max_violation = max_v;
            inner_tol = INNER_RELATIVE_TOL * max_v;
        }
        if settings.shrinking {
            // Keep the unshrunk rows; the order beyond `active` is rebuilt on un-shrinking.
            order.truncate(active);
            order.retain(|&i| !shrunk[i]);
            active = order.len();
        }
        if max_v <= inner_tol {
            if active == full {
                break;
            }
            // Converged on the active set: check every row again before stopping.
            fill_order(order, n, cache);
            active = full;
            shrunk.fill(false);
            bound_old = f64::INFINITY;
        } else {
            bound_old = if max_v > 0.0 { max_v } else { f64::INFINITY };
        }
    }
    state.w = w_all;
    cache.end_block(&z, &y, rows, &state.beta, upper);
    stats
}

/// Random visiting order that keeps memory locality. Small sets are simply shuffled.
/// Larger ones are sorted, cut into chunks of [`CHUNK_ROWS`] consecutive rows, each chunk
/// shuffled in place, and the chunks' visiting order (`chunks`) drawn at random.
fn arrange(order: &mut [usize], chunks: &mut Vec<usize>, rng: &mut ChaCha8Rng) {
    chunks.clear();
    if order.len() <= CHUNK_ROWS {
        order.shuffle(rng);
        chunks.push(0);
        return;
    }
    order.sort_unstable();
    for segment in order.chunks_mut(CHUNK_ROWS) {
        segment.shuffle(rng);
    }
    chunks.extend(0..order.len().div_ceil(CHUNK_ROWS));
    chunks.shuffle(rng);
}
