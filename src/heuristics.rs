//! Data-driven defaults for gamma, C and epsilon.
//!
//! * gamma by the median heuristic (Gretton et al., JMLR 2012; analysed by Garreau,
//!   Jitkrittum & Kanagawa, arXiv:1707.07269, 2017). Convention used throughout kernlake:
//!   with H the median of the squared Euclidean distances between distinct rows of the
//!   standardized sample, the Gaussian bandwidth is σ² = H/2, so `gamma = 1/(2σ²) = 1/H`.
//!   For the other kernels the same gamma is used (see [`crate::kernel`] for how gamma
//!   enters each of them).
//! * C and epsilon by Cherkassky & Ma ("Practical selection of SVM parameters and noise
//!   estimation for SVM regression", Neural Networks 17, 2004):
//!   `C = max(|ȳ + 3σ_y|, |ȳ − 3σ_y|)` and `epsilon = 3σ·√(ln n / n)`, with the noise level σ
//!   estimated from k-nearest-neighbour residuals on the sample (their eq. for the
//!   k-NN estimate, with k = 3): `σ̂² = n^{1/5}k / (n^{1/5}k − 1) · (1/n) Σ (y_i − ŷ_i)²`.

use ndarray::{ArrayView1, ArrayView2, Axis};

use crate::error::{Error, Result};

/// Rows of the sample used for the pairwise median (all pairs among them).
const MEDIAN_ROWS: usize = 2_000;

/// Defaults for one dataset.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Defaults {
    /// Kernel width by the median heuristic.
    pub gamma: f64,
    /// Penalty C (target units).
    pub c: f64,
    /// Tube half-width (target units).
    pub epsilon: f64,
    /// The estimated noise standard deviation the epsilon came from.
    pub noise_sd: f64,
}

/// `1 / median ‖x_i − x_j‖²` over pairs of the first rows of `x` (standardized inputs).
pub fn median_gamma(x: ArrayView2<f64>) -> Result<f64> {
    let n = x.nrows().min(MEDIAN_ROWS);
    if n < 2 {
        return Err(Error::NoRows(
            "the median heuristic needs at least two sample rows".into(),
        ));
    }
    let mut d2 = Vec::with_capacity(n * (n - 1) / 2);
    for i in 0..n {
        let xi = x.row(i);
        for j in 0..i {
            let xj = x.row(j);
            d2.push(
                xi.iter()
                    .zip(xj)
                    .map(|(a, b)| (a - b) * (a - b))
                    .sum::<f64>(),
            );
        }
    }
    let mid = d2.len() / 2;
    let (_, m, _) = d2.select_nth_unstable_by(mid, |a, b| a.total_cmp(b));
    let m = *m;
    if !(m > 0.0 && m.is_finite()) {
        return Err(Error::Numerical(
            "the median squared distance between sample rows is zero (most rows are identical); give --gamma".into(),
        ));
    }
    Ok(1.0 / m)
}

/// Noise standard deviation from k-nearest-neighbour residuals (Cherkassky & Ma 2004),
/// on at most the first 2,000 rows of the standardized sample.
pub fn knn_noise_sd(x: ArrayView2<f64>, y: ArrayView1<f64>, k: usize) -> Result<f64> {
    let n = x.nrows().min(MEDIAN_ROWS);
    if n <= k {
        return Err(Error::NoRows(format!(
            "the noise estimate needs more than {k} sample rows"
        )));
    }
    let mut sq = 0.0;
    let mut dist: Vec<(f64, usize)> = Vec::with_capacity(n);
    for i in 0..n {
        dist.clear();
        let xi = x.row(i);
        for (j, xj) in x.axis_iter(Axis(0)).take(n).enumerate() {
            if j != i {
                let d: f64 = xi.iter().zip(xj).map(|(a, b)| (a - b) * (a - b)).sum();
                dist.push((d, j));
            }
        }
        dist.select_nth_unstable_by(k - 1, |a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
        let yhat: f64 = dist[..k].iter().map(|&(_, j)| y[j]).sum::<f64>() / k as f64;
        sq += (y[i] - yhat).powi(2);
    }
    let nk = (n as f64).powf(0.2) * k as f64;
    Ok((nk / (nk - 1.0) * sq / n as f64).sqrt())
}

/// Cherkassky & Ma (2004): `(C, epsilon)` from the target's mean and standard deviation,
/// the noise standard deviation and the number of training rows.
pub fn cherkassky_ma(y_mean: f64, y_sd: f64, noise_sd: f64, n: u64) -> (f64, f64) {
    let c = (y_mean + 3.0 * y_sd).abs().max((y_mean - 3.0 * y_sd).abs());
    let n = (n.max(2)) as f64;
    let eps = 3.0 * noise_sd * (n.ln() / n).sqrt();
    (c, eps)
}

impl Defaults {
    /// All defaults from a standardized input sample, its raw targets, and the target's
    /// mean and standard deviation over all `n` training rows.
    pub fn from_sample(
        x: ArrayView2<f64>,
        y: ArrayView1<f64>,
        y_mean: f64,
        y_sd: f64,
        n: u64,
    ) -> Result<Defaults> {
        let gamma = median_gamma(x)?;
        let noise_sd = knn_noise_sd(x, y, 3)?;
        let (c, epsilon) = cherkassky_ma(y_mean, y_sd, noise_sd, n);
        let c = if c > 0.0 { c } else { 1.0 };
        Ok(Defaults {
            gamma,
            c,
            epsilon,
            noise_sd,
        })
    }
}
