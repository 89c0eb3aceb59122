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
    let mut cov_out = coverage;
    let n = x.nrows();
    let chunks: Vec<(usize, usize)> = (0..n)
        .step_by(COVERAGE_CHUNK_ROWS)
        .map(|lo| (lo, (lo + COVERAGE_CHUNK_ROWS).min(n)))
        .collect();
    // Results per chunk, then written in order.
    let results: Vec<(Vec<f64>, Vec<f64>, Vec<f64>)> = chunks
        .par_iter()
        .map_init(
            || cov.map(|c| c.work()),
            |work, &(lo, hi)| {
                let mut xs = x.slice(ndarray::s![lo..hi, ..]).to_owned();
                model.scaler.apply(xs.view_mut());
                let mut z = Array2::zeros((hi - lo, d_out));
                model.map().transform_into(xs.view(), z.view_mut());
                let mut p = Vec::with_capacity(hi - lo);
                let mut s = Vec::with_capacity(hi - lo);
                for zr in z.axis_iter(Axis(0)) {
                    p.push(model.intercept + zr.dot(&model.weights));
                    s.push(band.spread.at(zr));
                }
                let mut c = vec![0.0; if cov.is_some() { hi - lo } else { 0 }];
                if let (Some(cv), Some(w)) = (cov, work.as_mut()) {
                    cv.values_seq(xs.view(), ndarray::ArrayViewMut1::from(&mut c[..]), w);
                }
                (p, s, c)
            },
        )
        .collect();
    for ((lo, hi), (p, s, c)) in chunks.into_iter().zip(results) {
        pred.slice_mut(ndarray::s![lo..hi])
            .assign(&ndarray::ArrayView1::from(&p[..]));
        sigma
            .slice_mut(ndarray::s![lo..hi])
            .assign(&ndarray::ArrayView1::from(&s[..]));
        if let Some(co) = cov_out.as_mut() {
            co.slice_mut(ndarray::s![lo..hi])
                .assign(&ndarray::ArrayView1::from(&c[..]));
        }
    }
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
