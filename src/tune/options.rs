//! Settings of the validation search: the grid (as factors around the data-driven
//! defaults), the validation scheme, successive halving and the search over D.

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::features::MapSpec;
use crate::kernel::KernelKind;
use crate::solver::dcd::Loss;

/// How candidates are scored on the sample.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Validation {
    /// k-fold cross-validation (k ≥ 2): every row is scored once, by the model fitted
    /// without its fold; the error is pooled over all rows.
    KFold(usize),
    /// One split: this share of rows (in (0, 0.5]) is held out and scored.
    Holdout(f64),
}

/// Everything [`crate::tune::tune`] needs apart from the data.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TuneOptions {
    /// Kernel family.
    pub kernel: KernelKind,
    /// Feature map used for every candidate; its `components` is ignored (see
    /// [`TuneOptions::components`]) and its `seed` replaced by [`TuneOptions::seed`].
    pub map: MapSpec,
    /// Loss beyond the tube.
    pub loss: Loss,
    /// Multipliers of the median-heuristic gamma (all positive).
    pub gamma_factors: Vec<f64>,
    /// Multipliers of the Cherkassky & Ma C (all positive).
    pub c_factors: Vec<f64>,
    /// Multipliers of the Cherkassky & Ma epsilon (all positive).
    pub epsilon_factors: Vec<f64>,
    /// Validation scheme.
    pub validation: Validation,
    /// Successive halving (Jamieson & Talwalkar, AISTATS 2016): `false` trains every
    /// candidate with the full epoch budget.
    pub halving: bool,
    /// Halving rate η ≥ 2: each rung keeps the best 1/η and multiplies the budget by η.
    pub eta: usize,
    /// Warm-start the solver along increasing C (same gamma, epsilon and fold share the
    /// mapped features; the duals of the previous C are the starting point).
    pub warm_start: bool,
    /// Epoch budget of a candidate at the last rung (passes of dual coordinate descent).
    pub max_epochs: usize,
    /// Coordinate-descent sweeps per epoch (the block's sub-problem, see
    /// [`crate::solver::dcd::solve_block`]).
    pub sweeps_per_epoch: usize,
    /// A candidate stops early when its relative duality gap is at most this.
    pub tol: f64,
    /// D used for the grid search, and the first D of the search over D.
    pub components: usize,
    /// Largest D tried when doubling (at most this; ≤ `components` skips the search).
    pub max_components: usize,
    /// Doubling D stops when the validation error improves by less than this share.
    pub components_tol: f64,
    /// Seed of every random choice (folds, map, coordinate order).
    pub seed: u64,
    /// Rows for which the defaults' epsilon is computed (Cherkassky & Ma use the training
    /// size n in √(ln n / n)); `None` = the sample's rows.
    pub rows_total: Option<u64>,
}

impl Default for TuneOptions {
    fn default() -> Self {
        TuneOptions {
            kernel: KernelKind::Gaussian,
            map: MapSpec::default(),
            loss: Loss::L2,
            gamma_factors: vec![0.25, 0.5, 1.0, 2.0, 4.0],
            c_factors: vec![0.1, 0.316, 1.0, 3.16, 10.0],
            epsilon_factors: vec![0.25, 1.0, 4.0],
            validation: Validation::KFold(3),
            halving: true,
            eta: 3,
            warm_start: true,
            max_epochs: 27,
            sweeps_per_epoch: 10,
            tol: 1e-3,
            components: 256,
            max_components: 4096,
            components_tol: 0.01,
            seed: 0,
            rows_total: None,
        }
    }
}

/// Rows a validation fold must hold at least.
pub(crate) const MIN_FOLD_ROWS: usize = 5;

fn check_factors(name: &'static str, v: &[f64]) -> Result<()> {
    if v.is_empty() {
        return Err(Error::invalid(name, "the grid needs at least one value"));
    }
    if let Some(bad) = v.iter().find(|f| !(f.is_finite() && **f > 0.0)) {
        return Err(Error::invalid(
            name,
            format!("every grid value must be positive and finite, got {bad}"),
        ));
    }
    Ok(())
}

impl TuneOptions {
    /// Checks every setting's range; grid values must be positive.
    pub fn validate(&self) -> Result<()> {
        check_factors("gamma grid", &self.gamma_factors)?;
        check_factors("C grid", &self.c_factors)?;
        check_factors("epsilon grid", &self.epsilon_factors)?;
        match self.validation {
            Validation::KFold(k) if k < 2 => {
                return Err(Error::invalid(
                    "folds",
                    format!("must be at least 2, got {k}"),
                ))
            }
            Validation::Holdout(h) if !(h > 0.0 && h <= 0.5) => {
                return Err(Error::invalid(
                    "holdout",
                    format!("must be in (0, 0.5], got {h}"),
                ))
            }
            _ => {}
        }
        if self.eta < 2 {
            return Err(Error::invalid(
                "eta",
                format!("must be at least 2, got {}", self.eta),
            ));
        }
        if self.max_epochs == 0 {
            return Err(Error::invalid("epochs", "must be at least 1"));
        }
        if self.sweeps_per_epoch == 0 {
            return Err(Error::invalid("sweeps", "must be at least 1"));
        }
        if !(self.tol.is_finite() && self.tol >= 0.0) {
            return Err(Error::invalid(
                "tol",
                format!("must be at least 0, got {}", self.tol),
            ));
        }
        if self.components == 0 {
            return Err(Error::invalid("components", "must be at least 1"));
        }
        if !(self.components_tol.is_finite() && self.components_tol >= 0.0) {
            return Err(Error::invalid(
                "components tolerance",
                format!("must be at least 0, got {}", self.components_tol),
            ));
        }
        Ok(())
    }

    /// The D values of the doubling search: `components`, 2·`components`, … up to
    /// `max_components`.
    pub fn component_ladder(&self) -> Vec<usize> {
        let mut out = vec![self.components];
        let mut d = self.components;
        while d.saturating_mul(2) <= self.max_components {
            d *= 2;
            out.push(d);
        }
        out
    }
}
