//! In-memory fit: standardize the target, run epochs of block minimization (Yu, Hsieh,
//! Chang & Lin, KDD 2010) with dual coordinate descent on each block (Ho & Lin, JMLR
//! 2012) until the relative duality gap is small, and return the model in user units.

use super::{solve_block, BlockWorkspace, DcdSettings, DcdState, Objective, PrimalAccumulator};
use crate::{Error, Result};
use ndarray::{s, Array1, ArrayView1, ArrayView2};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

/// How a fit went.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DcdReport {
    /// Passes over the data run.
    pub epochs: usize,
    /// Objective after the last epoch, of the standardized problem (the user-unit
    /// objective is sd² times it; see [`DcdSettings::in_standard_units`]).
    pub objective: Objective,
    /// Objective after every epoch.
    pub history: Vec<Objective>,
    /// Whether the relative gap reached `tol` within `max_epochs`.
    pub converged: bool,
    /// Dual variables changed, over all epochs.
    pub updates: u64,
}

/// A fitted linear epsilon-SVR on mapped features: f(z) = weightsᵀz + intercept.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DcdFit {
    /// One weight per feature (D), in user units.
    pub weights: Array1<f64>,
    /// Constant term in user units: the target's mean plus the scaled bias weight.
    pub intercept: f64,
    /// Dual variable of every training row in user units (sd·β of the standardized
    /// problem): 0 inside the tube, |β| = C outside it with the L1 loss.
    pub beta: Vec<f64>,
    /// Convergence report.
    pub report: DcdReport,
}

impl DcdFit {
    /// Predictions weightsᵀz_i + intercept for the rows of `z` (rows × D).
    ///
    /// # Panics
    /// If `z` does not have D columns.
    #[track_caller]
    pub fn predict(&self, z: ArrayView2<f64>) -> Array1<f64> {
        assert_eq!(
            z.ncols(),
            self.weights.len(),
            "predict: {} feature columns but the model has {} weights",
            z.ncols(),
            self.weights.len()
        );
        z.dot(&self.weights) + self.intercept
    }
}

/// Fits a linear epsilon-SVR on the in-memory features `z` (rows × D) and targets `y`.
///
/// The target is centred and divided by its population standard deviation, C and
/// epsilon converted with [`DcdSettings::in_standard_units`] (so they keep their meaning
/// in target units), and epochs of [`solve_block`] run over blocks of `block_rows`
/// consecutive rows, the block order reshuffled every epoch from `settings.seed`, until
/// the relative duality gap is at most `settings.tol` or `settings.max_epochs` passed.
/// The free support vectors are kept in memory from block to block
/// ([`BlockWorkspace::new`]), which is what lets several blocks converge together.
/// A constant target gives the constant model (no weights, intercept = the mean).
///
/// # Errors
/// Invalid settings or `block_rows` = 0 ([`Error::InvalidParameter`]), zero rows
/// ([`Error::NoRows`]), a non-finite feature ([`Error::NonFinite`]) or target
/// ([`Error::NonFiniteTarget`]).
///
/// # Panics
/// If `y` does not have one entry per row of `z`.
#[track_caller]
pub fn fit(
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    settings: &DcdSettings,
    block_rows: usize,
) -> Result<DcdFit> {
    let (n, d) = z.dim();
    assert_eq!(y.len(), n, "fit: {n} feature rows but {} targets", y.len());
    settings.validate()?;
    if block_rows == 0 {
        return Err(Error::invalid("block rows", "must be at least 1"));
    }
    let (mean, sd) = match target_scale(z, y)? {
        TargetScaling::Constant(fit) => return Ok(fit),
        TargetScaling::Scaled { mean, sd } => (mean, sd),
    };
    let ys = y.mapv(|v| (v - mean) / sd);
    let solver = settings.in_standard_units(sd);

    let mut state = DcdState::new(d, n);
    let index: Vec<usize> = (0..n).collect();
    let blocks = n.div_ceil(block_rows);
    let range = |b: usize| b * block_rows..((b + 1) * block_rows).min(n);
    let mut order: Vec<usize> = (0..blocks).collect();
    let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
    let mut ws = BlockWorkspace::new();
    let mut history = Vec::new();
    let mut updates = 0;
    let mut converged = false;
    for _ in 0..solver.max_epochs {
        order.shuffle(&mut rng);
        for &b in &order {
            let r = range(b);
            let stats = solve_block(
                &mut state,
                z.slice(s![r.clone(), ..]),
                ys.slice(s![r.clone()]),
                &index[r],
                &solver,
                &mut rng,
                &mut ws,
            );
            updates += stats.updates;
        }
        let mut acc = PrimalAccumulator::new();
        for b in 0..blocks {
            let r = range(b);
            acc.add_block(&state, z.slice(s![r.clone(), ..]), ys.slice(s![r]), &solver);
        }
        let objective = acc.finish(&state, &solver);
        history.push(objective);
        if objective.gap <= solver.tol {
            converged = true;
            break;
        }
    }

    let weights = state.w.slice(s![..d]).mapv(|v| v * sd);
    let intercept = mean + sd * state.w[d];
    let beta = state.beta.iter().map(|b| b * sd).collect();
    Ok(DcdFit {
        weights,
        intercept,
        beta,
        report: DcdReport {
            epochs: history.len(),
            objective: *history.last().expect("at least one epoch runs"),
            history,
            converged,
            updates,
        },
    })
}

/// How an in-memory problem's target is scaled, or the constant model when the target
/// does not vary.
pub(crate) enum TargetScaling {
    /// The target is constant: the fit is the constant model at its mean.
    Constant(DcdFit),
    /// Centre by `mean` and divide by the population standard deviation `sd`.
    Scaled { mean: f64, sd: f64 },
}

/// Checks the in-memory features and targets shared by the in-memory solvers (rows
/// present, every value finite) and returns how to scale the target.
///
/// # Errors
/// [`Error::NoRows`], [`Error::NonFinite`] or [`Error::NonFiniteTarget`].
pub(crate) fn target_scale(z: ArrayView2<f64>, y: ArrayView1<f64>) -> Result<TargetScaling> {
    let (n, d) = z.dim();
    if n == 0 {
        return Err(Error::NoRows("the feature array has zero rows".into()));
    }
    for (row, zi) in z.rows().into_iter().enumerate() {
        if let Some(column) = zi.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite { row, column });
        }
    }
    if let Some(row) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFiniteTarget { row });
    }

    let mean = y.sum() / n as f64;
    let sd = (y.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n as f64).sqrt();
    if crate::solver::source::is_constant(mean, sd) {
        let zero = Objective {
            primal: 0.0,
            dual: 0.0,
            gap: 0.0,
        };
        return Ok(TargetScaling::Constant(DcdFit {
            weights: Array1::zeros(d),
            intercept: mean,
            beta: vec![0.0; n],
            report: DcdReport {
                epochs: 0,
                objective: zero,
                history: Vec::new(),
                converged: true,
                updates: 0,
            },
        }));
    }
    Ok(TargetScaling::Scaled { mean, sd })
}
