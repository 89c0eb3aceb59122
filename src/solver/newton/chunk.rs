//! The per-row work of a pass on one chunk of rows: with the weights w and the direction
//! d fixed, each row gives its residual at every candidate and grid step, its β and dual
//! terms, its additions to the gradient sums and, outside the tube at the first step, its
//! leverage estimate and perhaps a place in the Hessian's sample. Each row is handled
//! whole while it is in cache (see [`super::rowops`]).

use ndarray::{s, ArrayView1, ArrayView2};

use super::rowops;
use super::stats::Plan;
use crate::cpu::Cpu;
use crate::solver::stream::{row_unit, BlockRows};

/// Bytes of mapped rows a task maps at a time when it maps rows itself: small enough to
/// stay in a core's second-level cache until the rows are used.
const TILE_BYTES: usize = 256 * 1024;

/// What every row is multiplied with: [w] or [w, d] and the sketch's columns, each without
/// its bias entry and stored one after another, with the bias entries apart.
pub(super) struct Line {
    /// [w] or [w, d], m_dir × D.
    pub wd: Vec<f64>,
    pub wd_bias: Vec<f64>,
    /// The sketch x's columns, K × D, in single precision (empty without leverage
    /// estimates).
    pub sketch: Vec<f32>,
    pub sketch_bias: Vec<f64>,
    pub cpu: Cpu,
}

/// What one chunk of rows adds.
pub(super) struct ChunkPart {
    /// Σ β_i(t_k) z_i, steps × D, one step after another.
    pub grad: Vec<f64>,
    /// Σ β_i(t_k), the bias entries.
    pub grad_bias: Vec<f64>,
    /// Σ e_i², Σ y_i β_i, Σ |β_i|, Σ β_i² per step.
    pub sums: Vec<[f64; 4]>,
    pub active: Vec<u64>,
    pub grid_loss: Vec<f64>,
    /// Sampled rows in row order: ẑ_i·√(1/P(row sampled)), D + 1 entries each, or the
    /// standardized inputs when the plan keeps input rows.
    pub sampled: Vec<f64>,
    /// 1/P(row sampled) of each sampled input row (empty for mapped rows).
    pub sampled_weight: Vec<f64>,
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

/// The sums, counts and sampled rows of one chunk of rows `z` with standardized targets
/// `y` and global ids `ids` (see the module docs).
pub(super) fn chunk(
    plan: &Plan,
    z: BlockRows,
    y: ArrayView1<f64>,
    ids: &[usize],
    line: &Line,
) -> ChunkPart {
    let (n, d) = (z.nrows(), z.dim());
    let m = plan.steps.len();
    let m_dir = line.wd_bias.len();
    let k_sketch = line.sketch_bias.len();
    let mut grad = vec![0.0; m * d];
    let mut grad_bias = vec![0.0; m];
    let mut sums = vec![[0.0; 4]; m];
    let mut active = vec![0u64; m];
    let mut grid_loss = vec![0.0; plan.grid.len()];
    let mut sampled = Vec::new();
    let mut sampled_weight = Vec::new();
    let (c2, eps) = (2.0 * plan.c, plan.epsilon);
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
            rowops::dots(line.cpu, zi, &line.wd, &mut od[..m_dir]);
            let r0 = y[i] - (od[0] + line.wd_bias[0]);
            let delta = if m_dir > 1 {
                od[1] + line.wd_bias[1]
            } else {
                0.0
            };
            let (mut any, mut outside_first) = (false, false);
            for (k, &t) in plan.steps.iter().enumerate() {
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
                    rowops::dots_f32(line.cpu, &z32, &line.sketch, &mut sk);
                    sk.iter()
                        .zip(&line.sketch_bias)
                        .map(|(u, b)| (u + b) * (u + b))
                        .sum::<f64>()
                } else {
                    0.0
                };
                if let Some(weight) = sample_weight(plan, sq, ids[i], score_scale) {
                    match z {
                        BlockRows::Inputs { x, .. } if plan.inputs.is_some() => {
                            sampled.extend(x.row(i).iter());
                            sampled_weight.push(weight);
                        }
                        _ => {
                            let root = weight.sqrt();
                            sampled.extend(zi.iter().map(|v| v * root));
                            sampled.push(root);
                        }
                    }
                }
            }
            for (acc, &t) in grid_loss.iter_mut().zip(&plan.grid) {
                let e = excess(r0 - t * delta, eps);
                *acc += e * e;
            }
            if any {
                for (g, b) in grad_bias.iter_mut().zip(&beta) {
                    *g += b;
                }
                batch.push(line.cpu, zt, ti, &beta, &mut grad);
            }
        }
        batch.finish(line.cpu, zt, &mut grad);
    }
    ChunkPart {
        grad,
        grad_bias,
        sums,
        active,
        grid_loss,
        sampled,
        sampled_weight,
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
    fn push(&mut self, cpu: Cpu, zt: ArrayView2<f64>, ti: usize, beta: &[f64], grad: &mut [f64]) {
        self.rows.push(ti);
        self.beta.extend_from_slice(beta);
        if self.rows.len() == 4 {
            let rows: [&[f64]; 4] =
                std::array::from_fn(|q| zt.row(self.rows[q]).to_slice().expect("standard layout"));
            rowops::add_scaled4(cpu, rows, &self.beta, grad);
            self.rows.clear();
            self.beta.clear();
        }
    }

    /// Adds the rows still queued, one at a time (at the end of a tile).
    fn finish(&mut self, cpu: Cpu, zt: ArrayView2<f64>, grad: &mut [f64]) {
        let m = self.m;
        for (r, &ti) in self.rows.iter().enumerate() {
            let zi = zt.row(ti).to_slice().expect("standard layout");
            rowops::add_scaled(cpu, zi, &self.beta[r * m..(r + 1) * m], grad);
        }
        self.rows.clear();
        self.beta.clear();
    }
}

/// The weight 1/P(row in the sample) of a row outside the tube if the Hessian's
/// sample takes it: every row with weight 1 when the Hessian is exact; else with
/// probability p = min(1, gain·ℓ̃) from `sketch_sq` = ‖ẑ_iᵀx‖² when there are
/// leverage estimates, or with the uniform share.
#[inline]
fn sample_weight(plan: &Plan, sketch_sq: f64, id: usize, score_scale: f64) -> Option<f64> {
    if plan.share >= 1.0 {
        return Some(1.0);
    }
    let p = match &plan.lever {
        Some(lever) => (lever.gain * score_scale * sketch_sq).min(1.0),
        None => plan.share,
    };
    (row_unit(id as u64, plan.sample_seed) < p).then(|| 1.0 / p)
}
