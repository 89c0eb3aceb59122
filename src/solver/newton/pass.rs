//! One pass of the Newton solver: with the weights w and a search direction d fixed, the
//! rows of every block give the objective along the line w + t·d on a fine grid of steps
//! t, and, for a few candidate steps, the gradient sum Σ β_i ẑ_i, the dual terms of the
//! certificate and (at the first candidate) a row-sampled Hessian. Everything a block
//! adds is computed in fixed chunks of rows and summed in chunk order, so the totals do
//! not depend on the number of threads. Within a chunk each row is handled whole while it
//! is in cache (see [`super::rowops`]).

use ndarray::linalg::general_mat_mul;
use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, Axis};
use rayon::prelude::*;

use super::rowops::{self, Path};
use crate::solver::dcd::CompensatedSum;
use crate::solver::stream::{row_unit, BlockRows};

/// Rows of a block handled together by one task.
const CHUNK_ROWS: usize = 1024;
/// Bytes of mapped rows a task maps at a time when it maps rows itself: small enough to
/// stay in a core's second-level cache until the rows are used.
const TILE_BYTES: usize = 256 * 1024;
/// Columns of the Hessian updated together by one task.
const PANEL_COLS: usize = 128;
/// Salt that makes the Hessian's row sample independent of the holdout's.
pub(crate) const SAMPLE_SALT: u64 = 0x5DEE_CE66_D1CE_4E5B;

/// Row sampling by approximate ridge leverage scores for the Hessian (see the module
/// docs of [`super`]): with H = UᵀU the last Newton matrix and G a K × (D + 1) Gaussian
/// sketch, `x` = U⁻¹Gᵀ, so that ℓ̃_i = 2C‖ẑ_iᵀx‖²/K estimates the ridge leverage
/// ℓ_i = 2C ẑ_iᵀH⁻¹ẑ_i (Johnson–Lindenstrauss; Drineas, Magdon-Ismail, Mahoney &
/// Woodruff, JMLR 2012). A row outside the tube enters with probability
/// p_i = min(1, gain·ℓ̃_i) and weight 1/p_i.
#[derive(Clone, Debug)]
pub(crate) struct Lever {
    /// U⁻¹Gᵀ, (D + 1) × K.
    pub x: Array2<f64>,
    /// Inclusion probability per unit of estimated leverage.
    pub gain: f64,
}

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
    /// Σ β_i(t) ẑ_i per candidate step, steps × (D + 1).
    pub grad: Array2<f64>,
    pub loss: Vec<CompensatedSum>,
    pub y_beta: Vec<CompensatedSum>,
    pub beta_l1: Vec<CompensatedSum>,
    pub beta_sq: Vec<CompensatedSum>,
    pub active: Vec<u64>,
    pub grid_loss: Vec<CompensatedSum>,
    /// Σ ẑ_i ẑ_iᵀ over sampled rows outside the tube at `steps[0]` (upper triangle).
    pub hess: Array2<f64>,
    /// Share of rows in the Hessian's sample (1: every row, exactly).
    pub share: f64,
    /// Leverage estimates that weight the sample (uniform without them).
    pub lever: Option<Lever>,
    pub sample_seed: u64,
    pub rows: u64,
}

/// What every row is multiplied with: [w] or [w, d] and the sketch's columns, each without
/// its bias entry and stored one after another, with the bias entries apart.
struct Line {
    /// [w] or [w, d], m_dir × D.
    wd: Vec<f64>,
    wd_bias: Vec<f64>,
    /// The sketch x's columns, K × D, in single precision (empty without leverage
    /// estimates).
    sketch: Vec<f32>,
    sketch_bias: Vec<f64>,
    path: Path,
}

/// What one chunk of rows adds.
struct ChunkPart {
    /// Σ β_i(t_k) z_i, steps × D, one step after another.
    grad: Vec<f64>,
    /// Σ β_i(t_k), the bias entries.
    grad_bias: Vec<f64>,
    sums: Vec<[f64; 4]>,
    active: Vec<u64>,
    grid_loss: Vec<f64>,
    /// Sampled rows ẑ_i·√(1/P(row sampled)), D + 1 entries each, in row order.
    sampled: Vec<f64>,
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
    /// Adds one block: its training rows `z` (mapped, or inputs that each task maps a
    /// tile at a time), standardized targets `y`, global row ids `rows`. The chunks run on
    /// `pool`, or on the current rayon pool when `None`.
    ///
    /// # Panics
    /// If the shapes disagree with each other or with the weights.
    #[track_caller]
    pub fn add_block(
        &mut self,
        pool: Option<&rayon::ThreadPool>,
        z: BlockRows,
        y: ArrayView1<f64>,
        rows: &[usize],
    ) {
        let (n, d) = (z.nrows(), z.dim());
        assert_eq!(
            d, self.dim,
            "add_block: {d} features, expected {}",
            self.dim
        );
        assert_eq!(y.len(), n, "add_block: {n} rows but {} targets", y.len());
        assert_eq!(rows.len(), n, "add_block: {n} rows but {} ids", rows.len());
        // Columns [w, d] and the sketch x: o_i = ẑ_iᵀw, δ_i = ẑ_iᵀd and ẑ_iᵀx.
        let mut wd = self.w.slice(s![..d]).to_vec();
        let mut wd_bias = vec![self.w[d]];
        if let Some(dir) = &self.dir {
            wd.extend(dir.slice(s![..d]).iter());
            wd_bias.push(dir[d]);
        }
        let (sketch, sketch_bias) = match &self.lever {
            Some(lever) if self.share < 1.0 => (
                lever
                    .x
                    .slice(s![..d, ..])
                    .t()
                    .iter()
                    .map(|&v| v as f32)
                    .collect(),
                lever.x.row(d).to_vec(),
            ),
            _ => (Vec::new(), Vec::new()),
        };
        let line = Line {
            wd,
            wd_bias,
            sketch,
            sketch_bias,
            path: rowops::detected(),
        };
        let chunks = n.div_ceil(CHUNK_ROWS);
        let run = || -> Vec<ChunkPart> {
            (0..chunks)
                .into_par_iter()
                .map(|k| {
                    let lo = k * CHUNK_ROWS;
                    let hi = (lo + CHUNK_ROWS).min(n);
                    self.chunk(z.slice(lo, hi), y.slice(s![lo..hi]), &rows[lo..hi], &line)
                })
                .collect()
        };
        let parts = match pool {
            Some(p) => p.install(run),
            None => run(),
        };
        let mut sampled = Vec::new();
        for p in parts {
            for (k, mut g) in self.grad.outer_iter_mut().enumerate() {
                let mut g = g.slice_mut(s![..d]);
                g += &ArrayView1::from(&p.grad[k * d..(k + 1) * d]);
            }
            self.grad
                .column_mut(d)
                .scaled_add(1.0, &ArrayView1::from(&p.grad_bias));
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
            let a = ArrayView2::from_shape((sampled.len() / (d + 1), d + 1), &sampled)
                .expect("sampled rows hold D + 1 entries each");
            add_gram_upper(pool, &mut self.hess, a);
        }
    }

    fn chunk(&self, z: BlockRows, y: ArrayView1<f64>, ids: &[usize], line: &Line) -> ChunkPart {
        let (n, d) = (z.nrows(), z.dim());
        let m = self.steps.len();
        let m_dir = line.wd_bias.len();
        let k_sketch = line.sketch_bias.len();
        let mut grad = vec![0.0; m * d];
        let mut grad_bias = vec![0.0; m];
        let mut sums = vec![[0.0; 4]; m];
        let mut active = vec![0u64; m];
        let mut grid_loss = vec![0.0; self.grid.len()];
        let mut sampled = Vec::new();
        let (c2, eps) = (2.0 * self.c, self.epsilon);
        let score_scale = c2 / k_sketch.max(1) as f64;
        let mut od = [0.0; 2];
        let mut sk = vec![0.0; k_sketch];
        let mut z32 = vec![0.0f32; if k_sketch > 0 { d } else { 0 }];
        let mut beta = vec![0.0; m];
        let tile = match z {
            BlockRows::Mapped(z) if z.is_standard_layout() => n.max(1),
            _ => (TILE_BYTES / (8 * d.max(1))).clamp(8, 256),
        };
        let mut buf = Vec::new();
        let mut batch = RowBatch::new(m);
        for t0 in (0..n).step_by(tile) {
            let t1 = (t0 + tile).min(n);
            let zt = tile_rows(z, t0, t1, &mut buf);
            for ti in 0..t1 - t0 {
                let i = t0 + ti;
                let zi = zt.row(ti).to_slice().expect("tiles are in standard layout");
                rowops::dots(line.path, zi, &line.wd, &mut od[..m_dir]);
                let r0 = y[i] - (od[0] + line.wd_bias[0]);
                let delta = if m_dir > 1 {
                    od[1] + line.wd_bias[1]
                } else {
                    0.0
                };
                let (mut any, mut outside_first) = (false, false);
                for (k, &t) in self.steps.iter().enumerate() {
                    let e = excess(r0 - t * delta, eps);
                    beta[k] = c2 * e;
                    if e != 0.0 {
                        any = true;
                        outside_first |= k == 0;
                        let b = beta[k];
                        let s = &mut sums[k];
                        s[0] += e * e;
                        s[1] += y[i] * b;
                        s[2] += b.abs();
                        s[3] += b * b;
                        active[k] += 1;
                    }
                }
                if outside_first {
                    let sq = if k_sketch > 0 {
                        for (a, &b) in z32.iter_mut().zip(zi) {
                            *a = b as f32;
                        }
                        rowops::dots_f32(line.path, &z32, &line.sketch, &mut sk);
                        sk.iter()
                            .zip(&line.sketch_bias)
                            .map(|(u, b)| (u + b) * (u + b))
                            .sum::<f64>()
                    } else {
                        0.0
                    };
                    if let Some(weight) = self.sample_weight(sq, ids[i], score_scale) {
                        let root = weight.sqrt();
                        sampled.extend(zi.iter().map(|v| v * root));
                        sampled.push(root);
                    }
                }
                for (acc, &t) in grid_loss.iter_mut().zip(&self.grid) {
                    let e = excess(r0 - t * delta, eps);
                    *acc += e * e;
                }
                if any {
                    for (g, b) in grad_bias.iter_mut().zip(&beta) {
                        *g += b;
                    }
                    batch.push(line.path, zt, ti, &beta, &mut grad);
                }
            }
            batch.finish(line.path, zt, &mut grad);
        }
        ChunkPart {
            grad,
            grad_bias,
            sums,
            active,
            grid_loss,
            sampled,
        }
    }
}

/// Rows `t0..t1` of a chunk as a view in standard layout: borrowed when they are mapped
/// and laid out so already, otherwise mapped (or copied) into `buf`.
fn tile_rows<'a: 'b, 'b>(
    z: BlockRows<'a>,
    t0: usize,
    t1: usize,
    buf: &'b mut Vec<f64>,
) -> ArrayView2<'b, f64> {
    let (rows, d) = (t1 - t0, z.dim());
    match z {
        BlockRows::Mapped(z) if z.is_standard_layout() => z.slice_move(s![t0..t1, ..]),
        _ => {
            buf.resize(rows * d, 0.0);
            let mut out =
                ndarray::ArrayViewMut2::from_shape((rows, d), &mut buf[..]).expect("tile buffer");
            match z {
                BlockRows::Mapped(z) => out.assign(&z.slice(s![t0..t1, ..])),
                BlockRows::Inputs { x, map } => map.transform_into(x.slice(s![t0..t1, ..]), out),
            }
            ArrayView2::from_shape((rows, d), &buf[..]).expect("tile buffer")
        }
    }
}

/// Rows of a tile whose additions into the gradient sums wait until four are ready, so
/// that [`rowops::add_scaled4`] loads and stores each sum once for the four (the same
/// operations, in the same order, as one row at a time).
struct RowBatch {
    rows: Vec<usize>,
    beta: Vec<f64>,
    m: usize,
}

impl RowBatch {
    fn new(m: usize) -> Self {
        RowBatch {
            rows: Vec::with_capacity(4),
            beta: Vec::with_capacity(4 * m),
            m,
        }
    }

    /// Queues tile row `ti` with its scales `beta`, adding the four queued rows when full.
    fn push(&mut self, path: Path, zt: ArrayView2<f64>, ti: usize, beta: &[f64], grad: &mut [f64]) {
        self.rows.push(ti);
        self.beta.extend_from_slice(beta);
        if self.rows.len() == 4 {
            let rows: [&[f64]; 4] =
                std::array::from_fn(|q| zt.row(self.rows[q]).to_slice().expect("standard layout"));
            rowops::add_scaled4(path, rows, &self.beta, grad);
            self.rows.clear();
            self.beta.clear();
        }
    }

    /// Adds the rows still queued, one at a time (at the end of a tile).
    fn finish(&mut self, path: Path, zt: ArrayView2<f64>, grad: &mut [f64]) {
        let m = self.m;
        for (r, &ti) in self.rows.iter().enumerate() {
            let zi = zt.row(ti).to_slice().expect("standard layout");
            rowops::add_scaled(path, zi, &self.beta[r * m..(r + 1) * m], grad);
        }
        self.rows.clear();
        self.beta.clear();
    }
}

impl LineAccumulator {
    /// The weight 1/P(row in the sample) of a row outside the tube if the Hessian's
    /// sample takes it: every row with weight 1 when the Hessian is exact; else with
    /// probability p = min(1, gain·ℓ̃) from `sketch_sq` = ‖ẑ_iᵀx‖² when there are
    /// leverage estimates, or with the uniform share.
    #[inline]
    fn sample_weight(&self, sketch_sq: f64, id: usize, score_scale: f64) -> Option<f64> {
        if self.share >= 1.0 {
            return Some(1.0);
        }
        let p = match &self.lever {
            Some(lever) => (lever.gain * score_scale * sketch_sq).min(1.0),
            None => self.share,
        };
        (row_unit(id as u64, self.sample_seed) < p).then(|| 1.0 / p)
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
