//! Predictions and coverage of rows in memory, in one pass over blocks of rows.

use ndarray::{s, Array2, ArrayView2, ArrayViewMut1, Axis};
use rayon::prelude::*;

use crate::coverage::COVERAGE_CHUNK;
use crate::model::Model;

/// Predictions and coverage of raw-unit rows `x` (rows × inputs, contract order) in one
/// pass over blocks of rows on the current rayon pool: each block is predicted by
/// [`Model::predict_into`] (so predictions equal [`Model::predict`] bit for bit), then
/// standardized once more into a per-worker buffer for [`crate::coverage::Coverage`]
/// while it is still in cache. Row-wise, so neither output depends on the thread count
/// or on how rows are batched.
///
/// # Panics
/// If the model stores no coverage, `x` has the wrong number of columns, or `pred` or
/// `coverage` has the wrong length.
#[track_caller]
pub fn predict_covered(
    model: &Model,
    x: ArrayView2<f64>,
    mut pred: ArrayViewMut1<f64>,
    mut coverage: ArrayViewMut1<f64>,
) {
    let c = model
        .coverage
        .as_ref()
        .expect("predict_covered: the model stores no coverage landmarks");
    assert_eq!(
        x.ncols(),
        model.input_dim(),
        "predict_covered: wrong number of input columns"
    );
    assert_eq!(
        (pred.len(), coverage.len()),
        (x.nrows(), x.nrows()),
        "predict_covered: output lengths differ from rows"
    );
    let d = x.ncols();
    x.axis_chunks_iter(Axis(0), COVERAGE_CHUNK)
        .into_par_iter()
        .zip(
            pred.axis_chunks_iter_mut(Axis(0), COVERAGE_CHUNK)
                .into_par_iter(),
        )
        .zip(
            coverage
                .axis_chunks_iter_mut(Axis(0), COVERAGE_CHUNK)
                .into_par_iter(),
        )
        .for_each_init(
            || (c.work(), Array2::<f64>::zeros((COVERAGE_CHUNK, d))),
            |(work, buf), ((xc, pc), vc)| {
                model.predict_into(xc, pc);
                let mut xs = buf.slice_mut(s![..xc.nrows(), ..]);
                xs.assign(&xc);
                model.scaler.apply(xs.view_mut());
                c.values_seq(xs.view(), vc, work);
            },
        );
}
