//! Adding a block of rows to a pass's statistics: the block's rows are split into fixed
//! chunks that run in parallel ([`super::chunk`]), the chunks' sums are added in chunk
//! order into the block's totals, and the block's totals are added once to the pass's
//! (the same operations as [`PassStats::merge`]), so the totals depend neither on the
//! number of threads nor on whether a block was added here or merged from elsewhere.

use ndarray::{s, Array2, ArrayView1, ArrayView2};
use rayon::prelude::*;

use super::chunk::{chunk, ChunkPart, Line};
use super::hessian::add_gram_upper;
use super::stats::{PassStats, Sample, Sums};
use crate::cpu::Cpu;
use crate::features::FeatureMap;
use crate::solver::stream::BlockRows;

/// Rows of a block handled together by one task.
const CHUNK_ROWS: usize = 1024;
/// Salt that makes the Hessian's row sample independent of the holdout's.
pub const SAMPLE_SALT: u64 = 0x5DEE_CE66_D1CE_4E5B;

impl PassStats {
    /// Adds one block of mapped rows `z` (rows × D), their standardized targets `y` and
    /// global row ids `rows` (the ids seed the Hessian's row sample). The block's chunks
    /// run on `pool`, or on the current rayon pool when `None`.
    ///
    /// # Panics
    /// If the shapes disagree with each other or with the weights, or if the sample is
    /// kept as input rows ([`PassStats::with_input_sample`]).
    #[track_caller]
    pub fn add_mapped(
        &mut self,
        pool: Option<&rayon::ThreadPool>,
        z: ArrayView2<f64>,
        y: ArrayView1<f64>,
        rows: &[usize],
    ) {
        self.add_block(pool, BlockRows::Mapped(z), y, rows);
    }

    /// Adds one block of standardized input rows `x`, which each task maps with `map` a
    /// tile at a time; otherwise as [`PassStats::add_mapped`].
    ///
    /// # Panics
    /// If the shapes disagree with each other, with the map or with the weights.
    #[track_caller]
    pub fn add_inputs(
        &mut self,
        pool: Option<&rayon::ThreadPool>,
        x: ArrayView2<f64>,
        map: &dyn FeatureMap,
        y: ArrayView1<f64>,
        rows: &[usize],
    ) {
        assert_eq!(x.ncols(), map.input_dim(), "add_inputs: inputs of the map");
        self.add_block(pool, BlockRows::Inputs { x, map }, y, rows);
    }

    /// Adds one block: its training rows `z` (mapped, or inputs that each task maps a
    /// tile at a time), standardized targets `y`, global row ids `rows`. The chunks run on
    /// `pool`, or on the current rayon pool when `None`.
    ///
    /// # Panics
    /// If the shapes disagree with each other or with the weights, or if the sample is
    /// kept as input rows and the block is mapped.
    #[track_caller]
    pub(crate) fn add_block(
        &mut self,
        pool: Option<&rayon::ThreadPool>,
        z: BlockRows,
        y: ArrayView1<f64>,
        rows: &[usize],
    ) {
        let plan = &self.plan;
        let (n, d) = (z.nrows(), z.dim());
        assert_eq!(
            d, plan.dim,
            "add_block: {d} features, expected {}",
            plan.dim
        );
        assert_eq!(y.len(), n, "add_block: {n} rows but {} targets", y.len());
        assert_eq!(rows.len(), n, "add_block: {n} rows but {} ids", rows.len());
        if let Some(inputs) = plan.inputs {
            match z {
                BlockRows::Inputs { x, .. } => assert_eq!(
                    x.ncols(),
                    inputs,
                    "add_block: {} inputs, expected {inputs}",
                    x.ncols()
                ),
                BlockRows::Mapped(_) => {
                    panic!("add_block: a sample of input rows needs blocks of inputs")
                }
            }
        }
        // Columns [w, d] and the sketch x: o_i = ẑ_iᵀw, δ_i = ẑ_iᵀd and ẑ_iᵀx.
        let mut wd = plan.w.slice(s![..d]).to_vec();
        let mut wd_bias = vec![plan.w[d]];
        if let Some(dir) = &plan.dir {
            wd.extend(dir.slice(s![..d]).iter());
            wd_bias.push(dir[d]);
        }
        let (sketch, sketch_bias) = match &plan.lever {
            Some(lever) if plan.share < 1.0 => (
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
            cpu: Cpu::detect(),
        };
        let chunks = n.div_ceil(CHUNK_ROWS);
        let run = || -> Vec<ChunkPart> {
            (0..chunks)
                .into_par_iter()
                .map(|k| {
                    let lo = k * CHUNK_ROWS;
                    let hi = (lo + CHUNK_ROWS).min(n);
                    chunk(
                        plan,
                        z.slice(lo, hi),
                        y.slice(s![lo..hi]),
                        &rows[lo..hi],
                        &line,
                    )
                })
                .collect()
        };
        let parts = match pool {
            Some(p) => p.install(run),
            None => run(),
        };
        let mut block = Sums::zeros(plan.steps.len(), plan.grid.len(), d);
        block.rows = n as u64;
        let mut sampled = Vec::new();
        let mut sampled_weight = Vec::new();
        for p in parts {
            for (k, mut g) in block.grad.outer_iter_mut().enumerate() {
                let mut g = g.slice_mut(s![..d]);
                g += &ArrayView1::from(&p.grad[k * d..(k + 1) * d]);
            }
            block
                .grad
                .column_mut(d)
                .scaled_add(1.0, &ArrayView1::from(&p.grad_bias));
            for (k, s) in p.sums.iter().enumerate() {
                block.loss[k].add(s[0]);
                block.y_beta[k].add(s[1]);
                block.beta_l1[k].add(s[2]);
                block.beta_sq[k].add(s[3]);
                block.active[k] += p.active[k];
            }
            for (acc, v) in block.grid_loss.iter_mut().zip(&p.grid_loss) {
                acc.add(*v);
            }
            sampled.extend(p.sampled);
            sampled_weight.extend(p.sampled_weight);
        }
        self.sums.merge(&block);
        match &mut self.sample {
            Sample::Inputs { x, weight } => {
                x.extend(sampled);
                weight.extend(sampled_weight);
            }
            Sample::Gram(h) if !sampled.is_empty() => {
                let a = ArrayView2::from_shape((sampled.len() / (d + 1), d + 1), &sampled)
                    .expect("sampled rows hold D + 1 entries each");
                add_gram_upper(pool, h, a);
            }
            Sample::Gram(_) => {}
        }
    }
}

/// An empty Gram matrix for D features.
pub(super) fn empty_gram(dim: usize) -> Array2<f64> {
    Array2::zeros((dim + 1, dim + 1))
}
