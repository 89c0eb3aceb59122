//! What the passes keep between epochs, all inside the memory budget: the mapped blocks
//! that stay resident, and a bounded sample of the holdout rows.

use std::sync::Arc;

use ndarray::{Array1, Array2};

use super::rows::MappedBlock;

/// Most holdout rows kept for validation metrics and the coverage threshold (expected
/// count of a seeded sample by row hash); the rest of the holdout is counted, not kept.
/// 100,000 rows give a holdout RMSE whose sampling error is a fraction of a percent.
pub const HOLDOUT_KEPT: u64 = 100_000;

/// Standardized inputs and raw targets of some holdout rows.
pub(crate) struct HoldoutRows {
    pub x: Array2<f64>,
    pub y: Array1<f64>,
    /// Holdout rows of the block, kept or not.
    pub seen: u64,
}

impl HoldoutRows {
    pub(crate) fn bytes(&self) -> usize {
        (self.x.len() + self.y.len()) * 8
    }
}

/// The passes' memory: resident mapped blocks per unit, the kept holdout rows, and the row
/// counts seen on the first pass.
pub(crate) struct PassCache {
    pub(super) resident: Vec<Option<Vec<Arc<MappedBlock>>>>,
    pub(super) resident_bytes: usize,
    pub(super) budget: usize,
    pub(super) holdout_x: Vec<Array2<f64>>,
    pub(super) holdout_y: Vec<f64>,
    holdout_seen: u64,
    /// Training rows (first pass).
    pub rows_trained: u64,
    /// Rows read, training and holdout (first pass).
    pub rows_read: u64,
    pub(super) passes: usize,
}

impl PassCache {
    /// An empty cache for `units` units and a budget of `budget` bytes.
    pub fn new(units: usize, budget: usize) -> Self {
        PassCache {
            resident: (0..units).map(|_| None).collect(),
            resident_bytes: 0,
            budget,
            holdout_x: Vec::new(),
            holdout_y: Vec::new(),
            holdout_seen: 0,
            rows_trained: 0,
            rows_read: 0,
            passes: 0,
        }
    }

    /// Keeps a block's holdout rows (first pass only); they count against the budget.
    pub(super) fn keep_holdout(&mut self, h: HoldoutRows) {
        self.holdout_seen += h.seen;
        if h.y.is_empty() {
            return;
        }
        self.resident_bytes += h.bytes();
        self.holdout_y.extend(h.y.iter());
        self.holdout_x.push(h.x);
    }

    /// Up to `max` standardized holdout input rows, spread evenly over the kept holdout
    /// (for choosing thresholds on rows the solver never saw); `None` without a holdout.
    pub fn holdout_inputs(&self, max: usize) -> Option<Array2<f64>> {
        let total: usize = self.holdout_x.iter().map(|x| x.nrows()).sum();
        if total == 0 || max == 0 {
            return None;
        }
        let d = self.holdout_x.iter().map(|x| x.ncols()).max().unwrap_or(0);
        let step = total.div_ceil(max);
        let mut out = Array2::zeros((total.div_ceil(step), d));
        let mut k = 0;
        let mut i = 0;
        for x in &self.holdout_x {
            for row in x.rows() {
                if i % step == 0 {
                    out.row_mut(k).assign(&row);
                    k += 1;
                }
                i += 1;
            }
        }
        Some(out.slice(ndarray::s![..k, ..]).to_owned())
    }

    /// Every kept holdout row (standardized inputs, raw targets); `None` without one.
    pub fn holdout_all(&self) -> Option<(Array2<f64>, Array1<f64>)> {
        let total: usize = self.holdout_x.iter().map(|x| x.nrows()).sum();
        if total == 0 {
            return None;
        }
        let views: Vec<_> = self.holdout_x.iter().map(|x| x.view()).collect();
        let x = ndarray::concatenate(ndarray::Axis(0), &views).ok()?;
        Some((x, Array1::from(self.holdout_y.clone())))
    }

    /// Passes run so far.
    pub fn passes(&self) -> usize {
        self.passes
    }

    /// Rows held out (known after the first pass), kept or not.
    pub fn holdout_rows(&self) -> u64 {
        self.holdout_seen
    }

    /// Holdout rows kept for metrics.
    pub fn holdout_kept(&self) -> usize {
        self.holdout_y.len()
    }

    /// Whether a block of `bytes` may stay resident next to what is already kept.
    pub(super) fn room_for(&self, bytes: usize) -> bool {
        self.resident_bytes + bytes <= self.budget
    }
}
