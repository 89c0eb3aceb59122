//! What a run reports: the training report stored in every model, and its rendering as
//! text for a person or JSON for a program.

pub(crate) mod text;

use serde::{Deserialize, Serialize};

use crate::metrics::Metrics;
use crate::solver::blocks::{EpochRecord, Method, StopReason};
use crate::solver::dcd::Objective;

pub use text::render_training;

/// Where a hyper-parameter's value came from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Choice {
    /// The value used.
    pub value: f64,
    /// Why: "given", or the rule that chose it.
    pub source: String,
}

/// Missing values skipped in one column.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ColumnSkips {
    /// Column name.
    pub column: String,
    /// Rows skipped because of a missing value in this column.
    pub rows: u64,
}

/// Everything a person needs to judge a training run, stored inside the model.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainingReport {
    /// Rows seen in the sources.
    pub rows_total: u64,
    /// Rows trained on.
    pub rows_trained: u64,
    /// Rows held out for validation.
    pub rows_holdout: u64,
    /// Holdout rows kept in memory for the metrics and the coverage threshold (a seeded
    /// sample of at most about 100,000 by row hash).
    #[serde(default)]
    pub holdout_kept: u64,
    /// Rows skipped for missing values.
    pub rows_skipped: u64,
    /// Skips per column (a row can count in several columns).
    pub skipped_by_column: Vec<ColumnSkips>,
    /// Input columns dropped because they were constant.
    pub constant_columns: Vec<String>,
    /// Kernel width.
    pub gamma: Choice,
    /// Penalty C (target units).
    pub c: Choice,
    /// Tube half-width epsilon (target units).
    pub epsilon: Choice,
    /// Number of mapped features D.
    pub features: usize,
    /// Epochs run.
    pub epochs: usize,
    /// The solver that ran (`Dual` or `Newton`).
    #[serde(default)]
    pub method: Method,
    /// Why training stopped.
    pub stop: StopReason,
    /// Optimality certificate of the returned weights.
    pub objective: Objective,
    /// Holdout metrics of the returned weights (target units).
    pub holdout: Option<Metrics>,
    /// Share of training rows with a nonzero dual variable.
    pub support_share: f64,
    /// Coordinate updates made.
    pub updates: u64,
    /// Per-epoch figures.
    pub history: Vec<EpochRecord>,
    /// Wall time of the whole fit in seconds (survey, map, epochs). Not stored in the
    /// model file, so that the same data and seed give the same bytes.
    #[serde(skip)]
    pub seconds: f64,
    /// Threads used for reading and mapping (not stored in the model file).
    #[serde(skip)]
    pub threads: usize,
}
