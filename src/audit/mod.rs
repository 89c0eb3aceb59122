//! Audit: on an in-memory sample, compare approximate kernel machines (explicit feature
//! map + linear epsilon-SVR) with the exact kernel machine fitted on the same rows.
//!
//! The sample is split (seeded) into a fit part and a check part. Inputs are
//! standardized with a [`Standardizer`] fitted on the fit part. The exact machine is
//! epsilon-SVR solved by SMO (Fan, Chen & Lin, JMLR 2005; see [`crate::solver::smo`]);
//! every approximate machine maps the inputs with random Fourier features (Rahimi &
//! Recht, NIPS 2007), orthogonal random features (Yu et al., NIPS 2016) or Nyström
//! features (Williams & Seeger, NIPS 2001) for each D of a list, and fits a linear
//! epsilon-SVR by dual coordinate descent (Ho & Lin, JMLR 2012).
//!
//! **Like for like.** The exact machine is the classic epsilon-SVR, whose loss beyond the
//! tube is linear (L1). The approximate machines of an audit therefore use the L1 loss
//! too, with the same kernel, gamma, C and epsilon, even though `kernlake fit` defaults to
//! the squared (L2) loss. One difference remains by construction: the linear solver's
//! bias is an appended constant feature and is regularised (towards the target's mean,
//! since the target is centred), whereas SMO's bias is free.
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
//!     components: vec![32, 64],
//!     ..AuditOptions::default()
//! };
//! let report = audit(x.view(), y.view(), &opts)?;
//! assert_eq!(report.rows.len(), 2);
//! # Ok::<(), kernlake::Error>(())
//! ```

mod model;
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

/// What to compare, and how.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AuditOptions {
    /// Kernel family, shared by the exact and the approximate machines.
    pub kernel: KernelKind,
    /// Kernel width; `None` = median heuristic on the standardized fit part.
    pub gamma: Option<f64>,
    /// Penalty C in target units; `None` = Cherkassky & Ma (Neural Networks 2004).
    pub c: Option<f64>,
    /// Tube half-width in target units; `None` = Cherkassky & Ma (Neural Networks 2004).
    pub epsilon: Option<f64>,
    /// Feature maps to try; empty = every map that applies to the kernel (orthogonal
    /// features exist for the Gaussian kernel only).
    pub maps: Vec<MapKind>,
    /// Feature dimensions D to try (Nyström: landmarks).
    pub components: Vec<usize>,
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
    /// loss and a large C, dual coordinate descent converges slowly (the report shows
    /// whether the gap was reached); the agreement then includes the remaining
    /// optimisation error, as it would for a model fitted with the same settings.
    pub dcd_tol: f64,
    /// Most passes of the linear solver over the fit part.
    pub dcd_epochs: usize,
    /// Check rows (at most) in the block on which the kernel error is measured.
    pub kernel_rows: usize,
    /// Seed of the split, the maps and the solver orders.
    pub seed: u64,
    /// Threads (0 = all cores); results do not depend on it.
    pub threads: usize,
}

impl Default for AuditOptions {
    /// Gaussian kernel, data-driven gamma/C/epsilon, all maps, D = 256…4096, agree 0.02,
    /// 80/20 split, 1 GiB cache, SMO tol 1e-3, the linear solver's own defaults (relative
    /// gap 1e-3 within 100 epochs, as `kernlake fit`), 500 rows for the kernel error,
    /// seed 0.
    fn default() -> Self {
        AuditOptions {
            kernel: KernelKind::Gaussian,
            gamma: None,
            c: None,
            epsilon: None,
            maps: Vec::new(),
            components: vec![256, 512, 1024, 2048, 4096],
            variant: FourierVariant::SinCos,
            agree: 0.02,
            split: 0.8,
            cache_bytes: 1 << 30,
            smo_tol: 1e-3,
            dcd_tol: 1e-3,
            dcd_epochs: 100,
            kernel_rows: 500,
            seed: 0,
            threads: 0,
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
        if self.components.is_empty() || self.components.contains(&0) {
            return Err(Error::invalid(
                "components",
                "give at least one feature dimension, each at least 1",
            ));
        }
        if self.dcd_epochs == 0 {
            return Err(Error::invalid("dcd_epochs", "must be at least 1"));
        }
        self.resolved_maps().map(|_| ())
    }
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
}

/// One approximate machine: a map kind and a D.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AuditRow {
    /// The feature map.
    pub map: MapKind,
    /// D asked for.
    pub components: usize,
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
}

/// A recommended D for one map.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Recommendation {
    /// The map.
    pub map: MapKind,
    /// The smallest D within the tolerance; `None` when no D of the list meets it.
    pub components: Option<usize>,
}

/// Everything an audit found.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AuditReport {
    /// Kernel family.
    pub kernel: KernelKind,
    /// Kernel width.
    pub gamma: Chosen,
    /// Penalty C (target units).
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
