//! Standardization of features to zero mean and unit variance, from the survey pass's
//! streaming statistics or from an array in memory.
//!
//! The convention is the population standard deviation (divide by n), and a scale of 1
//! for a column whose standard deviation is 0 (a constant column then maps to 0).

use ndarray::{ArrayView2, ArrayViewMut2, Axis};

use crate::data::{ColumnStats, Survey};

/// Per-column centring and scaling: `z = (x − mean) / scale`.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Standardizer {
    /// Mean of each column.
    pub mean: Vec<f64>,
    /// Population standard deviation of each column, 1 where it is 0.
    pub scale: Vec<f64>,
}

fn scale_of(variance: f64) -> f64 {
    let sd = variance.max(0.0).sqrt();
    if sd == 0.0 {
        1.0
    } else {
        sd
    }
}

impl Standardizer {
    /// From the feature statistics of a survey pass.
    pub fn from_survey(s: &Survey) -> Self {
        Self::from_stats(&s.features)
    }

    /// From column statistics (for example a survey's target, to scale `y`).
    pub fn from_stats(stats: &[ColumnStats]) -> Self {
        Standardizer {
            mean: stats.iter().map(|c| c.mean).collect(),
            scale: stats.iter().map(|c| scale_of(c.variance)).collect(),
        }
    }

    /// From an array in memory (rows × columns), by the two-pass formula. An array
    /// without rows gives mean 0 and scale 1. Non-finite values give non-finite
    /// statistics: check the data first.
    pub fn fit(x: ArrayView2<f64>) -> Self {
        let n = x.nrows();
        if n == 0 {
            return Standardizer {
                mean: vec![0.0; x.ncols()],
                scale: vec![1.0; x.ncols()],
            };
        }
        let mut mean = Vec::with_capacity(x.ncols());
        let mut scale = Vec::with_capacity(x.ncols());
        for col in x.axis_iter(Axis(1)) {
            let m = col.iter().sum::<f64>() / n as f64;
            let v = col.iter().map(|&v| (v - m) * (v - m)).sum::<f64>() / n as f64;
            mean.push(m);
            scale.push(scale_of(v));
        }
        Standardizer { mean, scale }
    }

    /// Standardizes `x` (rows × columns) in place.
    ///
    /// # Panics
    /// If `x` does not have [`Self::dim`] columns.
    pub fn apply(&self, mut x: ArrayViewMut2<f64>) {
        assert_eq!(
            x.ncols(),
            self.dim(),
            "Standardizer::apply: the array has {} columns but the standardizer {}",
            x.ncols(),
            self.dim()
        );
        for mut row in x.rows_mut() {
            for ((v, m), s) in row.iter_mut().zip(&self.mean).zip(&self.scale) {
                *v = (*v - m) / s;
            }
        }
    }

    /// Undoes [`Self::apply`] in place.
    ///
    /// # Panics
    /// If `x` does not have [`Self::dim`] columns.
    pub fn unapply(&self, mut x: ArrayViewMut2<f64>) {
        assert_eq!(
            x.ncols(),
            self.dim(),
            "Standardizer::unapply: the array has {} columns but the standardizer {}",
            x.ncols(),
            self.dim()
        );
        for mut row in x.rows_mut() {
            for ((v, m), s) in row.iter_mut().zip(&self.mean).zip(&self.scale) {
                *v = *v * s + m;
            }
        }
    }

    /// Number of columns.
    pub fn dim(&self) -> usize {
        self.mean.len()
    }
}
