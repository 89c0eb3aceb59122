//! Settings of the validation search: the grid (as factors around the data-driven
//! defaults), the validation scheme, the exact machine's sample and budget, and the
//! search over D.

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
    /// Feature map whose D is chosen; its `components` is ignored (see
    /// [`TuneOptions::dim`]) and its `seed` replaced by [`TuneOptions::seed`].
    pub map: MapSpec,
    /// Loss beyond the tube.
    pub loss: Loss,
    /// Multipliers of the median-heuristic gamma (all positive); the starting grid.
    pub gamma_factors: Vec<f64>,
    /// Multipliers of the Cherkassky & Ma C (all positive); the starting grid.
    pub c_factors: Vec<f64>,
    /// Multipliers of the Cherkassky & Ma epsilon (all positive); the starting grid.
    pub epsilon_factors: Vec<f64>,
    /// Validation scheme.
    pub validation: Validation,
    /// Rows of the sample (a seeded random subset) on which the exact kernel machine is
    /// cross-validated; its cost grows like the cube of this.
    pub exact_rows: usize,
    /// Candidates (each one cross-validated exact fit) the search may evaluate; the grid
    /// grows past an edge holding the lowest error only while this allows.
    pub max_fits: usize,
    /// Candidates of the second stage (squared loss, when the sample has more rows than
    /// `exact_rows`): the exact stage's lowest candidate and its neighbours toward
    /// narrower kernels and larger C, cross-validated on every sample row; 0 skips it.
    pub refine_fits: usize,
    /// Rows of the sample the second stage validates on (a seeded random subset).
    pub refine_rows: usize,
    /// D of the map the second stage scores on when a fold has more training rows than
    /// this (else it uses the exact machine); its cost grows like rows × D².
    pub refine_dim: usize,
    /// Epoch limit of the linear-loss fits on the map when choosing D.
    pub max_epochs: usize,
    /// Coordinate-descent sweeps per epoch (linear loss, when choosing D).
    pub sweeps_per_epoch: usize,
    /// Duality-gap tolerance of the linear-loss fits when choosing D.
    pub tol: f64,
    /// The first D tried for the map.
    pub dim: usize,
    /// Largest D tried when doubling.
    pub max_dim: usize,
    /// When the options' map is a random one (Fourier, orthogonal) and no D up to
    /// `max_dim` agrees with the reference machine, try Nyström maps on the same ladder.
    pub map_fallback: bool,
    /// D agrees with the exact machine when its validation RMSE is at most this share
    /// above the exact machine's.
    pub dim_tol: f64,
    /// Seed of every random choice (folds, sample, map).
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
            exact_rows: 1_000,
            max_fits: 150,
            refine_fits: 21,
            refine_rows: 10_000,
            refine_dim: 1024,
            max_epochs: 50,
            sweeps_per_epoch: 10,
            tol: 1e-3,
            dim: 256,
            max_dim: 4096,
            map_fallback: true,
            dim_tol: 0.01,
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
        if self.exact_rows < 2 * MIN_FOLD_ROWS {
            return Err(Error::invalid(
                "exact rows",
                format!(
                    "must be at least {}, got {}",
                    2 * MIN_FOLD_ROWS,
                    self.exact_rows
                ),
            ));
        }
        if self.max_fits == 0 {
            return Err(Error::invalid("max fits", "must be at least 1"));
        }
        if self.refine_dim == 0 {
            return Err(Error::invalid("refine dim", "must be at least 1"));
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
        if self.dim == 0 {
            return Err(Error::invalid("dim", "must be at least 1"));
        }
        if self.max_dim < self.dim {
            return Err(Error::invalid(
                "max dim",
                format!(
                    "{} is below the first D, {}; give a largest D of at least the first",
                    self.max_dim, self.dim
                ),
            ));
        }
        if !(self.dim_tol.is_finite() && self.dim_tol >= 0.0) {
            return Err(Error::invalid(
                "dim tolerance",
                format!("must be at least 0, got {}", self.dim_tol),
            ));
        }
        self.check_memory()
    }

    /// A bound on the memory of the search's largest fit, in bytes: the Newton solver's
    /// three (D + 1)² matrices at the largest D, and the mapped rows of the largest
    /// stage (the exact stage's or the second stage's rows, D features each).
    pub fn memory_estimate(&self) -> u64 {
        let d = self.max_dim.max(self.refine_dim) as u64 + 1;
        let square = d.saturating_mul(d).saturating_mul(8 * 3);
        let rows = self.exact_rows.max(self.refine_rows) as u64;
        square.saturating_add(rows.saturating_mul(d).saturating_mul(8))
    }

    fn check_memory(&self) -> Result<()> {
        crate::settings::check_memory("max dim", self.memory_estimate(), |need, total| {
            format!(
                "a search up to D = {} needs about {need} of memory (its D × D matrices and mapped sample), more than this machine's {total}; lower --max-dim (or --refine-dim)",
                self.max_dim.max(self.refine_dim)
            )
        })
    }

    /// The D values of the doubling search: `dim`, 2·`dim`, … up to `max_dim`.
    pub fn dim_ladder(&self) -> Vec<usize> {
        let mut out = vec![self.dim];
        let mut d = self.dim;
        while d.saturating_mul(2) <= self.max_dim {
            d *= 2;
            out.push(d);
        }
        out
    }
}
