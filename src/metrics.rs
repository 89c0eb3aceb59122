//! Accuracy measures for regression: root mean squared error, mean absolute error,
//! coefficient of determination R², the share of rows inside the epsilon tube and the
//! share of support vectors, as one-shot functions and as a streaming accumulator.
//!
//! Definitions are the common ones: with residuals r_i = y_i − f_i over n rows,
//! RMSE = √(Σ r_i² / n), MAE = Σ |r_i| / n, R² = 1 − Σ r_i² / Σ (y_i − ȳ)²,
//! tube share = #{i : |r_i| ≤ ε} / n, support share = #{i : β_i ≠ 0} / n.
//! With zero rows every measure is NaN; R² is NaN when the targets are all equal.

use ndarray::ArrayView1;
use serde::{Deserialize, Serialize};

#[track_caller]
fn check_lengths(y: &ArrayView1<f64>, f: &ArrayView1<f64>) {
    assert_eq!(
        y.len(),
        f.len(),
        "targets and predictions must have the same length ({} vs {})",
        y.len(),
        f.len()
    );
}

/// Root mean squared error √(Σ (y_i − f_i)² / n); NaN for zero rows.
///
/// # Panics
/// If `y` and `f` differ in length.
#[track_caller]
pub fn rmse(y: ArrayView1<f64>, f: ArrayView1<f64>) -> f64 {
    check_lengths(&y, &f);
    let ss: f64 = y.iter().zip(f.iter()).map(|(a, b)| (a - b) * (a - b)).sum();
    (ss / y.len() as f64).sqrt()
}

/// Mean absolute error Σ |y_i − f_i| / n; NaN for zero rows.
///
/// # Panics
/// If `y` and `f` differ in length.
#[track_caller]
pub fn mae(y: ArrayView1<f64>, f: ArrayView1<f64>) -> f64 {
    check_lengths(&y, &f);
    let s: f64 = y.iter().zip(f.iter()).map(|(a, b)| (a - b).abs()).sum();
    s / y.len() as f64
}

/// Coefficient of determination 1 − Σ (y_i − f_i)² / Σ (y_i − ȳ)²; NaN for zero rows or
/// when all targets are equal.
///
/// # Panics
/// If `y` and `f` differ in length.
#[track_caller]
pub fn r2(y: ArrayView1<f64>, f: ArrayView1<f64>) -> f64 {
    check_lengths(&y, &f);
    let n = y.len() as f64;
    let mean = y.sum() / n;
    let ss_tot: f64 = y.iter().map(|a| (a - mean) * (a - mean)).sum();
    let ss_res: f64 = y.iter().zip(f.iter()).map(|(a, b)| (a - b) * (a - b)).sum();
    if ss_tot > 0.0 {
        1.0 - ss_res / ss_tot
    } else {
        f64::NAN
    }
}

/// Share of rows inside the epsilon tube, #{i : |y_i − f_i| ≤ ε} / n; NaN for zero rows.
///
/// # Panics
/// If `y` and `f` differ in length.
#[track_caller]
pub fn tube_share(y: ArrayView1<f64>, f: ArrayView1<f64>, epsilon: f64) -> f64 {
    check_lengths(&y, &f);
    let inside = y
        .iter()
        .zip(f.iter())
        .filter(|(a, b)| (*a - *b).abs() <= epsilon)
        .count();
    inside as f64 / y.len() as f64
}

/// Share of support vectors, #{i : β_i ≠ 0} / n, from the dual variables of a fit;
/// NaN for zero rows.
pub fn support_share(beta: &[f64]) -> f64 {
    let sv = beta.iter().filter(|b| **b != 0.0).count();
    sv as f64 / beta.len() as f64
}

/// The measures of one evaluation, as returned by [`MetricsAccumulator::finish`].
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Metrics {
    /// Number of rows seen.
    pub n: u64,
    /// Root mean squared error.
    pub rmse: f64,
    /// Mean absolute error.
    pub mae: f64,
    /// Coefficient of determination (NaN when all targets are equal).
    pub r2: f64,
    /// Share of rows with |y − f| ≤ epsilon.
    pub tube_share: f64,
}

/// Streaming form of the measures: add batches of (target, prediction) in any sizes and
/// obtain the same values as the one-shot functions on the concatenated rows (up to
/// rounding). The target's spread for R² is merged batch by batch with the pairwise
/// update of Chan, Golub & LeVeque (The American Statistician 37, 1983).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct MetricsAccumulator {
    epsilon: f64,
    n: u64,
    sum_sq: f64,
    sum_abs: f64,
    inside: u64,
    mean_y: f64,
    m2_y: f64,
}

impl MetricsAccumulator {
    /// An empty accumulator; `epsilon` is the tube half-width for the tube share.
    pub fn new(epsilon: f64) -> Self {
        MetricsAccumulator {
            epsilon,
            n: 0,
            sum_sq: 0.0,
            sum_abs: 0.0,
            inside: 0,
            mean_y: 0.0,
            m2_y: 0.0,
        }
    }

    /// Adds one batch of targets `y` and predictions `f`.
    ///
    /// # Panics
    /// If `y` and `f` differ in length.
    #[track_caller]
    pub fn add(&mut self, y: ArrayView1<f64>, f: ArrayView1<f64>) {
        check_lengths(&y, &f);
        if y.is_empty() {
            return;
        }
        let nb = y.len() as f64;
        let mean_b = y.sum() / nb;
        let mut m2_b = 0.0;
        for (a, b) in y.iter().zip(f.iter()) {
            let r = a - b;
            self.sum_sq += r * r;
            self.sum_abs += r.abs();
            if r.abs() <= self.epsilon {
                self.inside += 1;
            }
            m2_b += (a - mean_b) * (a - mean_b);
        }
        let na = self.n as f64;
        let total = na + nb;
        let delta = mean_b - self.mean_y;
        self.mean_y += delta * nb / total;
        self.m2_y += m2_b + delta * delta * na * nb / total;
        self.n += y.len() as u64;
    }

    /// Adds the rows of `other` (an accumulator of other rows with the same epsilon),
    /// the target's spread merged by Chan, Golub & LeVeque's pairwise update.
    pub fn merge(&mut self, other: &MetricsAccumulator) {
        if other.n == 0 {
            return;
        }
        let (na, nb) = (self.n as f64, other.n as f64);
        let total = na + nb;
        let delta = other.mean_y - self.mean_y;
        self.mean_y += delta * nb / total;
        self.m2_y += other.m2_y + delta * delta * na * nb / total;
        self.sum_sq += other.sum_sq;
        self.sum_abs += other.sum_abs;
        self.inside += other.inside;
        self.n += other.n;
    }

    /// Rows added so far.
    pub fn rows(&self) -> u64 {
        self.n
    }

    /// The measures over every row added so far (NaN everywhere if none).
    pub fn finish(&self) -> Metrics {
        let n = self.n as f64;
        let r2 = if self.m2_y > 0.0 {
            1.0 - self.sum_sq / self.m2_y
        } else {
            f64::NAN
        };
        Metrics {
            n: self.n,
            rmse: (self.sum_sq / n).sqrt(),
            mae: self.sum_abs / n,
            r2,
            tube_share: self.inside as f64 / n,
        }
    }
}
