//! Predictions with the band's spread σ, mapping each chunk of rows once: for scoring
//! (the band columns) and for rows in memory ([`predict_with_band`]).

use ndarray::{Array2, ArrayView2, ArrayViewMut1, Axis};
use rayon::prelude::*;

use super::banded::no_band;
use crate::band::{check_level, Band};
use crate::coverage::COVERAGE_CHUNK as COVERAGE_CHUNK_ROWS;
use crate::error::Result;
use crate::model::Model;

/// Predictions, spreads σ and (if `coverage`) coverage of raw-unit rows `x` in one pass
/// over chunks of rows: each chunk is standardized and mapped once; the prediction is
/// computed exactly as [`Model::predict_into`] does (so equal bit for bit) and σ is one
/// more dot product of the same mapped row. Row-wise, so independent of threads and
/// batch size.
pub(crate) fn predict_band(
    model: &Model,
    band: &Band,
    x: ArrayView2<f64>,
    mut pred: ArrayViewMut1<f64>,
    mut sigma: ArrayViewMut1<f64>,
    coverage: Option<ArrayViewMut1<f64>>,
) {
    let d_out = model.map().output_dim();
    let cov = model.coverage.as_ref().filter(|_| coverage.is_some());
    let mut no_coverage = ndarray::Array1::<f64>::zeros(0);
    let mut cov_out = coverage.unwrap_or(no_coverage.view_mut());
    let n = x.nrows();
    // Chunks of coverage's size, each with its slices of the outputs; a chunk's
    // coverage slice is empty when coverage is not asked for.
    let cov_len = |lo: usize| {
        if cov.is_some() {
            (n - lo).min(COVERAGE_CHUNK_ROWS)
        } else {
            0
        }
    };
    let mut jobs = Vec::with_capacity(n.div_ceil(COVERAGE_CHUNK_ROWS));
    let (mut p_rest, mut s_rest, mut c_rest) =
        (pred.view_mut(), sigma.view_mut(), cov_out.view_mut());
    for lo in (0..n).step_by(COVERAGE_CHUNK_ROWS) {
        let m = (n - lo).min(COVERAGE_CHUNK_ROWS);
        let (p, pr) = p_rest.split_at(Axis(0), m);
        let (s, sr) = s_rest.split_at(Axis(0), m);
        let (c, cr) = c_rest.split_at(Axis(0), cov_len(lo));
        jobs.push((lo, p, s, c));
        (p_rest, s_rest, c_rest) = (pr, sr, cr);
    }
    // One workspace per worker: the standardized rows, their mapped features and the
    // coverage scratch, reused from chunk to chunk.
    jobs.into_par_iter().for_each_init(
        || {
            (
                Array2::<f64>::zeros((COVERAGE_CHUNK_ROWS, x.ncols())),
                Array2::<f64>::zeros((COVERAGE_CHUNK_ROWS, d_out)),
                cov.map(|c| c.work()),
            )
        },
        |(xbuf, zbuf, work), (lo, mut p, mut s, c)| {
            let m = p.len();
            let mut xs = xbuf.slice_mut(ndarray::s![..m, ..]);
            xs.assign(&x.slice(ndarray::s![lo..lo + m, ..]));
            model.scaler.apply(xs.view_mut());
            let mut z = zbuf.slice_mut(ndarray::s![..m, ..]);
            model.map().transform_into(xs.view(), z.view_mut());
            for (i, zr) in z.axis_iter(Axis(0)).enumerate() {
                p[i] = model.intercept + zr.dot(&model.weights);
                s[i] = band.spread.at(zr);
            }
            if let (Some(cv), Some(w)) = (cov, work.as_mut()) {
                cv.values_seq(xs.view(), c, w);
            }
        },
    );
}

/// Predictions and the band at `level` of raw-unit rows `x` in memory (rows × inputs,
/// contract order): `(prediction, low, high)`, each equal to what scoring writes.
///
/// # Errors
/// [`crate::Error::InvalidParameter`] when the model stores no band or the level is not in
/// (0, 1) or beyond what its holdout supports.
///
/// # Panics
/// If `x` has the wrong number of columns.
pub fn predict_with_band(
    model: &Model,
    x: ArrayView2<f64>,
    level: f64,
) -> Result<(
    ndarray::Array1<f64>,
    ndarray::Array1<f64>,
    ndarray::Array1<f64>,
)> {
    check_level(level)?;
    let band = model.band.as_ref().ok_or_else(no_band)?;
    let q = band.quantile(level)?;
    assert_eq!(
        x.ncols(),
        model.input_dim(),
        "wrong number of input columns"
    );
    let n = x.nrows();
    let mut pred = ndarray::Array1::zeros(n);
    let mut sigma = ndarray::Array1::zeros(n);
    predict_band(model, band, x, pred.view_mut(), sigma.view_mut(), None);
    let low = ndarray::Zip::from(&pred)
        .and(&sigma)
        .map_collect(|&f, &s| Band::interval(f, s, q).0);
    let high = ndarray::Zip::from(&pred)
        .and(&sigma)
        .map_collect(|&f, &s| Band::interval(f, s, q).1);
    Ok((pred, low, high))
}
