//! The sample split into validation folds, and one fit on one fold's mapped training
//! rows: primal Newton passes for the squared loss ([`crate::solver::newton`]) or dual
//! coordinate descent (Ho & Lin, JMLR 2012) for the linear loss (the latter is what the
//! search over D uses for the linear loss).

use std::ops::Range;

use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::data::splitmix64;
use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::solver::dcd::{
    solve_block, BlockWorkspace, DcdSettings, DcdState, Loss, PrimalAccumulator,
};
use crate::solver::newton::{NewtonState, Step, SAMPLE_SALT};
use crate::solver::stream::BlockRows;

/// Rows (expected) in the sample that forms each Newton pass's Hessian on a fold.
const HESSIAN_ROWS: usize = 4_096;

use super::options::{Validation, MIN_FOLD_ROWS};

/// The sample in a seeded random order, with the validation rows of every fit as a
/// contiguous range.
#[derive(Clone, Debug)]
pub(crate) struct Folds {
    /// Standardized inputs, rows permuted.
    pub x: Array2<f64>,
    /// Raw targets, same order.
    pub y: Array1<f64>,
    /// Validation rows of each fit.
    pub ranges: Vec<Range<usize>>,
}

impl Folds {
    /// Shuffles the rows (seeded) and cuts them into validation ranges.
    pub fn new(
        x: ArrayView2<f64>,
        y: ArrayView1<f64>,
        validation: Validation,
        seed: u64,
    ) -> Result<Folds> {
        let n = x.nrows();
        let ranges: Vec<Range<usize>> = match validation {
            Validation::KFold(k) => {
                if n < k * MIN_FOLD_ROWS {
                    return Err(Error::NoRows(format!(
                        "{n} sample rows are too few for {k}-fold validation (at least {} needed)",
                        k * MIN_FOLD_ROWS
                    )));
                }
                (0..k).map(|f| f * n / k..(f + 1) * n / k).collect()
            }
            Validation::Holdout(h) => {
                let m = (h * n as f64).round() as usize;
                if m < MIN_FOLD_ROWS || n - m < MIN_FOLD_ROWS {
                    return Err(Error::NoRows(format!(
                        "{n} sample rows are too few to hold out a share of {h} (at least {MIN_FOLD_ROWS} rows on each side needed)"
                    )));
                }
                std::iter::once(0..m).collect()
            }
        };
        let mut order: Vec<usize> = (0..n).collect();
        order.shuffle(&mut ChaCha8Rng::seed_from_u64(splitmix64(
            seed,
            0x666f6c6473,
        )));
        Ok(Folds {
            x: x.select(Axis(0), &order),
            y: y.select(Axis(0), &order),
            ranges,
        })
    }

    /// Rows outside validation range `f`.
    pub(crate) fn train_rows(&self, f: usize) -> Vec<usize> {
        let r = &self.ranges[f];
        (0..r.start).chain(r.end..self.x.nrows()).collect()
    }
}

/// One fold's mapped rows and its target scaling.
pub(crate) struct FoldData {
    /// Mapped training rows (rows × D).
    pub z_train: Array2<f64>,
    /// Training targets centred by `mean` and divided by `sd`.
    pub y_train: Array1<f64>,
    /// Mapped validation rows.
    pub z_val: Array2<f64>,
    /// Raw validation targets.
    pub y_val: Array1<f64>,
    /// Training target mean.
    pub mean: f64,
    /// Training target standard deviation (population).
    pub sd: f64,
    index: Vec<usize>,
}

impl FoldData {
    /// Maps fold `f`'s training and validation rows with `map`.
    pub fn new(folds: &Folds, f: usize, map: &dyn FeatureMap) -> Result<FoldData> {
        let train = folds.train_rows(f);
        let xt = folds.x.select(Axis(0), &train);
        let yt = folds.y.select(Axis(0), &train);
        let r = folds.ranges[f].clone();
        let mean = yt.sum() / yt.len() as f64;
        let sd = (yt.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / yt.len() as f64).sqrt();
        if !(sd > 0.0 && sd.is_finite()) {
            return Err(Error::NoRows(format!(
                "the target is constant on the training rows of fold {}; nothing to tune",
                f + 1
            )));
        }
        Ok(FoldData {
            z_train: map.transform(xt.view()),
            y_train: yt.mapv(|v| (v - mean) / sd),
            z_val: map.transform(folds.x.slice(s![r.clone(), ..])),
            y_val: folds.y.slice(s![r]).to_owned(),
            mean,
            sd,
            index: (0..train.len()).collect(),
        })
    }
}

/// One candidate's solver on one fold, resumable.
#[derive(Clone, Debug)]
pub(crate) struct Run {
    state: DcdState,
    newton: Option<NewtonState>,
    rng: ChaCha8Rng,
    seed: u64,
    /// Epochs run on this fold (a warm start's inherited epochs not counted).
    pub epochs: usize,
    /// The relative duality gap reached `tol`.
    pub converged: bool,
}

impl Run {
    /// A zero start.
    pub fn cold(fold: &FoldData, seed: u64) -> Run {
        Run {
            state: DcdState::new(fold.z_train.ncols(), fold.z_train.nrows()),
            newton: None,
            rng: ChaCha8Rng::seed_from_u64(seed),
            seed,
            epochs: 0,
            converged: false,
        }
    }

    /// The current weights (D + 1, the last the bias), in the fold's standardized units.
    fn weights(&self) -> &Array1<f64> {
        match &self.newton {
            Some(n) => &n.w,
            None => &self.state.w,
        }
    }

    /// Runs epochs until `budget` epochs have run or the gap reaches `tol`.
    pub fn advance(&mut self, fold: &FoldData, settings: &DcdSettings, budget: usize) {
        let std = settings.in_standard_units(fold.sd);
        if std.loss == Loss::L2 {
            let d = fold.z_train.ncols();
            let share = (HESSIAN_ROWS as f64 / fold.z_train.nrows().max(1) as f64).min(1.0);
            let newton = self.newton.get_or_insert_with(|| NewtonState::new(d));
            while self.epochs < budget && !self.converged {
                let mut acc =
                    newton.accumulator(std.c, std.epsilon, share, self.seed ^ SAMPLE_SALT);
                acc.add_block(
                    None,
                    BlockRows::Mapped(fold.z_train.view()),
                    fold.y_train.view(),
                    &fold.index,
                );
                self.epochs += 1;
                let gap = match newton.step(acc) {
                    Ok(Step::Certified { objective, .. }) => objective.gap,
                    Ok(Step::Moved { bound, .. }) => bound.gap,
                    Ok(Step::Stalled { objective }) => {
                        self.converged = objective.gap <= std.tol;
                        break;
                    }
                    Err(_) => break,
                };
                if !gap.is_finite() {
                    break;
                }
                self.converged = gap <= std.tol;
            }
            return;
        }
        let mut ws = BlockWorkspace::with_cache_rows(0);
        while self.epochs < budget && !self.converged {
            solve_block(
                &mut self.state,
                fold.z_train.view(),
                fold.y_train.view(),
                &fold.index,
                &std,
                &mut self.rng,
                &mut ws,
            );
            self.epochs += 1;
            let mut acc = PrimalAccumulator::new();
            acc.add_block(&self.state, fold.z_train.view(), fold.y_train.view(), &std);
            let gap = acc.finish(&self.state, &std).gap;
            if !gap.is_finite() {
                break;
            }
            self.converged = gap <= std.tol;
        }
    }

    /// Sum of squared validation errors in target units (NaN if the run diverged).
    pub fn validation_sse(&self, fold: &FoldData) -> f64 {
        let d = fold.z_val.ncols();
        let w = self.weights().slice(s![..d]);
        let b = self.weights()[d];
        fold.z_val
            .rows()
            .into_iter()
            .zip(fold.y_val.iter())
            .map(|(z, y)| {
                let f = fold.mean + fold.sd * (z.dot(&w) + b);
                (y - f) * (y - f)
            })
            .sum()
    }
}

/// Seed of one candidate's coordinate order on one fold.
pub(crate) fn run_seed(seed: u64, candidate: usize, fold: usize) -> u64 {
    splitmix64(seed ^ 0x7475_6e65, (candidate as u64) << 16 | fold as u64)
}
