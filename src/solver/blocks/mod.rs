//! Out-of-core training of linear epsilon-SVR on mapped features, with two solvers that
//! share the streaming pass of `crate::solver::stream`:
//!
//! * **dual** — block minimization (Yu, Hsieh, Chang & Lin, "Large linear classification
//!   when data cannot fit in memory", KDD 2010) with dual coordinate descent on each block
//!   (Ho & Lin, JMLR 2012). One dual variable per row (8 bytes a row) lives in
//!   `DcdState` for the whole run; units are visited in a seeded random order each
//!   epoch, and blocks (or whole small files) are gathered into sub-problems of
//!   `block_rows` rows that are swept several times before the next arrives. Works for
//!   both losses.
//! * **newton** — the primal Newton method of [`crate::solver::newton`] for the squared
//!   loss: one pass per iteration, no per-row state, a certified duality gap after every
//!   pass.
//! * **barrier** — the primal log-barrier method of [`crate::solver::barrier`] for the
//!   linear loss: one pass per Newton iteration on the barrier problem (row slacks
//!   eliminated in closed form), no per-row state, a duality gap of the unsmoothed
//!   problem after every pass.
//!
//! A holdout share of rows, chosen by a hash of the row's stable index (so the same rows
//! every epoch), is never trained on and gives validation metrics after each epoch.
//!
//! # Optimality certificate
//! Dual solver: during epoch k the primal loss of the weights the epoch *started* with is
//! accumulated block by block, and the dual value of the duals it started with is known
//! exactly (maintained incrementally), so at the end of epoch k the relative duality gap
//! of the start-of-epoch model is exact. Newton solver: each pass certifies the point it
//! moves to with the dual point β(w). When the gap is within the tolerance, the certified
//! model is returned.

use ndarray::{s, Array1, ArrayView1, ArrayView2, Axis};
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::metrics::Metrics;
use crate::scale::Standardizer;
use crate::settings::defaults;
use crate::solver::dcd::{DcdSettings, Loss, Objective};

mod barrier;
mod dual;
mod epochs;
mod newton;
mod strategy;

pub use crate::solver::rows::piece_rows;
pub use crate::solver::source::{is_holdout, ArraySource, BlockSource, Flow, TargetScale};

/// Which solver trains the linear model.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// Newton for the squared loss, the barrier method for the linear loss.
    #[default]
    Auto,
    /// Block minimization with dual coordinate descent (either loss).
    Dual,
    /// Primal Newton passes (squared loss only).
    Newton,
    /// Primal log-barrier Newton passes (linear loss only).
    Barrier,
}

impl Method {
    /// The solver `Auto` stands for with `loss`.
    pub fn resolve(self, loss: Loss) -> Method {
        match (self, loss) {
            (Method::Auto, Loss::L2) => Method::Newton,
            (Method::Auto, Loss::L1) => Method::Barrier,
            (m, _) => m,
        }
    }
}

fn default_hessian_rows() -> usize {
    16_384
}

/// Settings of the streaming trainer (the solver's own settings are in [`DcdSettings`],
/// expressed in the user's target units).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainSettings {
    /// Solver settings in target units (C, epsilon, loss, tolerance, epochs, seed, and the
    /// dual solver's sweeps and shrinking).
    pub dcd: DcdSettings,
    /// Which solver runs.
    #[serde(default)]
    pub method: Method,
    /// Newton solver: rows (expected) in the sample that forms the Hessian each pass; all
    /// rows when there are fewer.
    #[serde(default = "default_hessian_rows")]
    pub hessian_rows: usize,
    /// Bytes of mapped blocks kept resident between epochs.
    pub memory_bytes: usize,
    /// Share of rows held out for validation, in [0, 0.5].
    pub holdout: f64,
    /// Epochs without a holdout improvement (relative 1e-4) before stopping; 0 disables.
    /// The barrier solver ignores it: only its certificate (or the epoch limit) stops it.
    pub patience: usize,
    /// Dual solver: rows read (before the holdout split) gathered into one sub-problem;
    /// blocks and whole small files are grouped until they reach it.
    pub block_rows: usize,
}

impl Default for TrainSettings {
    fn default() -> Self {
        TrainSettings {
            dcd: DcdSettings::default(),
            method: Method::Auto,
            hessian_rows: default_hessian_rows(),
            memory_bytes: defaults::MEMORY,
            holdout: defaults::HOLDOUT,
            patience: defaults::PATIENCE,
            block_rows: defaults::BLOCK_ROWS,
        }
    }
}

impl TrainSettings {
    /// Checks every value; one sentence per problem.
    pub fn validate(&self) -> Result<()> {
        self.dcd.validate()?;
        if !(0.0..=0.5).contains(&self.holdout) {
            return Err(Error::invalid(
                "holdout",
                format!("must be a share between 0 and 0.5, got {}", self.holdout),
            ));
        }
        if self.method == Method::Newton && self.dcd.loss == Loss::L1 {
            return Err(Error::invalid(
                "solver",
                "the Newton solver needs the squared loss; use the dual solver for the linear loss",
            ));
        }
        if self.method == Method::Barrier && self.dcd.loss == Loss::L2 {
            return Err(Error::invalid(
                "solver",
                "the barrier solver needs the linear loss; use the Newton solver for the squared loss",
            ));
        }
        if self.hessian_rows == 0 {
            return Err(Error::invalid("hessian rows", "must be at least 1"));
        }
        Ok(())
    }
}

/// Figures of one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EpochRecord {
    /// One-based epoch number.
    pub epoch: usize,
    /// Gap certificate of the epoch: for the dual solver, of the weights the epoch started
    /// with; for the Newton solver, of the weights it moved to.
    #[serde(alias = "start_objective")]
    pub objective: Objective,
    /// Holdout metrics after the epoch (user units), if there is a holdout.
    pub holdout: Option<Metrics>,
    /// Dual solver: coordinate updates made in the epoch (0 for Newton).
    pub updates: u64,
    /// Newton solver: the line-search step taken (None for the dual solver).
    #[serde(default)]
    pub step: Option<f64>,
    /// Wall time of the epoch in seconds (not stored in the model file).
    #[serde(skip)]
    pub seconds: f64,
    /// Blocks served from memory rather than read and mapped.
    pub resident_blocks: usize,
}

/// Why training stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// The relative duality gap reached the tolerance.
    Gap,
    /// The holdout error stopped improving.
    Holdout,
    /// The epoch limit was reached.
    MaxEpochs,
    /// No step lowers the objective any more: optimal to working precision.
    Precision,
}

/// What the trainer returns: weights in the user's units and the run's figures.
#[derive(Clone, Debug)]
pub struct TrainOutcome {
    /// Weights on the D mapped features, in target units.
    pub weights: Array1<f64>,
    /// Constant term in target units (target mean plus the scaled bias weight).
    pub intercept: f64,
    /// Gap certificate of the returned weights (target units scaled by sd²; relative gap
    /// is unit-free).
    pub objective: Objective,
    /// The solver that ran.
    pub method: Method,
    /// Per-epoch figures.
    pub history: Vec<EpochRecord>,
    /// Why the run stopped.
    pub stop: StopReason,
    /// Rows trained on.
    pub rows_trained: u64,
    /// Rows held out.
    pub rows_holdout: u64,
    /// Holdout rows kept for the metrics (a bounded seeded sample).
    pub holdout_kept: u64,
    /// Final holdout metrics (user units) for the returned weights.
    pub holdout: Option<Metrics>,
    /// Share of training rows that are support vectors (nonzero dual).
    pub support_share: f64,
    /// Total coordinate updates (dual solver).
    pub updates: u64,
    /// Up to 10,000 standardized holdout input rows, evenly spread (None without a
    /// holdout): the rows coverage thresholds are chosen on.
    pub holdout_inputs: Option<ndarray::Array2<f64>>,
    /// Every kept holdout row: standardized inputs and targets in target units (None
    /// without a holdout): the rows a band is calibrated on.
    pub holdout_rows: Option<(ndarray::Array2<f64>, Array1<f64>)>,
}

/// Progress callbacks for a person watching (the CLI draws bars with them).
pub trait TrainObserver: Sync {
    /// A pass over the data starts; `rows` is its expected row count.
    fn pass_started(&self, _epoch: usize, _rows: u64) {}
    /// `rows` more rows were processed in the current pass.
    fn rows_done(&self, _rows: u64) {}
    /// An epoch finished.
    fn epoch_finished(&self, _record: &EpochRecord) {}
    /// Whether the person asked to stop (for example Ctrl-C): checked before each pass and
    /// after each block; the fit then ends with [`Error::Interrupted`] and writes nothing.
    fn should_stop(&self) -> bool {
        false
    }
}

/// An observer that ignores everything.
#[derive(Debug, Default, Clone, Copy)]
pub struct Silent;
impl TrainObserver for Silent {}

/// Everything the trainer needs besides the data.
pub struct Trainer<'a> {
    /// Input standardizer (from the survey or the in-memory data).
    pub scaler: &'a Standardizer,
    /// The fitted feature map.
    pub map: &'a dyn FeatureMap,
    /// Target centring and scaling.
    pub target: TargetScale,
    /// Settings.
    pub settings: &'a TrainSettings,
    /// Size of the dual vector: one more than the largest global row id.
    pub rows_total: u64,
    /// The threads that read, map and sum (explicit, so `threads` is honoured).
    pub pool: &'a rayon::ThreadPool,
}

/// The relative duality gap certificate of a primal and a dual value.
fn objective(primal: f64, dual: f64) -> Objective {
    Objective {
        primal,
        dual,
        gap: (primal - dual) / primal.abs().max(f64::MIN_POSITIVE),
    }
}

/// Σ ℓ(y_i − wᵀ[z_i, 1]) for one block: the epsilon-insensitive loss (L1) or its square
/// (L2), as in the primal of Ho & Lin (JMLR 2012).
pub fn loss_sum(
    w: ArrayView1<f64>,
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    dcd: &DcdSettings,
) -> f64 {
    let dim = z.ncols();
    let wz = w.slice(s![..dim]);
    let b = w[dim];
    let mut total = 0.0;
    for (zi, &yi) in z.axis_iter(Axis(0)).zip(y) {
        let r = (yi - zi.dot(&wz) - b).abs() - dcd.epsilon;
        if r > 0.0 {
            total += match dcd.loss {
                Loss::L1 => r,
                Loss::L2 => r * r,
            };
        }
    }
    total
}
