//! Linear epsilon-insensitive support vector regression by dual coordinate descent
//! (Ho & Lin, "Large-scale linear support vector regression", JMLR 13, 2012), driven
//! block by block as in block minimization (Yu, Hsieh, Chang & Lin, "Large linear
//! classification when data cannot fit in memory", KDD 2010).
//!
//! With mapped features z_i (plus an appended constant 1, so the bias is regularised)
//! and β = α⁺ − α⁻, the solver minimises the dual
//!
//! ```text
//! ½ βᵀQβ − yᵀβ + ε‖β‖₁ + (λ/2)‖β‖²,   |β_i| ≤ U,   Q_ij = z_iᵀz_j,
//! ```
//!
//! with λ = 0, U = C for the epsilon-insensitive loss (L1) and λ = 1/(2C), U = ∞ for its
//! square (L2), keeping w = Σ β_i z_i. The primal is
//! P(w) = ½‖w‖² + C Σ ℓ(y_i − wᵀz_i) with ℓ(r) = max(0, |r| − ε) or its square; the
//! relative duality gap (P − D)/|P| certifies how close a solution is to the optimum.
//!
//! * [`solve_block`] runs a few sweeps over one block's dual variables, with the
//!   projected-gradient shrinking of Hsieh et al. (ICML 2008) in the form Ho & Lin
//!   (2012, §3) give for regression;
//!   The free support vectors are kept in memory from block to block and joined to
//!   every block's sub-problem (selective block minimization, Chang & Roth, KDD 2011);
//! * [`PrimalAccumulator`] gathers the primal loss over blocks for the gap;
//! * [`fit`] drives both over an in-memory array, with the target standardized.

mod block;
mod cache;
mod fit;
mod objective;

pub use block::{solve_block, BlockStats, BlockWorkspace};
pub use fit::{fit, DcdFit, DcdReport};
pub(crate) use fit::{target_scale, TargetScaling};
pub use objective::{Objective, PrimalAccumulator};

use crate::settings::defaults;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};

/// The loss applied to residuals outside the epsilon tube.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Loss {
    /// Epsilon-insensitive loss max(0, |r| − ε): dual variables bounded by C.
    L1,
    /// Squared epsilon-insensitive loss max(0, |r| − ε)²: unbounded duals, diagonal 1/(2C).
    L2,
}

/// Parameters of the dual coordinate descent solver.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DcdSettings {
    /// Weight C of the loss against the regulariser ½‖w‖²; must be positive.
    pub c: f64,
    /// Half-width ε of the tube inside which residuals cost nothing; must be ≥ 0.
    pub epsilon: f64,
    /// Loss beyond the tube.
    pub loss: Loss,
    /// Skip dual variables that the projected gradient says will stay at a bound
    /// (Hsieh et al., ICML 2008; Ho & Lin, JMLR 2012, §3).
    pub shrinking: bool,
    /// Most DCD sweeps over one block before moving on (block minimization, Yu et al.,
    /// KDD 2010); a block stops earlier once its violation fell tenfold.
    pub sweeps_per_block: usize,
    /// Stop when the relative duality gap (P − D)/|P| is at most this.
    pub tol: f64,
    /// Most passes over the data.
    pub max_epochs: usize,
    /// Seed of the random sweep and block orders.
    pub seed: u64,
}

impl Default for DcdSettings {
    fn default() -> Self {
        DcdSettings {
            c: 1.0,
            epsilon: 0.1,
            loss: Loss::L2,
            shrinking: true,
            sweeps_per_block: defaults::SWEEPS,
            tol: defaults::TOL,
            max_epochs: defaults::EPOCHS,
            seed: defaults::SEED,
        }
    }
}

impl DcdSettings {
    /// Checks every parameter's range: C positive and finite, epsilon non-negative and
    /// finite, tol non-negative and finite, sweeps_per_block and max_epochs positive.
    pub fn validate(&self) -> Result<()> {
        if !(self.c.is_finite() && self.c > 0.0) {
            return Err(Error::invalid(
                "C",
                format!("must be a positive finite number, got {}", self.c),
            ));
        }
        if !(self.epsilon.is_finite() && self.epsilon >= 0.0) {
            return Err(Error::invalid(
                "epsilon",
                format!("must be a finite number at least 0, got {}", self.epsilon),
            ));
        }
        if !(self.tol.is_finite() && self.tol >= 0.0) {
            return Err(Error::invalid(
                "tol",
                format!("must be a finite number at least 0, got {}", self.tol),
            ));
        }
        if self.sweeps_per_block == 0 {
            return Err(Error::invalid("sweeps", "must be at least 1"));
        }
        if self.max_epochs == 0 {
            return Err(Error::invalid("epochs", "must be at least 1"));
        }
        Ok(())
    }

    /// The same problem for a target centred and divided by `sd`, so that C and epsilon
    /// keep their meaning in the user's target units.
    ///
    /// Write the model in user units as f = m + sd·f′ with f′ = w′ᵀz + b′ fitted to
    /// y′ = (y − m)/sd, and w = sd·w′ (bias included). Residuals scale as
    /// y − f = sd·(y′ − f′), so max(0, |y − f| − ε) = sd·max(0, |y′ − f′| − ε/sd). Hence
    ///
    /// * L1: ½‖w‖² + C Σ ℓ_ε(y − f) = sd²·[½‖w′‖² + (C/sd) Σ ℓ_{ε/sd}(y′ − f′)];
    /// * L2: ½‖w‖² + C Σ ℓ_ε(y − f)² = sd²·[½‖w′‖² + C Σ ℓ_{ε/sd}(y′ − f′)²].
    ///
    /// So ε′ = ε/sd, C′ = C/sd (L1) and C′ = C (L2): the user-unit objective (with the
    /// bias regularised towards the mean m) is sd² times the standardized one and the
    /// minimisers map exactly.
    ///
    /// # Panics
    /// If `sd` is not positive and finite.
    #[track_caller]
    pub fn in_standard_units(&self, sd: f64) -> DcdSettings {
        assert!(
            sd.is_finite() && sd > 0.0,
            "the target's standard deviation must be positive and finite, got {sd}"
        );
        let c = match self.loss {
            Loss::L1 => self.c / sd,
            Loss::L2 => self.c,
        };
        DcdSettings {
            c,
            epsilon: self.epsilon / sd,
            ..self.clone()
        }
    }

    /// λ, the diagonal added to Q: 0 for L1, 1/(2C) for L2.
    pub(crate) fn lambda(&self) -> f64 {
        match self.loss {
            Loss::L1 => 0.0,
            Loss::L2 => 0.5 / self.c,
        }
    }

    /// U, the bound on |β_i|: C for L1, infinite for L2.
    pub(crate) fn upper(&self) -> f64 {
        match self.loss {
            Loss::L1 => self.c,
            Loss::L2 => f64::INFINITY,
        }
    }
}

/// A sum kept with Neumaier's compensation (Neumaier, ZAMM 54, 1974), so that millions
/// of small increments do not drift.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub(crate) struct CompensatedSum {
    sum: f64,
    carry: f64,
}

impl CompensatedSum {
    #[inline]
    pub(crate) fn add(&mut self, x: f64) {
        let t = self.sum + x;
        if self.sum.abs() >= x.abs() {
            self.carry += (self.sum - t) + x;
        } else {
            self.carry += (x - t) + self.sum;
        }
        self.sum = t;
    }

    #[inline]
    pub(crate) fn value(&self) -> f64 {
        self.sum + self.carry
    }
}

/// Solver state kept outside the sweeping routine, so a streaming trainer can drive it
/// block by block: the weights and one dual variable per global row, plus the dual
/// terms yᵀβ, ‖β‖₁ and ‖β‖², maintained as β changes so the dual value costs O(D).
#[derive(Clone, Debug, PartialEq)]
pub struct DcdState {
    /// Weights w = Σ β_i z_i, D + 1 entries; the last multiplies the constant feature 1.
    pub w: ndarray::Array1<f64>,
    /// Dual variable β_i = α_i⁺ − α_i⁻ of every global row.
    pub beta: Vec<f64>,
    pub(crate) y_beta: CompensatedSum,
    pub(crate) beta_l1: CompensatedSum,
    pub(crate) beta_sq: CompensatedSum,
}

impl DcdState {
    /// A zero state for `features` mapped features (the bias feature is added inside)
    /// and `rows` training rows.
    pub fn new(features: usize, rows: usize) -> Self {
        DcdState {
            w: ndarray::Array1::zeros(features + 1),
            beta: vec![0.0; rows],
            y_beta: CompensatedSum::default(),
            beta_l1: CompensatedSum::default(),
            beta_sq: CompensatedSum::default(),
        }
    }

    /// The dual objective D(β) = −(½‖w‖² − yᵀβ + ε‖β‖₁ + (λ/2)‖β‖²), which by weak
    /// duality never exceeds the primal value of any w.
    pub fn dual_value(&self, settings: &DcdSettings) -> f64 {
        let ww = self.w.dot(&self.w);
        -(0.5 * ww - self.y_beta.value()
            + settings.epsilon * self.beta_l1.value()
            + 0.5 * settings.lambda() * self.beta_sq.value())
    }

    /// Records that β_i changed from `old` to `new` for a row with target `y`.
    #[inline]
    pub(crate) fn record_change(&mut self, y: f64, old: f64, new: f64) {
        self.y_beta.add(y * (new - old));
        self.beta_l1.add(new.abs() - old.abs());
        self.beta_sq.add((new - old) * (new + old));
    }
}
