//! Explicit feature maps z(x) whose inner products approximate a kernel:
//! z(x)·z(y) ≈ k(x, y). A linear model on z is then an approximate kernel machine.
//!
//! Implementations: random Fourier features (`rff`), orthogonal random features
//! (`orthogonal`) and Nyström (`nystrom`).

use ndarray::{Array2, ArrayView2, ArrayViewMut2};

use crate::error::Result;

/// The saved form of a feature map: a kind tag, scalar settings as JSON, and named
/// arrays. A model file stores exactly this, and [`map_from_parts`] rebuilds the map
/// from it bit for bit.
#[derive(Clone, Debug, PartialEq)]
pub struct MapParts {
    /// Which map this is (for example `"fourier"`, `"orthogonal"`, `"nystrom"`).
    pub kind: String,
    /// Scalar settings (kernel, variant, dimensions, …).
    pub meta: serde_json::Value,
    /// Named parameter arrays (frequencies, phases, landmarks, projection, …).
    pub arrays: Vec<(String, Array2<f64>)>,
}

/// A map from `input_dim()` standardized inputs to `output_dim()` features.
///
/// Transforms are row-wise, so the result does not depend on how rows are split into
/// chunks or threads. They run in parallel on the current rayon pool: call them inside
/// `pool.install(..)` to choose the thread count.
pub trait FeatureMap: Send + Sync + std::fmt::Debug {
    /// Number of input columns.
    fn input_dim(&self) -> usize;

    /// Number of output features D.
    fn output_dim(&self) -> usize;

    /// Maps each row of `x` into the same row of `out`, overwriting it.
    ///
    /// # Panics
    /// If `x.ncols() != input_dim()`, `out.ncols() != output_dim()` or the row counts
    /// differ.
    fn transform_into(&self, x: ArrayView2<f64>, out: ArrayViewMut2<f64>);

    /// Allocating form of [`FeatureMap::transform_into`].
    fn transform(&self, x: ArrayView2<f64>) -> Array2<f64> {
        let mut out = Array2::zeros((x.nrows(), self.output_dim()));
        self.transform_into(x, out.view_mut());
        out
    }

    /// The parameters needed to rebuild this map exactly.
    fn to_parts(&self) -> MapParts;
}

/// Rebuilds a map saved with [`FeatureMap::to_parts`].
pub fn map_from_parts(parts: &MapParts) -> Result<Box<dyn FeatureMap>> {
    let _ = parts;
    unimplemented!("filled in by the feature-map work")
}
