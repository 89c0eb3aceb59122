//! The spread model σ(x): how large the model's error is expected to be at `x`, fitted in
//! the model's own mapped features to the absolute residuals of training rows, so that a
//! band can be wide where the process is noisy and narrow where it is quiet (locally
//! weighted conformal prediction: Lei, G'Sell, Rinaldo, Tibshirani & Wasserman, JASA
//! 2018, §5.2, who fit the mean absolute deviation on the training half; Papadopoulos,
//! Gammerman & Vovk 2008 call the same idea a normalized nonconformity measure).
//!
//! The fit is ridge regression of |y − f(x)| on the centred mapped features z(x) of a
//! sample of training rows: one m × D × D Gram product and one D × D eigendecomposition,
//! like the Newton solver's sampled Hessian, never D² work per row. The ridge weight is
//! chosen by generalized cross-validation (Golub, Heath & Wahba, Technometrics 1979),
//! which the eigendecomposition makes free for every candidate. Evaluating σ costs one
//! dot product of length D per row, on features the prediction has already mapped.
//!
//! σ is kept positive by a floor of [`FLOOR_SHARE`] of the mean absolute residual: a
//! ridge fit can dip towards zero or below, and a band of zero width would make every
//! normalized residual infinite. Any σ fitted without the calibration rows keeps the
//! conformal guarantee; a better σ only makes the band tighter where it can be.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};

use crate::error::Result;
use crate::features::symmetric_eigen;

/// Share of the mean absolute training residual below which σ never falls.
pub const FLOOR_SHARE: f64 = 0.01;

/// Candidate ridge weights, as multiples of tr(G)/D (the mean eigenvalue of the centred
/// Gram matrix G), from which generalized cross-validation chooses.
const RIDGE_GRID: [f64; 9] = [1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 3e-2, 1e-1, 3e-1, 1.0];

/// A fitted spread model: σ(z) = max(intercept + weights · z, floor).
#[derive(Clone, Debug, PartialEq)]
pub struct Spread {
    /// Weights on the D mapped features (target units).
    pub weights: Array1<f64>,
    /// Constant term (target units).
    pub intercept: f64,
    /// Lowest value σ takes (target units, positive).
    pub floor: f64,
    /// Training rows the spread was fitted on.
    pub rows: u64,
}

/// What the spread fit needs from its rows, summed chunk by chunk in row order so that
/// only D × D numbers are held whatever the number of rows: ZᵀZ, Zᵀa, Σz, Σa, Σa².
#[derive(Clone, Debug)]
pub struct SpreadMoments {
    rows: u64,
    gram: Array2<f64>,
    za: Array1<f64>,
    z_sum: Array1<f64>,
    a_sum: f64,
    a2_sum: f64,
}

impl SpreadMoments {
    /// Empty moments for D mapped features.
    pub fn new(d: usize) -> Self {
        SpreadMoments {
            rows: 0,
            gram: Array2::zeros((d, d)),
            za: Array1::zeros(d),
            z_sum: Array1::zeros(d),
            a_sum: 0.0,
            a2_sum: 0.0,
        }
    }

    /// Adds rows with mapped features `z` (rows × D) and absolute residuals `a`.
    ///
    /// # Panics
    /// If the shapes disagree.
    pub fn add(&mut self, z: ArrayView2<f64>, a: ArrayView1<f64>) {
        assert_eq!(z.nrows(), a.len(), "spread: rows differ");
        assert_eq!(z.ncols(), self.za.len(), "spread: D differs");
        self.gram += &z.t().dot(&z);
        self.za += &z.t().dot(&a);
        self.z_sum += &z.sum_axis(Axis(0));
        self.a_sum += a.sum();
        self.a2_sum += a.dot(&a);
        self.rows += z.nrows() as u64;
    }

    /// Rows added so far.
    pub fn rows(&self) -> u64 {
        self.rows
    }

    /// Fits the spread model (`None` without rows).
    ///
    /// # Errors
    /// [`crate::Error::Numerical`] when the eigensolver fails.
    pub fn fit(&self) -> Result<Option<Spread>> {
        if self.rows == 0 {
            return Ok(None);
        }
        let m = self.rows as f64;
        let d = self.za.len();
        let mean_abs = self.a_sum / m;
        let floor = if mean_abs > 0.0 {
            FLOOR_SHARE * mean_abs
        } else {
            // Every residual is zero: any positive σ gives a band of zero width.
            1.0
        };
        // Centred moments: G = ZᵀZ − m z̄z̄ᵀ, b = Zᵀa − m z̄ ā, Σ(a − ā)².
        let z_mean = &self.z_sum / m;
        let mut gram = self.gram.clone();
        for i in 0..d {
            for j in 0..d {
                gram[[i, j]] -= m * z_mean[i] * z_mean[j];
            }
        }
        let b = &self.za - &(&z_mean * (m * mean_abs));
        let total = (self.a2_sum - m * mean_abs * mean_abs).max(0.0);
        let (eigenvalues, vectors) = symmetric_eigen(&gram)?;
        let lam: Vec<f64> = eigenvalues.iter().map(|&l| l.max(0.0)).collect();
        let beta: Array1<f64> = vectors.t().dot(&b);
        let scale = (lam.iter().sum::<f64>() / d.max(1) as f64).max(f64::MIN_POSITIVE);
        // GCV(λ) = m · RSS(λ) / (m − df(λ))², with RSS and the effective degrees of
        // freedom df = Σ λᵢ / (λᵢ + λ) written in the eigenbasis of G.
        let mut best: Option<(f64, f64)> = None;
        for &share in &RIDGE_GRID {
            let ridge = share * scale;
            let mut rss = total;
            let mut df = 0.0;
            for (&l, &bt) in lam.iter().zip(beta.iter()) {
                let h = 1.0 / (l + ridge);
                rss -= bt * bt * (2.0 * h - l * h * h);
                df += l * h;
            }
            let denom = (m - df).max(1.0);
            let gcv = m * rss.max(0.0) / (denom * denom);
            if best.is_none_or(|(g, _)| gcv < g) {
                best = Some((gcv, ridge));
            }
        }
        let ridge = best.map(|(_, r)| r).unwrap_or(scale);
        let coef: Array1<f64> = beta
            .iter()
            .zip(&lam)
            .map(|(&bt, &l)| bt / (l + ridge))
            .collect();
        let weights = vectors.dot(&coef);
        let intercept = mean_abs - z_mean.dot(&weights);
        Ok(Some(Spread {
            weights,
            intercept,
            floor,
            rows: self.rows,
        }))
    }
}

impl Spread {
    /// σ of one row's mapped features.
    #[inline]
    pub fn at(&self, z: ArrayView1<f64>) -> f64 {
        (self.intercept + z.dot(&self.weights)).max(self.floor)
    }
}
