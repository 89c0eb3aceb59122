//! Where the trainer's rows come from, and the per-row choices that must not depend on
//! how the rows are laid out: the holdout split and the target's scaling.

use std::ops::ControlFlow;

use ndarray::{s, ArrayView1, ArrayView2};

use crate::data::Block;
use crate::error::{Error, Result};

/// What a unit's reader hears back after handing on a block: go on, or stop reading (the
/// solver has finished with this pass or failed; not an error of the source).
pub type Flow = ControlFlow<()>;

/// A list of units read in any order, each yielding raw blocks (unstandardized inputs and
/// target, stable global row ids).
pub trait BlockSource: Sync {
    /// Number of units (files, or slices of an array).
    fn units(&self) -> usize;

    /// Reads one unit, handing each of its blocks to `sink` in order, and stops early
    /// (returning `Ok`) when `sink` says [`ControlFlow::Break`].
    fn read_unit(&self, unit: usize, sink: &mut dyn FnMut(Block) -> Result<Flow>) -> Result<()>;
}

/// An in-memory table as a [`BlockSource`]: unit `u` holds rows
/// `u·block_rows .. (u+1)·block_rows`, one block per unit, with row ids equal to row
/// positions.
#[derive(Debug, Clone, Copy)]
pub struct ArraySource<'a> {
    x: ArrayView2<'a, f64>,
    y: ArrayView1<'a, f64>,
    block_rows: usize,
}

impl<'a> ArraySource<'a> {
    /// Wraps `x` (rows × inputs) and `y`.
    ///
    /// # Panics
    /// If `x` and `y` differ in rows or `block_rows` is zero.
    pub fn new(x: ArrayView2<'a, f64>, y: ArrayView1<'a, f64>, block_rows: usize) -> Self {
        assert_eq!(x.nrows(), y.len(), "x and y differ in rows");
        assert!(block_rows > 0, "block_rows must be positive");
        ArraySource { x, y, block_rows }
    }
}

impl BlockSource for ArraySource<'_> {
    fn units(&self) -> usize {
        self.x.nrows().div_ceil(self.block_rows)
    }

    fn read_unit(&self, unit: usize, sink: &mut dyn FnMut(Block) -> Result<Flow>) -> Result<()> {
        let lo = unit * self.block_rows;
        let hi = (lo + self.block_rows).min(self.x.nrows());
        // One block per unit: whether the solver wants more does not matter here.
        let _flow = sink(Block {
            seq: unit as u64,
            file_index: 0,
            first_row: lo as u64,
            rows: hi - lo,
            row_ids: (lo as u64..hi as u64).collect(),
            x: self.x.slice(s![lo..hi, ..]).to_owned(),
            y: Some(self.y.slice(s![lo..hi]).to_owned()),
            skipped: Vec::new(),
        })?;
        Ok(())
    }
}

/// Target centring and scaling used inside the solver.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct TargetScale {
    /// Mean of the training target.
    pub mean: f64,
    /// Population standard deviation (1 when the target is constant).
    pub sd: f64,
}

impl TargetScale {
    /// The one guard every fit goes through: the target's mean and population variance
    /// must be finite (a sum that overflowed is named, not trained on), and a target that
    /// does not vary (its spread below rounding of its mean) is scaled by 1, so the solver
    /// finds the constant model instead of dividing by zero.
    pub fn from_moments(column: &str, mean: f64, variance: f64) -> Result<TargetScale> {
        if !(mean.is_finite() && variance.is_finite()) {
            return Err(Error::Overflow {
                column: column.to_string(),
            });
        }
        let sd = variance.max(0.0).sqrt();
        let sd = if is_constant(mean, sd) { 1.0 } else { sd };
        Ok(TargetScale { mean, sd })
    }
}

/// Whether values with this mean and standard deviation are constant up to rounding.
pub(crate) fn is_constant(mean: f64, sd: f64) -> bool {
    sd == 0.0 || sd <= 4.0 * f64::EPSILON * mean.abs()
}

/// Is global row `row` in the holdout? A hash of the row id, fixed for the whole run.
pub fn is_holdout(row: u64, seed: u64, share: f64) -> bool {
    share > 0.0 && row_unit(row, seed) < share
}

/// A number in [0, 1) fixed by the row id and the seed, uniform over rows (splitmix64
/// finalizer, Steele, Lea & Flood, OOPSLA 2014): row subsets drawn from it are the same
/// whatever the block layout or the number of threads.
pub(crate) fn row_unit(row: u64, seed: u64) -> f64 {
    let mut z = row ^ seed.rotate_left(17) ^ 0x9E37_79B9_7F4A_7C15;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^= z >> 31;
    (z >> 11) as f64 / (1u64 << 53) as f64
}
