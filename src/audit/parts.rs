//! The sample of an audit: its seeded split into a fit and a check part, standardized
//! inputs, and the small statistics every audit reports.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use super::{Accuracy, MIN_ROWS};
use crate::error::{Error, Result};
use crate::metrics::{mae, r2, rmse};
use crate::scale::Standardizer;

/// The fit and check parts of a sample, inputs standardized on the fit part.
pub(super) struct Parts {
    pub(super) x_fit: Array2<f64>,
    pub(super) y_fit: Array1<f64>,
    pub(super) x_check: Array2<f64>,
    pub(super) y_check: Array1<f64>,
    /// The check rows in raw units.
    pub(super) x_check_raw: Array2<f64>,
    duplicates: usize,
}

impl Parts {
    /// Seeded split: a ChaCha8 shuffle of the row indices, the first `round(split·n)`
    /// (at least one, at most n − 1) to fit. Standardizes with `scaler` when given,
    /// else with one fitted on the fit part.
    pub(super) fn split(
        x: ArrayView2<f64>,
        y: ArrayView1<f64>,
        split: f64,
        seed: u64,
        scaler: Option<&Standardizer>,
    ) -> Result<Parts> {
        let n = x.nrows();
        if n < MIN_ROWS {
            return Err(Error::NoRows(format!(
                "an audit needs at least {MIN_ROWS} rows (most to fit, the rest to check), got {n}"
            )));
        }
        let mut idx: Vec<usize> = (0..n).collect();
        idx.shuffle(&mut ChaCha8Rng::seed_from_u64(seed ^ 0x5eed_a0d1_7000_0001));
        let n_fit = ((split * n as f64).round() as usize).clamp(1, n - 1);
        let (fit_idx, check_idx) = idx.split_at(n_fit);
        let mut x_fit = x.select(Axis(0), fit_idx);
        let x_check_raw = x.select(Axis(0), check_idx);
        let mut x_check = x_check_raw.clone();
        let owned;
        let scaler = match scaler {
            Some(s) => s,
            None => {
                owned = Standardizer::fit(x_fit.view());
                &owned
            }
        };
        scaler.apply(x_fit.view_mut());
        scaler.apply(x_check.view_mut());
        Ok(Parts {
            duplicates: count_duplicates(x_fit.view()),
            x_fit,
            y_fit: y.select(Axis(0), fit_idx),
            x_check,
            y_check: y.select(Axis(0), check_idx),
            x_check_raw,
        })
    }

    /// Remarks about the parts.
    pub(super) fn notes(&self) -> Vec<String> {
        let mut notes = Vec::new();
        if self.duplicates > 0 {
            notes.push(format!(
                "{} fit row(s) repeat an earlier row's inputs; they are kept (Nyström uses \
                 distinct landmarks only)",
                self.duplicates
            ));
        }
        notes
    }

    /// The first `rows` check rows (standardized), for the kernel error.
    pub(super) fn kernel_block(&self, rows: usize) -> Array2<f64> {
        let r = rows.clamp(1, self.x_check.nrows());
        self.x_check.slice(ndarray::s![..r, ..]).to_owned()
    }
}

fn count_duplicates(x: ArrayView2<f64>) -> usize {
    let mut keys: Vec<Vec<u64>> = x
        .axis_iter(Axis(0))
        .map(|r| r.iter().map(|v| v.to_bits()).collect())
        .collect();
    let n = keys.len();
    keys.sort_unstable();
    keys.dedup();
    n - keys.len()
}

/// Typed errors for NaN or ±inf in `x` or `y`.
pub(super) fn check_finite(x: ArrayView2<f64>, y: ArrayView1<f64>) -> Result<()> {
    if let Some(((row, column), _)) = x.indexed_iter().find(|(_, v)| !v.is_finite()) {
        return Err(Error::NonFinite { row, column });
    }
    if let Some(row) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFiniteTarget { row });
    }
    Ok(())
}

/// Population mean and standard deviation.
pub(super) fn mean_sd(y: ArrayView1<f64>) -> (f64, f64) {
    let n = y.len().max(1) as f64;
    let mean = y.sum() / n;
    let var = y.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n;
    (mean, var.sqrt())
}

/// RMSE, MAE and R² of `pred` against `y`.
pub(super) fn accuracy(y: ArrayView1<f64>, pred: ArrayView1<f64>) -> Accuracy {
    Accuracy {
        rmse: rmse(y, pred),
        mae: mae(y, pred),
        r2: r2(y, pred),
    }
}
