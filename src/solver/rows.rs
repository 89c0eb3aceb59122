//! The rows a pass hands to a solver: a block's training rows, mapped or left as
//! standardized inputs for the solver to map a few rows at a time.

use std::borrow::Cow;

use ndarray::{s, Array1, Array2, ArrayView2};

use crate::features::FeatureMap;

/// Upper bound on the bytes of one mapped piece of a block.
const PIECE_BYTES: usize = 32 << 20;

/// Rows of a mapped piece for `dim` features: as many as fit in `PIECE_BYTES`, rounded
/// down to a multiple of 1,024 (the Newton solver's chunk, so that splitting a block into
/// pieces keeps its chunk boundaries), at least 1,024. Training maps its blocks in pieces
/// of this size, so that the mapped rows in flight stay small whatever the files' batches.
pub fn piece_rows(dim: usize) -> usize {
    (PIECE_BYTES / (8 * dim.max(1)) / 1024).max(1) * 1024
}

/// The training rows of a streamed block: mapped, or standardized inputs that the visitor
/// maps itself, a few rows at a time while they are in cache (see the stream's `lazy` setting).
pub(crate) enum TrainRows {
    /// Mapped rows (rows × D).
    Mapped(Array2<f64>),
    /// Standardized inputs (rows × inputs), not yet mapped.
    Inputs(Array2<f64>),
}

/// A block's training rows as a visitor reads them: mapped, or inputs with the map that
/// maps them.
#[derive(Clone, Copy)]
pub(crate) enum BlockRows<'a> {
    /// Mapped rows (rows × D).
    Mapped(ArrayView2<'a, f64>),
    /// Standardized inputs and the feature map.
    Inputs {
        /// Standardized inputs (rows × inputs).
        x: ArrayView2<'a, f64>,
        /// The map into the feature space.
        map: &'a dyn FeatureMap,
    },
}

impl<'a> BlockRows<'a> {
    /// Rows held.
    pub fn nrows(&self) -> usize {
        match self {
            BlockRows::Mapped(z) => z.nrows(),
            BlockRows::Inputs { x, .. } => x.nrows(),
        }
    }

    /// Features D of the mapped rows.
    pub fn dim(&self) -> usize {
        match self {
            BlockRows::Mapped(z) => z.ncols(),
            BlockRows::Inputs { map, .. } => map.output_dim(),
        }
    }

    /// Rows `lo..hi`.
    pub fn slice(&self, lo: usize, hi: usize) -> BlockRows<'a> {
        match *self {
            BlockRows::Mapped(z) => BlockRows::Mapped(z.slice_move(s![lo..hi, ..])),
            BlockRows::Inputs { x, map } => BlockRows::Inputs {
                x: x.slice_move(s![lo..hi, ..]),
                map,
            },
        }
    }
}

/// A block's training rows after standardization (and mapping, unless left to the
/// visitor); its holdout rows travel separately to the cache.
pub(crate) struct MappedBlock {
    /// Training rows.
    pub z: TrainRows,
    /// Standardized targets of the training rows.
    pub y: Array1<f64>,
    /// Global row ids of the training rows.
    pub rows: Vec<usize>,
    /// Rows read (training and holdout).
    pub read_rows: u64,
}

impl MappedBlock {
    pub(crate) fn bytes(&self) -> usize {
        let z = match &self.z {
            TrainRows::Mapped(z) | TrainRows::Inputs(z) => z.len(),
        };
        (z + self.y.len() + self.rows.len()) * 8
    }

    /// Whether the training rows are mapped (only mapped blocks stay resident).
    pub(crate) fn is_mapped(&self) -> bool {
        matches!(self.z, TrainRows::Mapped(_))
    }

    /// The mapped training rows, mapped now on `pool` if the stream left that to the
    /// visitor.
    pub fn mapped(&self, map: &dyn FeatureMap, pool: &rayon::ThreadPool) -> Cow<'_, Array2<f64>> {
        match &self.z {
            TrainRows::Mapped(z) => Cow::Borrowed(z),
            TrainRows::Inputs(x) => Cow::Owned(pool.install(|| map.transform(x.view()))),
        }
    }

    /// The training rows as a visitor reads them.
    pub fn rows_view<'a>(&'a self, map: &'a dyn FeatureMap) -> BlockRows<'a> {
        match &self.z {
            TrainRows::Mapped(z) => BlockRows::Mapped(z.view()),
            TrainRows::Inputs(x) => BlockRows::Inputs { x: x.view(), map },
        }
    }
}
