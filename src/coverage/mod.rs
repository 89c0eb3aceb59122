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
//! coverage of held-out rows (the training holdout when the fit has one, else the sample
//! rows not used as landmarks), so about 1% of rows like the
//! training data are flagged and rows unlike it are flagged far more often.
//!
//! # Method and cost
//!
//! Every kernel family of [`crate::kernel`] decreases with the distance (Gaussian and
//! Matérn with the Euclidean one, Laplacian with the L1 one), so
//! `max_j k(x, l_j) = k(min_j ‖x − l_j‖)`: coverage needs the nearest landmark and **one**
//! kernel evaluation per row, not one per landmark.
//!
//! * Gaussian and Matérn (nearest neighbour by filter and refine): the squared distances
//!   are screened through one single-precision matrix product per block of rows,
//!   `‖x − l‖² − ‖x‖² = [x, 1]·[−2l, ‖l‖²]` (the row's own norm does not change which
//!   landmark is nearest), with a proven bound on its rounding error: at most
//!   `(d + 3)·2⁻²⁴·(2‖x‖‖l‖ + ‖l‖²)` for d + 1 products of rounded inputs, in any
//!   summation order (Higham, *Accuracy and Stability of Numerical Algorithms*, 2nd ed.
//!   2002, §3.1). Every landmark whose screened value lies within twice that bound of
//!   the smallest is then measured exactly, in `f64` from explicit differences (usually
//!   one), and the smallest exact distance is used. The nearest landmark is always among those measured, so the value
//!   is the `f64` maximum of the kernel over all landmarks (up to the rounding of one
//!   explicit distance), and it depends only on the row: the same whatever the block
//!   size or thread count.
//! * Laplacian: L1 distances to all landmarks by explicit differences (landmarks stored
//!   transposed so the sweep over landmarks vectorises), then one exponential.
//!
//! Cost a row, with m landmarks and d inputs: about `2·(d + 1)·m` single-precision flops
//! in the product (m = 512, d = 20: 21.5 kflop, about half the feature map's projection
//! at D = 1,024, at twice its rate), two vectorised scans of m values and a few exact
//! distances; the Laplacian sweep costs about `3·d·m` double-precision operations (one
//! kernel value per landmark, m exponentials a row, would cost more than the feature map
//! itself).

use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, ArrayViewMut1, Axis};
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::kernel::{Kernel, KernelKind};

/// Most landmarks stored for coverage.
pub const COVERAGE_LANDMARKS: usize = 512;

/// Quantile of held-out coverage used as the flag threshold.
pub const FLAG_QUANTILE: f64 = 0.01;

/// Rows per block of the screening product (a 256 × 512 block of `f32` products is
/// 512 KiB and stays in the L2 cache).
pub const COVERAGE_CHUNK: usize = 256;

/// Unit roundoff of `f32`, 2⁻²⁴.
const U32: f64 = 1.0 / 16_777_216.0;

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

/// Preallocated buffers for [`Coverage::values_seq`]: one per worker thread, made by
/// [`Coverage::work`], so the per-block loop allocates nothing.
#[derive(Clone, Debug)]
pub struct CoverageWork {
    /// Landmarks for the screening product, `[−2·l_j, ‖l_j‖²]` in `f32`, padded with
    /// rows that never pass the screen to a multiple of [`LANES`]: m′ × (d + 1) (empty
    /// for the Laplacian kernel).
    l32: Array2<f32>,
    /// Landmarks transposed, d × m (Laplacian sweep; empty otherwise).
    lt: Array2<f64>,
    /// Number of real landmarks m.
    m: usize,
    /// `max_j ‖l_j‖`.
    lmax: f64,
    /// A block of rows in `f32` with a last column of ones, [`COVERAGE_CHUNK`] × (d + 1).
    x32: Array2<f32>,
    /// The block's screened `‖x − l_j‖² − ‖x‖²`, [`COVERAGE_CHUNK`] × m′.
    dots: Array2<f32>,
    /// One row's L1 distances to the landmarks (Laplacian), m.
    acc: Vec<f64>,
}

/// Independent lanes of the screening scans (a multiple of every SIMD width in use, so
/// the lane-wise minimum and comparisons compile to vector instructions).
const LANES: usize = 8;

/// Smallest value of a slice whose length is a multiple of [`LANES`], taken lane-wise
/// (NaN never wins; all NaN or empty gives +inf).
#[inline]
fn lane_min(v: &[f32]) -> f32 {
    let mut m = [f32::INFINITY; LANES];
    for chunk in v.chunks_exact(LANES) {
        for (a, &b) in m.iter_mut().zip(chunk) {
            *a = if b < *a { b } else { *a };
        }
    }
    m.iter()
        .fold(f32::INFINITY, |a, &b| if b < a { b } else { a })
}

/// Squared Euclidean distance by explicit differences, summed in index order.
#[inline]
fn sq_dist(a: ArrayView1<f64>, b: ArrayView1<f64>) -> f64 {
    a.iter().zip(b.iter()).fold(0.0, |s, (x, y)| {
        let t = x - y;
        s + t * t
    })
}

impl Coverage {
    /// Chooses landmarks from the first [`COVERAGE_LANDMARKS`] rows of a standardized
    /// uniform sample and the threshold from the remaining sample rows (or from
    /// `reference` rows when given).
    ///
    /// # Errors
    /// [`Error::NoRows`] for an empty sample.
    pub fn fit(
        sample: ArrayView2<f64>,
        kernel: Kernel,
        reference: Option<ArrayView2<f64>>,
    ) -> Result<Coverage> {
        if sample.nrows() == 0 {
            return Err(Error::NoRows(
                "coverage needs at least one sample row".into(),
            ));
        }
        let m = sample.nrows().min(COVERAGE_LANDMARKS);
        let landmarks = sample.slice(s![..m, ..]).to_owned();
        let mut cov = Coverage {
            landmarks,
            kernel,
            threshold: 0.0,
        };
        let rest = match reference {
            Some(r) if r.nrows() > 0 => r.to_owned(),
            _ => sample.slice(s![m.., ..]).to_owned(),
        };
        if rest.nrows() > 0 {
            let mut v = cov.values(rest.view()).to_vec();
            v.sort_by(f64::total_cmp);
            let k = ((v.len() as f64 - 1.0) * FLAG_QUANTILE).floor() as usize;
            cov.threshold = v[k];
        }
        Ok(cov)
    }

    /// Buffers for [`Coverage::values_seq`] (one per worker).
    pub fn work(&self) -> CoverageWork {
        let (m, d) = self.landmarks.dim();
        let lnorm: Vec<f64> = self
            .landmarks
            .axis_iter(Axis(0))
            .map(|l| l.dot(&l))
            .collect();
        let lmax = lnorm.iter().fold(0.0f64, |a, &b| a.max(b)).sqrt();
        let laplacian = self.kernel.kind == KernelKind::Laplacian;
        let (l32, x32, dots, lt, acc) = if laplacian {
            (
                Array2::zeros((0, d + 1)),
                Array2::zeros((0, d + 1)),
                Array2::zeros((0, 0)),
                self.landmarks.t().as_standard_layout().into_owned(),
                vec![0.0; m],
            )
        } else {
            let padded = m.div_ceil(LANES) * LANES;
            // Padding rows screen as f32::MAX: never a candidate.
            let mut l32 = Array2::<f32>::zeros((padded, d + 1));
            l32.column_mut(d).fill(f32::MAX);
            for ((mut row, l), &n) in l32
                .axis_iter_mut(Axis(0))
                .zip(self.landmarks.rows())
                .zip(&lnorm)
            {
                for (a, &b) in row.iter_mut().zip(l.iter()) {
                    *a = (-2.0 * b) as f32;
                }
                row[d] = n as f32;
            }
            let mut x32 = Array2::<f32>::zeros((COVERAGE_CHUNK, d + 1));
            x32.column_mut(d).fill(1.0);
            (
                l32,
                x32,
                Array2::zeros((COVERAGE_CHUNK, padded)),
                Array2::zeros((d, 0)),
                Vec::new(),
            )
        };
        CoverageWork {
            l32,
            lt,
            m,
            lmax,
            x32,
            dots,
            acc,
        }
    }

    /// Coverage of standardized rows `x` into `out` on the calling thread, in blocks of
    /// [`COVERAGE_CHUNK`] rows, using the buffers `work` (from [`Coverage::work`] of this
    /// coverage). Each value depends only on its row (see the module docs for the method).
    ///
    /// # Panics
    /// If `x` has a different width from the landmarks, `out` the wrong length, or `work`
    /// was made for other landmarks.
    #[track_caller]
    pub fn values_seq(
        &self,
        x: ArrayView2<f64>,
        mut out: ArrayViewMut1<f64>,
        work: &mut CoverageWork,
    ) {
        let (m, d) = self.landmarks.dim();
        assert_eq!(x.ncols(), d, "coverage: wrong input width");
        assert_eq!(
            x.nrows(),
            out.len(),
            "coverage: output length differs from rows"
        );
        assert_eq!(
            (work.m, work.x32.ncols()),
            (m, d + 1),
            "coverage: work buffers made for other landmarks"
        );
        if m == 0 {
            out.fill(0.0);
            return;
        }
        for (xc, oc) in x
            .axis_chunks_iter(Axis(0), COVERAGE_CHUNK)
            .zip(out.axis_chunks_iter_mut(Axis(0), COVERAGE_CHUNK))
        {
            if self.kernel.kind == KernelKind::Laplacian {
                self.laplacian_block(xc, oc, work);
            } else {
                self.euclidean_block(xc, oc, work);
            }
        }
    }

    /// Filter and refine for kernels of the Euclidean distance (at most
    /// [`COVERAGE_CHUNK`] rows).
    fn euclidean_block(
        &self,
        xc: ArrayView2<f64>,
        mut oc: ArrayViewMut1<f64>,
        w: &mut CoverageWork,
    ) {
        let (n, d) = xc.dim();
        let mut x32 = w.x32.slice_mut(s![..n, ..]);
        x32.slice_mut(s![.., ..d])
            .zip_mut_with(&xc, |a, &b| *a = b as f32);
        let mut dots = w.dots.slice_mut(s![..n, ..]);
        // Row i, column j: [x_i, 1]·[−2·l_j, ‖l_j‖²] = ‖x_i − l_j‖² − ‖x_i‖², screened.
        ndarray::linalg::general_mat_mul(1.0f32, &x32, &w.l32.t(), 0.0f32, &mut dots);
        // The screen's error is at most (d + 3)·u·(2‖x‖‖l‖ + ‖l‖²) (d + 1 products of
        // rounded inputs, module docs); one more u covers the f32 rounding of the limit.
        let rel = (d as f64 + 4.0) * U32;
        for ((o, xr), dr) in oc.iter_mut().zip(xc.axis_iter(Axis(0))).zip(dots.rows()) {
            let dr = dr.as_slice().expect("screen rows are contiguous");
            let best = lane_min(dr);
            let xnorm = xr.dot(&xr).sqrt();
            let bound = rel * (2.0 * xnorm * w.lmax + w.lmax * w.lmax);
            let limit = f64::from(best) + 2.0 * bound;
            let mut r2 = f64::INFINITY;
            if limit.is_finite() && limit < f64::from(f32::MAX) {
                // Round the limit up into f32 so no candidate is lost to the conversion.
                let lim32 = (limit + limit.abs() * 2.0 * U32) as f32;
                for (c, chunk) in dr.chunks_exact(LANES).enumerate() {
                    if chunk.iter().fold(false, |h, &v| h | (v <= lim32)) {
                        for (k, &v) in chunk.iter().enumerate() {
                            if v <= lim32 {
                                let j = c * LANES + k;
                                r2 = r2.min(sq_dist(xr, self.landmarks.row(j)));
                            }
                        }
                    }
                }
            }
            if !r2.is_finite() {
                // Inputs beyond the range of f32: measure every landmark exactly.
                for l in self.landmarks.axis_iter(Axis(0)) {
                    r2 = r2.min(sq_dist(xr, l));
                }
            }
            *o = self.kernel.from_sq_dist(r2);
        }
    }

    /// L1 distances to every landmark, then one exponential (at most
    /// [`COVERAGE_CHUNK`] rows).
    fn laplacian_block(
        &self,
        xc: ArrayView2<f64>,
        mut oc: ArrayViewMut1<f64>,
        w: &mut CoverageWork,
    ) {
        for (o, xr) in oc.iter_mut().zip(xc.axis_iter(Axis(0))) {
            w.acc.fill(0.0);
            for (&xk, lk) in xr.iter().zip(w.lt.axis_iter(Axis(0))) {
                let lk = lk.as_slice().expect("transposed landmarks are contiguous");
                for (a, &l) in w.acc.iter_mut().zip(lk) {
                    *a += (xk - l).abs();
                }
            }
            let l1 = w.acc.iter().fold(f64::INFINITY, |a, &b| a.min(b));
            *o = (-self.kernel.gamma * l1).exp();
        }
    }

    /// Coverage of standardized rows `x` into `out`, in parallel over blocks of
    /// [`COVERAGE_CHUNK`] rows on the current rayon pool (row-wise: the result does not
    /// depend on the thread count).
    ///
    /// # Panics
    /// If `x` has a different width from the landmarks or `out` the wrong length.
    #[track_caller]
    pub fn values_into(&self, x: ArrayView2<f64>, mut out: ArrayViewMut1<f64>) {
        assert_eq!(
            x.ncols(),
            self.landmarks.ncols(),
            "coverage: wrong input width"
        );
        assert_eq!(
            x.nrows(),
            out.len(),
            "coverage: output length differs from rows"
        );
        x.axis_chunks_iter(Axis(0), COVERAGE_CHUNK)
            .into_par_iter()
            .zip(
                out.axis_chunks_iter_mut(Axis(0), COVERAGE_CHUNK)
                    .into_par_iter(),
            )
            .for_each_init(|| self.work(), |w, (xc, oc)| self.values_seq(xc, oc, w));
    }

    /// Allocating form of [`Coverage::values_into`].
    pub fn values(&self, x: ArrayView2<f64>) -> Array1<f64> {
        let mut out = Array1::zeros(x.nrows());
        self.values_into(x, out.view_mut());
        out
    }
}

#[cfg(test)]
mod tests;
