//! One pass of the Newton solver: with the weights w and a search direction d fixed, the
//! rows of every block give the objective along the line w + t·d on a fine grid of steps
//! t, and, for a few candidate steps, the gradient sum Σ β_i ẑ_i, the dual terms of the
//! certificate and (at the first candidate) a row-sampled Hessian. Everything a block
//! adds is computed in fixed chunks of rows and summed in chunk order, so the totals do
//! not depend on the number of threads.

use ndarray::linalg::general_mat_mul;
use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, Axis};
use rayon::prelude::*;

use crate::solver::dcd::CompensatedSum;
use crate::solver::stream::is_holdout;

/// Rows of a block handled together by one task.
const CHUNK_ROWS: usize = 1024;
/// Columns of the Hessian updated together by one task.
const PANEL_COLS: usize = 128;
/// Salt that makes the Hessian's row sample independent of the holdout's.
pub(crate) const SAMPLE_SALT: u64 = 0x5DEE_CE66_D1CE_4E5B;

/// Sums gathered over one pass (see the module docs). `steps[0]` carries the Hessian.
pub(crate) struct LineAccumulator {
    pub dim: usize,
    pub c: f64,
    pub epsilon: f64,
    pub w: Array1<f64>,
    pub dir: Option<Array1<f64>>,
    /// Candidate steps with a gradient: `[0]` without a direction.
    pub steps: Vec<f64>,
    /// Fine grid of steps with the objective only (empty without a direction).
    pub grid: Vec<f64>,
    /// Σ β_i(t) ẑ_i per candidate step, (D + 1) × steps.
    pub grad: Array2<f64>,
    pub loss: Vec<CompensatedSum>,
    pub y_beta: Vec<CompensatedSum>,
    pub beta_l1: Vec<CompensatedSum>,
    pub beta_sq: Vec<CompensatedSum>,
    pub active: Vec<u64>,
    pub grid_loss: Vec<CompensatedSum>,
    /// Σ ẑ_i ẑ_iᵀ over sampled rows outside the tube at `steps[0]` (upper triangle).
    pub hess: Array2<f64>,
    /// Share of rows in the Hessian's sample.
    pub share: f64,
    pub sample_seed: u64,
    pub rows: u64,
}

/// What one chunk of rows adds.
struct ChunkPart {
    grad: Array2<f64>,
    sums: Vec<[f64; 4]>,
    active: Vec<u64>,
    grid_loss: Vec<f64>,
    sampled: Vec<usize>,
}

/// max(0, |r| − ε) with the sign of r: the residual's excess over the tube.
#[inline]
fn excess(r: f64, eps: f64) -> f64 {
    if r > eps {
        r - eps
    } else if r < -eps {
        r + eps
    } else {
        0.0
    }
}

impl LineAccumulator {
    /// Adds one block: mapped rows `z` (rows × D), standardized targets `y`, global row
    /// ids `rows`. The chunks run on `pool`, or on the current rayon pool when `None`.
    ///
    /// # Panics
    /// If the shapes disagree with each other or with the weights.
    #[track_caller]
    pub fn add_block(
        &mut self,
        pool: Option<&rayon::ThreadPool>,
        z: ArrayView2<f64>,
        y: ArrayView1<f64>,
        rows: &[usize],
    ) {
        let (n, d) = z.dim();
        assert_eq!(
            d, self.dim,
            "add_block: {d} features, expected {}",
            self.dim
        );
        assert_eq!(y.len(), n, "add_block: {n} rows but {} targets", y.len());
        assert_eq!(rows.len(), n, "add_block: {n} rows but {} ids", rows.len());
        // Columns [w, d] of the line: o_i = ẑ_iᵀw and δ_i = ẑ_iᵀd in one product.
        let m_dir = if self.dir.is_some() { 2 } else { 1 };
        let mut line = Array2::zeros((d, m_dir));
        line.column_mut(0).assign(&self.w.slice(s![..d]));
        let mut bias = [self.w[d], 0.0];
        if let Some(dir) = &self.dir {
            line.column_mut(1).assign(&dir.slice(s![..d]));
            bias[1] = dir[d];
        }
        let chunks = n.div_ceil(CHUNK_ROWS);
        let run = || -> Vec<ChunkPart> {
            (0..chunks)
                .into_par_iter()
                .map(|k| {
                    let lo = k * CHUNK_ROWS;
                    let hi = (lo + CHUNK_ROWS).min(n);
                    self.chunk(
                        z.slice(s![lo..hi, ..]),
                        y.slice(s![lo..hi]),
                        &rows[lo..hi],
                        lo,
                        &line,
                        bias,
                    )
                })
                .collect()
        };
        let parts = match pool {
            Some(p) => p.install(run),
            None => run(),
        };
        let mut sampled = Vec::new();
        for p in parts {
            self.grad += &p.grad;
            for (k, s) in p.sums.iter().enumerate() {
                self.loss[k].add(s[0]);
                self.y_beta[k].add(s[1]);
                self.beta_l1[k].add(s[2]);
                self.beta_sq[k].add(s[3]);
                self.active[k] += p.active[k];
            }
            for (acc, v) in self.grid_loss.iter_mut().zip(&p.grid_loss) {
                acc.add(*v);
            }
            sampled.extend(p.sampled);
        }
        self.rows += n as u64;
        if !sampled.is_empty() {
            let mut a = Array2::ones((sampled.len(), d + 1));
            for (r, &i) in sampled.iter().enumerate() {
                a.slice_mut(s![r, ..d]).assign(&z.row(i));
            }
            add_gram_upper(pool, &mut self.hess, a.view());
        }
    }

    fn chunk(
        &self,
        z: ArrayView2<f64>,
        y: ArrayView1<f64>,
        ids: &[usize],
        offset: usize,
        line: &Array2<f64>,
        bias: [f64; 2],
    ) -> ChunkPart {
        let n = z.nrows();
        let m = self.steps.len();
        let od = z.dot(line);
        let mut beta = Array2::<f64>::zeros((n, m));
        let mut sums = vec![[0.0; 4]; m];
        let mut active = vec![0u64; m];
        let mut grid_loss = vec![0.0; self.grid.len()];
        let mut sampled = Vec::new();
        let (c2, eps) = (2.0 * self.c, self.epsilon);
        for i in 0..n {
            let r0 = y[i] - (od[[i, 0]] + bias[0]);
            let delta = if od.ncols() > 1 {
                od[[i, 1]] + bias[1]
            } else {
                0.0
            };
            for (k, &t) in self.steps.iter().enumerate() {
                let e = excess(r0 - t * delta, eps);
                if e != 0.0 {
                    let b = c2 * e;
                    beta[[i, k]] = b;
                    let s = &mut sums[k];
                    s[0] += e * e;
                    s[1] += y[i] * b;
                    s[2] += b.abs();
                    s[3] += b * b;
                    active[k] += 1;
                    if k == 0 && is_holdout(ids[i] as u64, self.sample_seed, self.share) {
                        sampled.push(offset + i);
                    }
                }
            }
            for (acc, &t) in grid_loss.iter_mut().zip(&self.grid) {
                let e = excess(r0 - t * delta, eps);
                *acc += e * e;
            }
        }
        let mut grad = Array2::zeros((self.dim + 1, m));
        general_mat_mul(
            1.0,
            &z.t(),
            &beta,
            0.0,
            &mut grad.slice_mut(s![..self.dim, ..]),
        );
        grad.row_mut(self.dim).assign(&beta.sum_axis(Axis(0)));
        ChunkPart {
            grad,
            sums,
            active,
            grid_loss,
            sampled,
        }
    }
}

/// h[..j1, J] += a[.., ..j1]ᵀ a[.., J] for column panels J = j0..j1: the upper triangle of
/// h += aᵀa, each panel an independent product (so the result does not depend on threads).
fn add_gram_upper(pool: Option<&rayon::ThreadPool>, h: &mut Array2<f64>, a: ArrayView2<f64>) {
    let cols = h.ncols();
    let mut run = || {
        h.axis_chunks_iter_mut(Axis(1), PANEL_COLS)
            .into_par_iter()
            .enumerate()
            .for_each(|(p, mut panel)| {
                let j0 = p * PANEL_COLS;
                let j1 = (j0 + PANEL_COLS).min(cols);
                general_mat_mul(
                    1.0,
                    &a.slice(s![.., ..j1]).t(),
                    &a.slice(s![.., j0..j1]),
                    1.0,
                    &mut panel.slice_mut(s![..j1, ..]),
                );
            });
    };
    match pool {
        Some(p) => p.install(run),
        None => run(),
    }
}
