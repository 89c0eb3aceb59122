//! The statistics of one Newton pass as a value: what the pass is computed for (the
//! weights, the direction, the steps, the sampling rule) and what its rows add (gradient
//! sums, objective on the step grid, dual terms, the Hessian's row sample). Parts of a
//! pass computed elsewhere (for example on the partitions of a cluster) are combined with
//! [`PassStats::merge`] and the driver takes the step with [`super::NewtonState::step`].
//!
//! # Determinism
//! A pass adds each block's totals to the pass's totals once, after summing the block's
//! fixed chunks of rows in order; [`PassStats::merge`] adds another part's totals with the
//! same operations. So merging, in block order, parts that each hold one block gives the
//! same bits as one accumulator fed the same blocks in the same order (tested). Parts
//! of several blocks each give totals that differ from the streamed ones only in the
//! rounding of the regrouped sums (floating-point addition is not associative), and the
//! same parts merged in the same order always give the same bits. A sample kept as input
//! rows ([`PassStats::with_input_sample`]) is concatenated by `merge`, so its Gram matrix
//! ([`PassStats::map_sample`]) is the same however the rows were split into parts.

use ndarray::{Array1, Array2, ArrayView2};

use super::hessian::{add_gram_upper, Lever};
use crate::error::{Error, Result};
use crate::features::FeatureMap;

/// A sum kept with Neumaier's compensation (Neumaier, ZAMM 54, 1974), so that millions
/// of small increments do not drift, with a merge that adds another sum's two parts.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub(super) struct Total {
    pub sum: f64,
    pub carry: f64,
}

impl Total {
    #[inline]
    pub fn add(&mut self, x: f64) {
        let t = self.sum + x;
        if self.sum.abs() >= x.abs() {
            self.carry += (self.sum - t) + x;
        } else {
            self.carry += (x - t) + self.sum;
        }
        self.sum = t;
    }

    /// Adds `other`'s sum, then its carry: on an empty sum this reproduces `other`.
    #[inline]
    pub fn merge(&mut self, other: &Total) {
        self.add(other.sum);
        self.carry += other.carry;
    }

    #[inline]
    pub fn value(&self) -> f64 {
        self.sum + self.carry
    }
}

/// What a pass is computed for, fixed by the driver (see [`super::NewtonState::accumulator`]).
#[derive(Clone, Debug, PartialEq)]
pub(super) struct Plan {
    pub dim: usize,
    pub c: f64,
    pub epsilon: f64,
    pub w: Array1<f64>,
    pub dir: Option<Array1<f64>>,
    /// Candidate steps with a gradient: `[0]` without a direction.
    pub steps: Vec<f64>,
    /// Fine grid of steps with the objective only (empty without a direction).
    pub grid: Vec<f64>,
    /// Share of rows in the Hessian's sample (1: every row, exactly).
    pub share: f64,
    /// Leverage estimates that weight the sample (uniform without them).
    pub lever: Option<Lever>,
    pub sample_seed: u64,
    /// Inputs per row when the sample keeps standardized input rows, else `None`.
    pub inputs: Option<usize>,
}

/// Sums over the rows of a pass, per candidate step `k` and grid step `j`.
#[derive(Clone, Debug, PartialEq)]
pub(super) struct Sums {
    /// Σ β_i(t_k) ẑ_i, steps × (D + 1).
    pub grad: Array2<f64>,
    /// Σ e_i², yᵀβ, ‖β‖₁, ‖β‖² per step (e: the residual's excess over the tube).
    pub loss: Vec<Total>,
    pub y_beta: Vec<Total>,
    pub beta_l1: Vec<Total>,
    pub beta_sq: Vec<Total>,
    /// Rows outside the tube per step.
    pub active: Vec<u64>,
    /// Σ e_i² per grid step.
    pub grid_loss: Vec<Total>,
    /// Training rows added.
    pub rows: u64,
}

impl Sums {
    pub fn zeros(steps: usize, grid: usize, dim: usize) -> Self {
        Sums {
            grad: Array2::zeros((steps, dim + 1)),
            loss: vec![Total::default(); steps],
            y_beta: vec![Total::default(); steps],
            beta_l1: vec![Total::default(); steps],
            beta_sq: vec![Total::default(); steps],
            active: vec![0; steps],
            grid_loss: vec![Total::default(); grid],
            rows: 0,
        }
    }

    /// Adds `other` (totals of later rows) to these.
    pub fn merge(&mut self, other: &Sums) {
        self.grad += &other.grad;
        let pairs = [
            (&mut self.loss, &other.loss),
            (&mut self.y_beta, &other.y_beta),
            (&mut self.beta_l1, &other.beta_l1),
            (&mut self.beta_sq, &other.beta_sq),
            (&mut self.grid_loss, &other.grid_loss),
        ];
        for (mine, theirs) in pairs {
            for (a, b) in mine.iter_mut().zip(theirs) {
                a.merge(b);
            }
        }
        for (a, b) in self.active.iter_mut().zip(&other.active) {
            *a += b;
        }
        self.rows += other.rows;
    }
}

/// The Hessian's row sample at the first candidate step.
#[derive(Clone, Debug, PartialEq)]
pub(super) enum Sample {
    /// Σ w_i ẑ_i ẑ_iᵀ over the sampled rows (upper triangle), w_i = 1/P(row sampled).
    Gram(Array2<f64>),
    /// The sampled rows' standardized inputs (row after row) and their weights w_i, to be
    /// mapped where the feature map is ([`PassStats::map_sample`]).
    Inputs { x: Vec<f64>, weight: Vec<f64> },
}

/// The statistics of one Newton pass: created empty by
/// [`NewtonState::accumulator`](super::NewtonState::accumulator), filled block by block
/// ([`PassStats::add_mapped`], [`PassStats::add_inputs`]), combined with other parts of
/// the same pass by [`PassStats::merge`], carried between processes by
/// [`PassStats::to_bytes`] and [`PassStats::from_bytes`], and consumed by
/// [`NewtonState::step`](super::NewtonState::step). See the module's determinism notes.
///
/// Its size is O(D·K) for the pass's fixed data (weights, direction, K = 8 sketch
/// columns) and the gradient sums, plus the sample: the (D + 1)² Gram matrix by default,
/// or O(sample × inputs) with [`PassStats::with_input_sample`].
#[derive(Clone, Debug, PartialEq)]
pub struct PassStats {
    pub(super) plan: Plan,
    pub(super) sums: Sums,
    pub(super) sample: Sample,
}

impl PassStats {
    /// Keeps the Hessian's sample as standardized input rows with their weights instead
    /// of a Gram matrix of mapped rows, so that the statistics stay O(D + sample ×
    /// inputs); every block must then come as inputs ([`PassStats::add_inputs`]), and
    /// the holder of the feature map calls [`PassStats::map_sample`] before the step.
    ///
    /// # Panics
    /// If rows were added already.
    pub fn with_input_sample(mut self, inputs: usize) -> Self {
        assert_eq!(
            self.sums.rows, 0,
            "with_input_sample: rows were added already"
        );
        self.plan.inputs = Some(inputs);
        self.sample = Sample::Inputs {
            x: Vec::new(),
            weight: Vec::new(),
        };
        self
    }

    /// The points the pass gathers a gradient for, as (step t, w + t·d) in solver units
    /// (w itself, with t = 0, before the first direction): one of them becomes the next
    /// iterate when the step is certified.
    pub fn candidates(&self) -> Vec<(f64, Array1<f64>)> {
        let p = &self.plan;
        p.steps
            .iter()
            .map(|&t| match &p.dir {
                Some(d) => (t, &p.w + &(d * t)),
                None => (t, p.w.clone()),
            })
            .collect()
    }

    /// Training rows added so far.
    pub fn rows(&self) -> u64 {
        self.sums.rows
    }

    /// Rows in the Hessian's sample when it is kept as input rows (`None` once mapped
    /// or when it is a Gram matrix).
    pub fn sampled_inputs(&self) -> Option<usize> {
        match &self.sample {
            Sample::Inputs { weight, .. } => Some(weight.len()),
            Sample::Gram(_) => None,
        }
    }

    /// Adds the statistics of `other`, a part of the same pass holding later rows (see
    /// the module docs for what is guaranteed about the bits).
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if `other` belongs to another pass (other weights,
    /// direction, steps, settings, sample form or seed).
    pub fn merge(&mut self, other: PassStats) -> Result<()> {
        if self.plan != other.plan {
            return Err(Error::invalid(
                "pass statistics",
                "parts of different Newton passes cannot be merged",
            ));
        }
        self.sums.merge(&other.sums);
        match (&mut self.sample, other.sample) {
            (Sample::Gram(h), Sample::Gram(o)) => *h += &o,
            (Sample::Inputs { x, weight }, Sample::Inputs { x: ox, weight: ow }) => {
                x.extend(ox);
                weight.extend(ow);
            }
            _ => {
                return Err(Error::invalid(
                    "pass statistics",
                    "a mapped sample cannot be merged with one of input rows",
                ))
            }
        }
        Ok(())
    }

    /// Maps a sample kept as input rows with `map` and forms its weighted Gram matrix
    /// (batches of rows in order, on `pool` or the current rayon pool), as the step
    /// needs; does nothing when the sample is a Gram matrix already.
    ///
    /// # Panics
    /// If `map` does not take the sample's inputs or give the pass's D features.
    #[track_caller]
    pub fn map_sample(&mut self, pool: Option<&rayon::ThreadPool>, map: &dyn FeatureMap) {
        let Sample::Inputs { x, weight } = &self.sample else {
            return;
        };
        let (dim, inputs) = (self.plan.dim, self.plan.inputs.unwrap_or(0));
        assert_eq!(map.input_dim(), inputs, "map_sample: inputs of the map");
        assert_eq!(map.output_dim(), dim, "map_sample: features of the map");
        let mut h = Array2::zeros((dim + 1, dim + 1));
        for (xs, ws) in x
            .chunks(MAP_BATCH * inputs.max(1))
            .zip(weight.chunks(MAP_BATCH))
        {
            let xb = ArrayView2::from_shape((ws.len(), inputs), xs).expect("sample rows");
            let mut a = Array2::zeros((ws.len(), dim + 1));
            map.transform_into(xb, a.slice_mut(ndarray::s![.., ..dim]));
            for (mut row, w) in a.rows_mut().into_iter().zip(ws) {
                let root = w.sqrt();
                row[dim] = 1.0;
                row.mapv_inplace(|v| v * root);
            }
            add_gram_upper(pool, &mut h, a.view());
        }
        self.sample = Sample::Gram(h);
    }
}

/// Sampled input rows mapped at a time by [`PassStats::map_sample`].
const MAP_BATCH: usize = 1024;
