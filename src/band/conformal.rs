//! Split conformal calibration (Vovk, Gammerman & Shafer 2005; Lei et al., JASA 2018,
//! Algorithm 2 with the locally weighted score of their §5.2): the holdout rows, which
//! the solver never trained on, give normalized residuals s = |y − f(x)| / σ(x); the
//! band at level α around a new row's prediction is f(x) ± q_α σ(x), where q_α is the
//! ⌈(n + 1)α⌉-th smallest of the n scores. Under exchangeability of the holdout and the
//! new row, the band holds the new row's measured value with probability at least α
//! (Lei et al. 2018, Theorem 2.1).
//!
//! The model file keeps at most [`SCORES_KEPT`] scores: all of them when the holdout is
//! smaller, else the order statistics of ranks ⌈i·n/K⌉ (i = 1..K) of the full sorted
//! sample. A quantile is then read at the smallest kept rank at or above the one asked
//! for, which is never below the exact order statistic: the guarantee is kept, the band
//! is at most one kept step wider.

use ndarray::{Array2, ArrayView1, ArrayView2, Axis};

use super::spread::{Spread, SpreadMoments};
use crate::error::{Error, Result};
use crate::features::FeatureMap;

/// Most normalized holdout residuals kept in a model file.
pub const SCORES_KEPT: usize = 10_000;

/// Rows mapped at a time while calibrating (bounds the memory of mapped rows).
const CHUNK_ROWS: usize = 2_048;

/// A calibrated band: the spread model and the sorted normalized holdout residuals.
#[derive(Clone, Debug, PartialEq)]
pub struct Band {
    /// σ(x), in the model's mapped features.
    pub spread: Spread,
    /// Normalized residuals |y − f(x)| / σ(x) of the holdout, sorted ascending, at most
    /// [`SCORES_KEPT`] of them (order statistics of the full sample when it was larger).
    pub scores: Vec<f64>,
    /// Holdout rows the scores were computed on (n in ⌈(n + 1)α⌉).
    pub calibration_rows: u64,
}

/// Checks a band level: a probability strictly between 0 and 1.
///
/// # Errors
/// [`Error::InvalidParameter`] naming the level.
pub fn check_level(level: f64) -> Result<()> {
    if level.is_finite() && level > 0.0 && level < 1.0 {
        Ok(())
    } else {
        Err(Error::invalid(
            "band level",
            format!("must be a probability strictly between 0 and 1 (such as 0.95), got {level}"),
        ))
    }
}

/// Mapped features of `x` (standardized rows), predictions and σ, chunk by chunk.
fn for_each_chunk(
    map: &dyn FeatureMap,
    x: ArrayView2<f64>,
    mut f: impl FnMut(ArrayView2<f64>, usize),
) {
    let mut first = 0;
    for xc in x.axis_chunks_iter(Axis(0), CHUNK_ROWS) {
        let mut z = Array2::zeros((xc.nrows(), map.output_dim()));
        map.transform_into(xc, z.view_mut());
        f(z.view(), first);
        first += xc.nrows();
    }
}

impl Band {
    /// Calibrates a band for the model `intercept + weights · z(x)`: the spread model on
    /// training rows (`train_x` standardized, `train_y` in target units; the fit passes a
    /// seeded uniform sample of its training rows), then the scores on holdout rows
    /// (`holdout_x` standardized, `holdout_y`). `None` when either set is empty.
    ///
    /// # Errors
    /// [`Error::Numerical`] when the spread fit fails.
    ///
    /// # Panics
    /// If the shapes disagree.
    pub fn calibrate(
        map: &dyn FeatureMap,
        weights: ArrayView1<f64>,
        intercept: f64,
        train: (ArrayView2<f64>, ArrayView1<f64>),
        holdout: (ArrayView2<f64>, ArrayView1<f64>),
    ) -> Result<Option<Band>> {
        let (train_x, train_y) = train;
        let (holdout_x, holdout_y) = holdout;
        assert_eq!(train_x.nrows(), train_y.len(), "band: training rows differ");
        assert_eq!(
            holdout_x.nrows(),
            holdout_y.len(),
            "band: holdout rows differ"
        );
        if train_x.nrows() == 0 || holdout_x.nrows() == 0 {
            return Ok(None);
        }
        let mut moments = SpreadMoments::new(map.output_dim());
        for_each_chunk(map, train_x, |z, first| {
            let a: ndarray::Array1<f64> = z
                .axis_iter(Axis(0))
                .enumerate()
                .map(|(i, zr)| (train_y[first + i] - intercept - zr.dot(&weights)).abs())
                .collect();
            moments.add(z, a.view());
        });
        let Some(spread) = moments.fit()? else {
            return Ok(None);
        };
        let mut scores = Vec::with_capacity(holdout_x.nrows());
        for_each_chunk(map, holdout_x, |z, first| {
            for (i, zr) in z.axis_iter(Axis(0)).enumerate() {
                let r = (holdout_y[first + i] - intercept - zr.dot(&weights)).abs();
                scores.push(r / spread.at(zr));
            }
        });
        Ok(Some(Band::from_scores(spread, scores)))
    }

    /// A band from a spread model and every normalized holdout residual (any order).
    pub fn from_scores(spread: Spread, mut scores: Vec<f64>) -> Band {
        scores.sort_by(f64::total_cmp);
        let n = scores.len();
        let kept = if n <= SCORES_KEPT {
            scores
        } else {
            (1..=SCORES_KEPT)
                .map(|i| scores[kept_rank(i, n) - 1])
                .collect()
        };
        Band {
            spread,
            scores: kept,
            calibration_rows: n as u64,
        }
    }

    /// The score quantile q at `level`: the ⌈(n + 1)·level⌉-th smallest score.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] when the level is not in (0, 1), or when it is so high
    /// that ⌈(n + 1)·level⌉ > n (the band would be unbounded), saying how many holdout
    /// rows it would need.
    pub fn quantile(&self, level: f64) -> Result<f64> {
        check_level(level)?;
        let n = self.calibration_rows as usize;
        let rank = ((n as f64 + 1.0) * level).ceil() as usize;
        if rank > n || self.scores.is_empty() {
            let need = (level / (1.0 - level)).ceil();
            return Err(Error::invalid(
                "band level",
                format!(
                    "{level} needs at least {need} holdout rows for a bounded band, but the model was calibrated on {n}"
                ),
            ));
        }
        let k = self.scores.len();
        if k == n {
            return Ok(self.scores[rank - 1]);
        }
        // Smallest kept rank at or above `rank`.
        let i = (1..=k).find(|&i| kept_rank(i, n) >= rank).unwrap_or(k);
        Ok(self.scores[i - 1])
    }

    /// The band [f − qσ, f + qσ] for a prediction `f` with spread `sigma` and quantile `q`.
    #[inline]
    pub fn interval(prediction: f64, sigma: f64, q: f64) -> (f64, f64) {
        (prediction - q * sigma, prediction + q * sigma)
    }

    /// Mapped-feature width of the spread model.
    pub fn dim(&self) -> usize {
        self.spread.weights.len()
    }
}

/// Rank (1-based, in the full sorted sample of n) of the i-th kept score of K.
fn kept_rank(i: usize, n: usize) -> usize {
    (i * n).div_ceil(SCORES_KEPT)
}
