//! The fit's options: one settings model whose defaults come from
//! [`crate::settings::defaults`], and whose [`FitOptions::validate`] checks every range
//! and combination before any file is opened.
//!
//! Names in messages are the settings' public names, the same words as the command-line
//! flags without their dashes.

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::features::{MapKind, MapSpec};
use crate::kernel::{Kernel, KernelKind};
use crate::settings::{check_threads, defaults, processors, MIN_SAMPLE};
use crate::solver::blocks::Method;
use crate::solver::dcd::Loss;

/// How to fit: kernel, feature map, solver and streaming settings. Values left unset
/// (gamma, C, epsilon) are chosen from the data (see [`crate::heuristics`]).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitOptions {
    /// Kernel family.
    pub kernel: KernelKind,
    /// Kernel width; `None` = median heuristic.
    pub gamma: Option<f64>,
    /// Feature map kind, D, variant and landmarks (its seed is the fit's `seed`).
    pub map: MapSpec,
    /// Penalty C in target units; `None` = Cherkassky & Ma.
    pub c: Option<f64>,
    /// Tube half-width in target units; `None` = Cherkassky & Ma.
    pub epsilon: Option<f64>,
    /// Loss beyond the tube.
    pub loss: Loss,
    /// Solver: Newton passes for the squared loss, dual coordinate descent for the linear
    /// one (`Auto`), or either forced.
    #[serde(default)]
    pub method: Method,
    /// Newton solver: expected rows in the Hessian's sample each pass; `None` = 32 rows
    /// per mapped feature, at least 16,384 (see [`hessian_rows_for`]).
    #[serde(default)]
    pub hessian_rows: Option<usize>,
    /// Stop when the relative duality gap is at most this.
    pub tol: f64,
    /// Epoch limit (public name `epochs`).
    pub max_epochs: usize,
    /// DCD sweeps over a block before the next (public name `sweeps`).
    pub sweeps_per_block: usize,
    /// Shrinking in the DCD sweeps.
    pub shrinking: bool,
    /// Seed for every random choice (map, order, sample, holdout).
    pub seed: u64,
    /// Threads (0 = one per processor; more than the processors only with
    /// `oversubscribe`).
    pub threads: usize,
    /// Allow more threads than processors (at most [`crate::settings::MAX_THREADS`]).
    #[serde(default)]
    pub oversubscribe: bool,
    /// Rows per block.
    pub block_rows: usize,
    /// Bytes of mapped blocks kept in memory between epochs (public name `memory`).
    pub memory_bytes: usize,
    /// Share of rows held out for validation.
    pub holdout: f64,
    /// Epochs without holdout improvement before stopping (0 = never).
    pub patience: usize,
    /// Rows in the survey's random sample (public name `sample`).
    pub sample_rows: usize,
}

/// The Newton solver's default Hessian sample for `features` mapped features: 32 rows per
/// feature, at least 16,384. The sampled Gram matrix's error shrinks like √(D/m), so the
/// sample must grow with D; its cost per pass is m·D² multiply-adds.
pub fn hessian_rows_for(features: usize) -> usize {
    32usize
        .saturating_mul(features.saturating_add(1))
        .max(16_384)
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            kernel: KernelKind::Gaussian,
            gamma: None,
            map: MapSpec::default(),
            c: None,
            epsilon: None,
            loss: Loss::L2,
            method: Method::Auto,
            hessian_rows: None,
            tol: defaults::TOL,
            max_epochs: defaults::EPOCHS,
            sweeps_per_block: defaults::SWEEPS,
            shrinking: true,
            seed: defaults::SEED,
            threads: defaults::THREADS,
            oversubscribe: false,
            block_rows: defaults::BLOCK_ROWS,
            memory_bytes: defaults::MEMORY,
            holdout: defaults::HOLDOUT,
            patience: defaults::PATIENCE,
            sample_rows: defaults::SAMPLE,
        }
    }
}

impl FitOptions {
    /// The options themselves once [`FitOptions::validate`] accepts them.
    pub fn validated(self) -> Result<Self> {
        self.validate()?;
        Ok(self)
    }

    /// Checks every value and combination; one sentence naming the setting. Runs before
    /// any data is read, so a mistyped flag costs milliseconds, not a survey pass.
    pub fn validate(&self) -> Result<()> {
        if let Some(g) = self.gamma {
            Kernel::new(self.kernel, g)?;
        }
        if let Some(c) = self.c {
            if !(c.is_finite() && c > 0.0) {
                return Err(Error::invalid(
                    "C",
                    format!("must be a positive finite number, got {c}"),
                ));
            }
        }
        if let Some(e) = self.epsilon {
            if !(e.is_finite() && e >= 0.0) {
                return Err(Error::invalid(
                    "epsilon",
                    format!("must be a finite number at least 0, got {e}"),
                ));
            }
        }
        self.map.validate(self.kernel)?;
        if self.method == Method::Newton && self.loss == Loss::L1 {
            return Err(Error::invalid(
                "solver",
                "the Newton solver needs the squared loss (l2); use the dual solver for the linear loss",
            ));
        }
        if self.method == Method::Barrier && self.loss == Loss::L2 {
            return Err(Error::invalid(
                "solver",
                "the barrier solver needs the linear loss (l1); use the Newton solver for the squared loss",
            ));
        }
        if !(self.tol.is_finite() && self.tol >= 0.0) {
            return Err(Error::invalid(
                "tol",
                format!("must be a finite number at least 0, got {}", self.tol),
            ));
        }
        let at_least_one = [
            ("epochs", self.max_epochs),
            ("sweeps", self.sweeps_per_block),
            ("block rows", self.block_rows),
            ("hessian rows", self.hessian_rows.unwrap_or(1)),
        ];
        for (name, v) in at_least_one {
            if v == 0 {
                return Err(Error::invalid(name, "must be at least 1, got 0"));
            }
        }
        if !(0.0..=0.5).contains(&self.holdout) {
            return Err(Error::invalid(
                "holdout",
                format!("must be a share between 0 and 0.5, got {}", self.holdout),
            ));
        }
        if self.sample_rows < MIN_SAMPLE {
            return Err(Error::invalid(
                "sample",
                format!(
                    "must be at least {MIN_SAMPLE} rows (the defaults and the coverage landmarks come from it), got {}",
                    self.sample_rows
                ),
            ));
        }
        check_threads(self.threads, self.oversubscribe)?;
        self.check_memory()
    }

    /// The threads the fit runs on: `threads`, or one per processor for 0.
    pub fn effective_threads(&self) -> usize {
        if self.threads == 0 {
            processors()
        } else {
            self.threads
        }
    }

    /// A bound on the memory the fit needs before its per-row state, in bytes: the
    /// solver's D × D matrices, the Hessian's row sample, the map's parameters (for
    /// Nyström its landmark kernel matrix and eigenvectors), the mapped pieces in flight
    /// on each thread, and the budget for resident blocks.
    pub fn memory_estimate(&self, inputs: usize) -> u64 {
        let d = self.map.dim as u64;
        let per_d2 = d.saturating_mul(d).saturating_mul(8);
        let square = match self.map.kind {
            MapKind::Nystrom => per_d2.saturating_mul(6),
            _ => per_d2.saturating_mul(3),
        };
        let hessian = self
            .hessian_rows
            .unwrap_or_else(|| hessian_rows_for(self.map.dim)) as u64;
        let sample = hessian.saturating_mul(d).saturating_mul(8);
        let map = d.saturating_mul(inputs as u64 + 2).saturating_mul(8);
        let pieces = (self.effective_threads() as u64 + 3).saturating_mul(32 << 20);
        square
            .saturating_add(sample)
            .saturating_add(map)
            .saturating_add(pieces)
            .saturating_add(self.memory_bytes as u64)
    }

    fn check_memory(&self) -> Result<()> {
        // Inputs are not known yet: 64 is generous for sensor tables and small next to D.
        let need = self.memory_estimate(64);
        crate::settings::check_memory("dim", need, |need, total| {
            format!(
                "a fit with D = {} needs about {need} of memory (its D × D matrices and Hessian sample), more than this machine's {total}; lower -D (or --hessian-rows, --memory)",
                self.map.dim
            )
        })
    }
}
