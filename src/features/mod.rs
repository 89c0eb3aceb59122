//! Explicit feature maps z(x) whose inner products approximate a kernel:
//! z(x)·z(y) ≈ k(x, y). A linear model on z is then an approximate kernel machine.
//!
//! Implementations: random Fourier features ([`rff`]), orthogonal random features
//! ([`orthogonal`]) and Nyström ([`nystrom`]); [`fastcos`] holds the vectorised cosine
//! they share. [`build_map`] makes a map from a [`MapSpec`]; [`map_from_parts`] rebuilds a
//! saved one.

mod eigen;
pub(crate) use eigen::symmetric_eigen;
pub mod fastcos;
pub mod nystrom;
pub mod orthogonal;
pub mod rff;

use ndarray::{Array2, ArrayView2, ArrayViewMut2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::kernel::{Kernel, KernelKind};

pub use nystrom::NystromMap;
pub use orthogonal::OrthogonalMap;
pub use rff::FourierMap;

/// Which family of feature map to build.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MapKind {
    /// Random Fourier features (Rahimi & Recht, NIPS 2007).
    Fourier,
    /// Orthogonal random features, Gaussian kernel only (Yu et al., NIPS 2016).
    Orthogonal,
    /// Nyström features from landmarks (Williams & Seeger, NIPS 2001).
    Nystrom,
}

/// How random Fourier frequencies become features.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FourierVariant {
    /// `z = √(2/D) cos(Wᵀx + b)` with D frequencies and phases `b ~ U[0, 2π)`.
    CosPhase,
    /// `z = √(2/D) [cos(Wᵀx), sin(Wᵀx)]` with D/2 frequencies; lower variance
    /// (Sutherland & Schneider, UAI 2015). D must be even.
    SinCos,
}

/// How Nyström landmarks are chosen from the sample.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Landmarks {
    /// Rows drawn uniformly without replacement (seeded).
    Uniform,
    /// k-means centres (Zhang, Tsang & Kwok, ICML 2008).
    KMeans,
}

/// Everything needed to build a feature map, apart from the kernel and the data.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MapSpec {
    /// The map family.
    pub kind: MapKind,
    /// Output dimension D (for Nyström: the number of landmarks asked for; the output
    /// may be smaller, see [`NystromMap`]). Files written before it had this name call it
    /// `components`.
    #[serde(alias = "components")]
    pub dim: usize,
    /// Fourier and orthogonal maps: cos + phase or sin/cos pairs.
    pub variant: FourierVariant,
    /// Nyström: how landmarks are chosen.
    pub landmarks: Landmarks,
    /// Nyström: eigenvalues of the landmark kernel matrix at or below
    /// `eig_threshold × λ_max` are dropped (default `1e-10`).
    pub eig_threshold: f64,
    /// Seed of the random generator (ChaCha8).
    pub seed: u64,
}

impl Default for MapSpec {
    fn default() -> Self {
        MapSpec {
            kind: MapKind::Fourier,
            dim: 1024,
            variant: FourierVariant::SinCos,
            landmarks: Landmarks::Uniform,
            eig_threshold: 1e-10,
            seed: 0,
        }
    }
}

impl MapSpec {
    /// Checks what the specification alone decides, before any data is read: D at least
    /// 1, an even D for sin/cos pairs, orthogonal features only for the Gaussian kernel,
    /// and the Nyström eigenvalue threshold in [0, 1).
    pub fn validate(&self, kernel: KernelKind) -> Result<()> {
        if self.dim == 0 {
            return Err(Error::invalid(
                "dim",
                "the feature dimension D must be at least 1",
            ));
        }
        let fourier = matches!(self.kind, MapKind::Fourier | MapKind::Orthogonal);
        if fourier && self.variant == FourierVariant::SinCos && self.dim % 2 == 1 {
            return Err(Error::invalid(
                "dim",
                format!(
                    "sin/cos pairs need an even feature dimension D, got {}",
                    self.dim
                ),
            ));
        }
        if self.kind == MapKind::Orthogonal && kernel != KernelKind::Gaussian {
            return Err(Error::invalid(
                "map",
                "orthogonal random features exist for the Gaussian kernel only; use the fourier or nystrom map",
            ));
        }
        if !(0.0..1.0).contains(&self.eig_threshold) {
            return Err(Error::invalid(
                "eigenvalue threshold",
                format!("must be in [0, 1), got {}", self.eig_threshold),
            ));
        }
        Ok(())
    }
}

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
    #[track_caller]
    fn transform(&self, x: ArrayView2<f64>) -> Array2<f64> {
        let mut out = Array2::zeros((x.nrows(), self.output_dim()));
        self.transform_into(x, out.view_mut());
        out
    }

    /// The parameters needed to rebuild this map exactly.
    fn to_parts(&self) -> MapParts;
}

/// Builds a map; `sample` (standardized rows) is required for Nyström, ignored otherwise.
///
/// Errors (typed): `components = 0`, odd `components` with [`FourierVariant::SinCos`],
/// `input_dim = 0`, a kernel whose `gamma` is not finite and positive, an orthogonal map
/// for a non-Gaussian kernel, Nyström without a sample, with zero sample rows,
/// non-finite sample values or no usable eigenvalue.
///
/// # Panics
/// Nyström only: if `sample.ncols() != input_dim`.
pub fn build_map(
    spec: &MapSpec,
    kernel: Kernel,
    input_dim: usize,
    sample: Option<ArrayView2<f64>>,
) -> Result<Box<dyn FeatureMap>> {
    spec.validate(kernel.kind)?;
    Ok(match spec.kind {
        MapKind::Fourier => Box::new(FourierMap::new(
            kernel,
            input_dim,
            spec.dim,
            spec.variant,
            spec.seed,
        )?),
        MapKind::Orthogonal => Box::new(OrthogonalMap::orthogonal(
            kernel,
            input_dim,
            spec.dim,
            spec.variant,
            spec.seed,
        )?),
        MapKind::Nystrom => {
            let sample = sample.ok_or_else(|| {
                Error::invalid(
                    "sample",
                    "a Nyström map needs a sample of rows to pick landmarks from",
                )
            })?;
            assert_eq!(
                sample.ncols(),
                input_dim,
                "Nyström sample has {} columns, the map expects {input_dim}",
                sample.ncols()
            );
            Box::new(NystromMap::new(
                kernel,
                sample,
                spec.dim,
                spec.landmarks,
                spec.eig_threshold,
                spec.seed,
            )?)
        }
    })
}

/// Rebuilds a map saved with [`FeatureMap::to_parts`]; the rebuilt map transforms bit for
/// bit like the saved one. Malformed parts (unknown kind, missing or misshapen arrays,
/// bad settings, non-finite values) give a typed error.
pub fn map_from_parts(parts: &MapParts) -> Result<Box<dyn FeatureMap>> {
    Ok(match parts.kind.as_str() {
        rff::KIND_FOURIER | rff::KIND_ORTHOGONAL => Box::new(FourierMap::from_parts(parts)?),
        nystrom::KIND => Box::new(NystromMap::from_parts(parts)?),
        other => {
            return Err(bad_parts(format!(
                "unknown map kind '{other}' (expected fourier, orthogonal or nystrom)"
            )))
        }
    })
}

/// Rows per parallel work item of a transform that writes whole output rows at once
/// (Nyström), at most 256 and at least 16: the output block of a chunk is kept near
/// [`CHUNK_BYTES`].
pub(crate) fn chunk_rows(output_dim: usize) -> usize {
    (CHUNK_BYTES / (8 * output_dim.max(1))).clamp(16, 256)
}

/// Target size of one chunk's output block (512 KiB).
pub(crate) const CHUNK_BYTES: usize = 512 * 1024;

/// Output columns per panel of the Fourier transforms (see [`panel_layout`]).
pub(crate) const PANEL_COLS: usize = 256;

/// Target size of one output block of the Fourier transforms (128 KiB).
pub(crate) const BLOCK_BYTES: usize = 128 * 1024;

/// `(rows, columns)` of the output blocks a Fourier transform fills at a time: the rows
/// of one parallel chunk (16 to 256; 64 from D = 256 up) times a panel of at most
/// [`PANEL_COLS`] columns, about [`BLOCK_BYTES`] in all. The product writes one block and
/// the cosine pass runs over it at once, while the block, the panel of frequencies it was
/// made from and the product's packing buffers are all still in a level-2 cache of about
/// 1 MiB a core: whole rows of D = 4,096 values would not stay there beside a 640 KiB
/// frequency matrix, and 64-row chunks let the product pack each panel of W once per 64
/// rows instead of once per 16.
pub(crate) fn panel_layout(output_dim: usize) -> (usize, usize) {
    let cols = output_dim.clamp(1, PANEL_COLS);
    ((BLOCK_BYTES / (8 * cols)).clamp(16, 256), cols)
}

/// The error for a malformed saved map.
pub(crate) fn bad_parts(reason: impl Into<String>) -> Error {
    Error::invalid("feature map", reason)
}

/// Checks the settings shared by all maps; returns the validated kernel.
pub(crate) fn check_kernel(kernel: Kernel) -> Result<Kernel> {
    Kernel::new(kernel.kind, kernel.gamma)
}

/// Kernel settings as saved in [`MapParts::meta`]; gamma is also kept as its bit pattern
/// so the round trip through JSON text is exact.
#[derive(Serialize, Deserialize)]
pub(crate) struct SavedKernel {
    pub kind: KernelKind,
    pub gamma: f64,
    pub gamma_bits: u64,
}

impl SavedKernel {
    pub(crate) fn from_kernel(k: Kernel) -> Self {
        SavedKernel {
            kind: k.kind,
            gamma: k.gamma,
            gamma_bits: k.gamma.to_bits(),
        }
    }

    pub(crate) fn to_kernel(&self) -> Result<Kernel> {
        Kernel::new(self.kind, f64::from_bits(self.gamma_bits))
            .map_err(|e| bad_parts(format!("saved kernel is invalid: {e}")))
    }
}

/// Finds the named array in saved parts and checks its shape (`None` = any) and values.
pub(crate) fn saved_array<'a>(
    parts: &'a MapParts,
    name: &str,
    rows: Option<usize>,
    cols: Option<usize>,
) -> Result<&'a Array2<f64>> {
    let a = parts
        .arrays
        .iter()
        .find(|(n, _)| n == name)
        .map(|(_, a)| a)
        .ok_or_else(|| bad_parts(format!("the array '{name}' is missing")))?;
    if rows.is_some_and(|r| r != a.nrows()) || cols.is_some_and(|c| c != a.ncols()) {
        return Err(bad_parts(format!(
            "the array '{name}' has shape {}×{}, expected {}×{}",
            a.nrows(),
            a.ncols(),
            rows.map_or("any".into(), |r| r.to_string()),
            cols.map_or("any".into(), |c| c.to_string()),
        )));
    }
    if a.iter().any(|v| !v.is_finite()) {
        return Err(bad_parts(format!(
            "the array '{name}' holds a non-finite value"
        )));
    }
    Ok(a)
}

/// Checks shapes and runs `f(x_chunk, out_chunk)` over chunks of `rows` rows in
/// parallel on the current rayon pool. Each output row depends only on its input row, so
/// neither the chunk size nor the thread count changes any result.
#[track_caller]
pub(crate) fn par_row_chunks<F>(
    map: &dyn FeatureMap,
    x: ArrayView2<f64>,
    mut out: ArrayViewMut2<f64>,
    rows: usize,
    f: F,
) where
    F: Fn(ArrayView2<f64>, ArrayViewMut2<f64>) + Sync + Send,
{
    assert_eq!(
        x.ncols(),
        map.input_dim(),
        "feature map: input has {} columns, the map expects {}",
        x.ncols(),
        map.input_dim()
    );
    assert_eq!(
        out.ncols(),
        map.output_dim(),
        "feature map: output has {} columns, the map produces {}",
        out.ncols(),
        map.output_dim()
    );
    assert_eq!(
        x.nrows(),
        out.nrows(),
        "feature map: input has {} rows but output has {}",
        x.nrows(),
        out.nrows()
    );
    out.axis_chunks_iter_mut(Axis(0), rows)
        .into_par_iter()
        .zip(x.axis_chunks_iter(Axis(0), rows).into_par_iter())
        .for_each(|(o, xc)| f(xc, o));
}

/// Calls `f` on each row of `block` as a contiguous slice, copying through `scratch`
/// only when a row is not contiguous (it then grows once to the row length and is reused).
pub(crate) fn for_each_row_slice(
    mut block: ArrayViewMut2<f64>,
    scratch: &mut Vec<f64>,
    mut f: impl FnMut(&mut [f64]),
) {
    for mut row in block.axis_iter_mut(Axis(0)) {
        if let Some(s) = row.as_slice_mut() {
            f(s);
        } else {
            scratch.clear();
            scratch.extend(row.iter());
            f(scratch);
            for (o, v) in row.iter_mut().zip(scratch.iter()) {
                *o = *v;
            }
        }
    }
}
