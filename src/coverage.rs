//! How close a row lies to what the model was trained on.
//!
//! A Gaussian-kernel model reverts to its constant far from the training data (k → 0 as
//! the distance grows: common practice), so a prediction there says little. Each scored
//! row gets a *coverage* value in [0, 1]: the largest kernel similarity between the
//! (standardized) row and a stored set of training landmarks,
//! `coverage(x) = max_j k(x, l_j)`, with the model's own kernel and gamma. A row equal to
//! a landmark scores 1; a row far from all of them scores near 0.
//!
//! The landmarks are up to [`COVERAGE_LANDMARKS`] rows of the survey's uniform random
//! sample. The flag threshold is chosen at fit time: the [`FLAG_QUANTILE`] quantile of the
//! coverage of held-out rows (rows not used as landmarks), so about 1% of rows like the
//! training data are flagged and rows unlike it are flagged far more often.
//!
//! Cost: one kernel block of `rows × landmarks` per batch, i.e. about `2·d·m` flops and
//! `m` exponentials a row (m = 512, d = 20: ~20 kflop, comparable to the feature map).

use ndarray::{Array1, Array2, ArrayView2, ArrayViewMut1, Axis};

use crate::error::{Error, Result};
use crate::kernel::Kernel;

/// Most landmarks stored for coverage.
pub const COVERAGE_LANDMARKS: usize = 512;

/// Quantile of held-out coverage used as the flag threshold.
pub const FLAG_QUANTILE: f64 = 0.01;

/// Rows per kernel block when computing coverage.
const CHUNK: usize = 1024;

/// Landmarks, kernel and threshold for coverage values.
#[derive(Clone, Debug, PartialEq)]
pub struct Coverage {
    /// Standardized landmark rows.
    pub landmarks: Array2<f64>,
    /// The model's kernel.
    pub kernel: Kernel,
    /// Rows with coverage below this are flagged as outside what the model has seen.
    pub threshold: f64,
}

impl Coverage {
    /// Chooses landmarks from the first [`COVERAGE_LANDMARKS`] rows of a standardized
    /// uniform sample and the threshold from the remaining sample rows (or from
    /// `reference` rows when given).
    pub fn fit(sample: ArrayView2<f64>, kernel: Kernel, reference: Option<ArrayView2<f64>>) -> Result<Coverage> {
        if sample.nrows() == 0 {
            return Err(Error::NoRows("coverage needs at least one sample row".into()));
        }
        let m = sample.nrows().min(COVERAGE_LANDMARKS);
        let landmarks = sample.slice(ndarray::s![..m, ..]).to_owned();
        let mut cov = Coverage {
            landmarks,
            kernel,
            threshold: 0.0,
        };
        let rest = match reference {
            Some(r) if r.nrows() > 0 => r.to_owned(),
            _ => sample.slice(ndarray::s![m.., ..]).to_owned(),
        };
        if rest.nrows() > 0 {
            let mut v = cov.values(rest.view()).to_vec();
            v.sort_by(f64::total_cmp);
            let k = ((v.len() as f64 - 1.0) * FLAG_QUANTILE).floor() as usize;
            cov.threshold = v[k];
        }
        Ok(cov)
    }

    /// Coverage of standardized rows `x` into `out`, in parallel over chunks of rows.
    ///
    /// # Panics
    /// If `x` has a different width from the landmarks or `out` the wrong length.
    pub fn values_into(&self, x: ArrayView2<f64>, mut out: ArrayViewMut1<f64>) {
        assert_eq!(x.ncols(), self.landmarks.ncols(), "coverage: wrong input width");
        assert_eq!(x.nrows(), out.len(), "coverage: output length differs from rows");
        let mut block = Array2::zeros((CHUNK.min(x.nrows()), self.landmarks.nrows()));
        for (xc, mut oc) in x
            .axis_chunks_iter(Axis(0), CHUNK)
            .zip(out.axis_chunks_iter_mut(Axis(0), CHUNK))
        {
            let mut kb = block.slice_mut(ndarray::s![..xc.nrows(), ..]);
            self.kernel.block_into(xc, self.landmarks.view(), kb.view_mut());
            for (o, row) in oc.iter_mut().zip(kb.axis_iter(Axis(0))) {
                *o = row.iter().fold(0.0f64, |a, &b| a.max(b));
            }
        }
    }

    /// Allocating form of [`Coverage::values_into`].
    pub fn values(&self, x: ArrayView2<f64>) -> Array1<f64> {
        let mut out = Array1::zeros(x.nrows());
        self.values_into(x, out.view_mut());
        out
    }
}
