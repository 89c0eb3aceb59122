//! Audit: on an in-memory sample, compare approximate kernel machines (explicit feature
//! map + linear epsilon-SVR) with the exact kernel machine fitted on the same rows.
//!
//! The sample is split (seeded) into a fit part and a check part. Inputs are
//! standardized with a [`Standardizer`](crate::scale::Standardizer) fitted on the fit
//! part. The exact machine is epsilon-SVR solved by SMO (Fan, Chen & Lin, JMLR 2005; see
//! [`crate::solver::smo`]); every approximate machine maps the inputs with random
//! Fourier features (Rahimi & Recht, NIPS 2007), orthogonal random features (Yu et al.,
//! NIPS 2016) or Nyström features (Williams & Seeger, NIPS 2001) for each D of a list,
//! and fits a linear epsilon-SVR on them.
//!
//! **Like for like.** Every machine of an audit uses the same loss beyond the tube, kernel,
//! gamma, C and epsilon. The loss defaults to `kernlake fit`'s, the squared (L2) loss:
//! the exact machine then solves the squared-loss kernel dual (the linear-loss dual with
//! 1/(2C) on the kernel's diagonal and no upper bound; Ho & Lin, JMLR 2012, §2) and the
//! approximate ones are fitted by primal Newton passes with every row in the Hessian. With
//! the linear (L1) loss the exact machine is the classic epsilon-SVR and the approximate
//! ones are fitted by dual coordinate descent (Ho & Lin, JMLR 2012). One difference
//! remains by construction: the linear solvers' bias is an appended constant feature and
//! is regularised (towards the target's mean, since the target is centred), whereas
//! SMO's bias is free. Each row of the report says whether its machine reached its
//! tolerance and, if not, why.
//!
//! For each approximate machine the report gives its accuracy on the check part, its
//! **agreement** with the exact machine — the root-mean-square difference of their
//! check-part predictions divided by the standard deviation of the fit part's target —
//! and the relative Frobenius error `‖K − ZZᵀ‖_F / ‖K‖_F` of the approximate kernel on a
//! block of check rows. The recommended D is the smallest whose agreement is within
//! [`AuditOptions::agree`].
//!
//! ```
//! use kernlake::audit::{audit, AuditOptions};
//! use kernlake::features::MapKind;
//! use ndarray::{Array1, Array2};
//!
//! let x = Array2::from_shape_fn((200, 2), |(i, j)| ((i * (j + 3)) % 17) as f64 / 17.0);
//! let y: Array1<f64> = x.rows().into_iter().map(|r| (3.0 * r[0]).sin() + r[1]).collect();
//! let opts = AuditOptions {
//!     maps: vec![MapKind::Fourier],
//!     dims: vec![32, 64],
//!     ..AuditOptions::default()
//! };
//! let report = audit(x.view(), y.view(), &opts)?;
//! assert_eq!(report.rows.len(), 2);
//! # Ok::<(), kernlake::Error>(())
//! ```

mod exact;
mod machine;
mod model;
mod parts;
pub mod plot;
mod run;
mod table;

pub use model::{audit_model, ModelAuditOptions, ModelAuditReport};
pub use run::{audit, audit_with_progress};
pub use table::{render_audit, render_model_audit};

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::features::{FourierVariant, MapKind};
use crate::kernel::KernelKind;
pub use crate::solver::dcd::Loss;

/// Fewest sample rows an audit runs on: with the default split, 40 to fit and 10 to
/// check, below which the agreement and accuracy figures are mostly noise.
pub const MIN_ROWS: usize = 50;

/// What to compare, and how.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AuditOptions {
    /// Kernel family, shared by the exact and the approximate machines.
    pub kernel: KernelKind,
    /// Loss beyond the tube, shared by every machine.
    pub loss: Loss,
    /// Kernel width; `None` = median heuristic on the standardized fit part.
    pub gamma: Option<f64>,
    /// Penalty C (target units for the linear loss, unit-free for the squared loss, as
    /// in `kernlake fit`); `None` = Cherkassky & Ma (Neural Networks 2004), divided by
    /// the target's standard deviation for the squared loss.
    pub c: Option<f64>,
    /// Tube half-width in target units; `None` = Cherkassky & Ma (Neural Networks 2004).
    pub epsilon: Option<f64>,
    /// Feature maps to try; empty = every map that applies to the kernel (orthogonal
    /// features exist for the Gaussian kernel only).
    pub maps: Vec<MapKind>,
    /// Feature dimensions D to try (Nyström: landmarks).
    pub dims: Vec<usize>,
    /// Fourier and orthogonal maps: sin/cos pairs or cos + random phase.
    pub variant: FourierVariant,
    /// Tolerance on the agreement (share of the target's standard deviation) that a D
    /// must meet to be recommended; > 0.
    pub agree: f64,
    /// Share of the sample used to fit, in (0, 1); the rest is the check part.
    pub split: f64,
    /// Memory budget of the exact solver's kernel-row cache, bytes.
    pub cache_bytes: usize,
    /// Stopping tolerance of SMO on the maximal violation, in standardized target units.
    pub smo_tol: f64,
    /// Stopping tolerance of the linear solver on the relative duality gap. With the L1
    /// loss and a large C, dual coordinate descent converges slowly (each row of the
    /// report says whether the gap was reached, and why not); the agreement then
    /// includes the remaining optimisation error.
    pub linear_tol: f64,
    /// Most passes of the linear solver over the fit part.
    pub linear_passes: usize,
    /// Check rows (at most) in the block on which the kernel error is measured.
    pub kernel_rows: usize,
    /// Seed of the split, the maps and the solver orders.
    pub seed: u64,
    /// Threads (0 = all cores; at most the processors unless `oversubscribe`); results
    /// do not depend on it.
    pub threads: usize,
    /// Allow `threads` above the number of processors.
    pub oversubscribe: bool,
}

impl Default for AuditOptions {
    /// Gaussian kernel, the squared loss, data-driven gamma/C/epsilon, all maps,
    /// D = 256…4096, agree 0.02, 80/20 split, 1 GiB cache, SMO tol 1e-3, the linear
    /// solvers' own defaults (relative gap 1e-3 within 100 passes, as `kernlake fit`),
    /// 500 rows for the kernel error, seed 0.
    fn default() -> Self {
        AuditOptions {
            kernel: KernelKind::Gaussian,
            loss: Loss::L2,
            gamma: None,
            c: None,
            epsilon: None,
            maps: Vec::new(),
            dims: vec![256, 512, 1024, 2048, 4096],
            variant: FourierVariant::SinCos,
            agree: 0.02,
            split: 0.8,
            cache_bytes: 1 << 30,
            smo_tol: 1e-3,
            linear_tol: 1e-3,
            linear_passes: 100,
            kernel_rows: 500,
            seed: 0,
            threads: 0,
            oversubscribe: false,
        }
    }
}

impl AuditOptions {
    /// The maps this audit runs: the given list, or every map that applies.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for an orthogonal map with a non-Gaussian kernel.
    pub fn resolved_maps(&self) -> Result<Vec<MapKind>> {
        if self.maps.is_empty() {
            let mut all = vec![MapKind::Fourier];
            if self.kernel == KernelKind::Gaussian {
                all.push(MapKind::Orthogonal);
            }
            all.push(MapKind::Nystrom);
            return Ok(all);
        }
        if self.kernel != KernelKind::Gaussian && self.maps.contains(&MapKind::Orthogonal) {
            return Err(Error::invalid(
                "maps",
                format!(
                    "orthogonal random features exist for the Gaussian kernel only, not {}",
                    self.kernel.name()
                ),
            ));
        }
        let mut maps = Vec::new();
        for m in &self.maps {
            if !maps.contains(m) {
                maps.push(*m);
            }
        }
        Ok(maps)
    }

    fn validate(&self) -> Result<()> {
        crate::settings::check_threads(self.threads, self.oversubscribe)?;
        if !(self.split > 0.0 && self.split < 1.0) {
            return Err(Error::invalid(
                "split",
                format!(
                    "the fit share must lie strictly between 0 and 1, got {}",
                    self.split
                ),
            ));
        }
        if !(self.agree.is_finite() && self.agree > 0.0) {
            return Err(Error::invalid(
                "agree",
                format!("must be a finite number > 0, got {}", self.agree),
            ));
        }
        if self.dims.is_empty() || self.dims.contains(&0) {
            return Err(Error::invalid(
                "dims",
                "give at least one feature dimension, each at least 1",
            ));
        }
        if self.linear_passes == 0 {
            return Err(Error::invalid("linear passes", "must be at least 1"));
        }
        self.resolved_maps().map(|_| ())
    }
}

/// A bound on the memory of an audit's largest approximate machine on `rows` sample rows,
/// in bytes: its mapped sample (rows × D), the Newton solver's three (D + 1)² matrices,
/// and one such machine per thread at a time.
pub fn memory_estimate(dims: &[usize], rows: usize, threads: usize) -> u64 {
    let d = dims.iter().copied().max().unwrap_or(0) as u64 + 1;
    let one = d
        .saturating_mul(d)
        .saturating_mul(8 * 3)
        .saturating_add((rows as u64).saturating_mul(d).saturating_mul(8));
    let threads = if threads == 0 {
        crate::settings::processors()
    } else {
        threads
    };
    one.saturating_mul(threads as u64)
}

/// Refuses an audit whose largest D would not fit in this machine's memory on `rows`
/// sample rows, with the estimate and the flag to change; checked before any data is read.
///
/// # Errors
/// [`Error::InvalidParameter`] naming `--dims`.
pub fn check_memory(dims: &[usize], rows: usize, threads: usize) -> Result<()> {
    let need = memory_estimate(dims, rows, threads);
    crate::settings::check_memory("dims", need, |need, total| {
        format!(
            "an audit up to D = {} on {rows} sample rows needs about {need} of memory (mapped samples and D × D matrices, one machine per thread), more than this machine's {total}; lower --dims (or --sample, --threads)",
            dims.iter().copied().max().unwrap_or(0)
        )
    })
}

/// Accuracy of one machine on the check part, in target units.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Accuracy {
    /// Root mean squared error.
    pub rmse: f64,
    /// Mean absolute error.
    pub mae: f64,
    /// Coefficient of determination (NaN for a constant check target).
    pub r2: f64,
}

/// How a parameter's value was chosen.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Chosen {
    /// The value used.
    pub value: f64,
    /// `"given"` or the rule that produced it.
    pub source: String,
}

/// The exact machine's fit and accuracy.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ExactResult {
    /// Accuracy on the check part.
    pub check: Accuracy,
    /// Wall-clock seconds of the SMO fit.
    pub fit_seconds: f64,
    /// Support vectors.
    pub support_vectors: usize,
    /// SMO steps.
    pub iterations: u64,
    /// Whether SMO reached its tolerance.
    pub converged: bool,
    /// The maximal violation `m(α) − M(α)` at the end (standardized target units).
    pub violation: f64,
    /// SMO's tolerance on it.
    pub tol: f64,
    /// Why SMO did not reach its tolerance, in one sentence; `None` when it did.
    pub stopped: Option<String>,
}

/// One approximate machine: a map kind and a D.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AuditRow {
    /// The feature map.
    pub map: MapKind,
    /// D asked for.
    pub dim: usize,
    /// Features actually produced (Nyström may give fewer: distinct landmarks, dropped
    /// eigenvalues).
    pub features: usize,
    /// Accuracy on the check part.
    pub check: Accuracy,
    /// RMS difference from the exact machine's check predictions over the target's
    /// standard deviation (fit part).
    pub agreement: f64,
    /// `‖K − ZZᵀ‖_F / ‖K‖_F` on a block of check rows.
    pub kernel_error: f64,
    /// Wall-clock seconds: building the map, mapping the fit part, solving.
    pub fit_seconds: f64,
    /// Whether the linear solver reached its duality-gap tolerance.
    pub converged: bool,
    /// Its final relative duality gap.
    pub gap: f64,
    /// Passes over the fit part the linear solver made.
    pub passes: usize,
    /// Why the linear solver did not reach its tolerance, in one sentence; `None` when
    /// it did.
    pub stopped: Option<String>,
}

/// A recommended D for one map.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Recommendation {
    /// The map.
    pub map: MapKind,
    /// The smallest D within the tolerance; `None` when no D of the list meets it.
    pub dim: Option<usize>,
}

/// Everything an audit found.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AuditReport {
    /// Kernel family.
    pub kernel: KernelKind,
    /// Loss beyond the tube, shared by every machine.
    pub loss: Loss,
    /// The solver of the approximate machines' linear epsilon-SVR.
    pub linear_solver: String,
    /// Kernel width.
    pub gamma: Chosen,
    /// Penalty C (target units for the linear loss, unit-free for the squared loss).
    pub c: Chosen,
    /// Tube half-width (target units).
    pub epsilon: Chosen,
    /// Rows the machines were fitted on.
    pub rows_fit: usize,
    /// Rows they were checked on.
    pub rows_check: usize,
    /// Standard deviation of the fit part's target (the agreement's unit).
    pub target_sd: f64,
    /// The agreement tolerance used for recommendations.
    pub agree: f64,
    /// The exact machine.
    pub exact: ExactResult,
    /// The approximate machines, map by map, D ascending.
    pub rows: Vec<AuditRow>,
    /// Smallest D within tolerance, per map.
    pub recommended: Vec<Recommendation>,
    /// Smallest D within tolerance over all maps (ties: the better agreement).
    pub overall: Option<(MapKind, usize)>,
    /// Remarks about the data (constant target, few rows, …).
    pub notes: Vec<String>,
}

/// Name of a map kind as the CLI and reports spell it.
pub fn map_name(kind: MapKind) -> &'static str {
    match kind {
        MapKind::Fourier => "fourier",
        MapKind::Orthogonal => "orthogonal",
        MapKind::Nystrom => "nystrom",
    }
}
