//! One approximate machine of an audit: a feature map of some D, a linear epsilon-SVR
//! fitted on the mapped fit part with the audit's loss (Newton passes for the squared
//! loss, dual coordinate descent for the linear loss, as `kernlake fit` does), and its
//! comparison with the exact machine on the check part.

use std::time::Instant;

use ndarray::{ArrayView1, ArrayView2};

use super::exact::kernel_error;
use super::parts::{accuracy, Parts};
use super::{AuditOptions, AuditRow};
use crate::error::Result;
use crate::features::{build_map, MapKind, MapSpec};
use crate::kernel::Kernel;
use crate::metrics::rmse;
use crate::solver::dcd::{self, DcdFit, DcdSettings, Loss};
use crate::solver::newton;

/// The linear solver an audit uses for `loss`, as the report names it.
pub(super) fn solver_name(loss: Loss) -> &'static str {
    match loss {
        Loss::L1 => "dual coordinate descent",
        Loss::L2 => "Newton passes",
    }
}

/// What every approximate machine of an audit shares: the sample's parts, the kernel
/// and penalties, and the exact machine's results it is compared with.
pub(super) struct Machine<'a> {
    pub parts: &'a Parts,
    pub kernel: Kernel,
    /// The linear solver's settings: the exact machine's loss, C and epsilon.
    pub linear: DcdSettings,
    pub opts: &'a AuditOptions,
    pub exact_pred: ArrayView1<'a, f64>,
    pub unit: f64,
    pub kblock: ArrayView2<'a, f64>,
    pub k_exact: ArrayView2<'a, f64>,
}

impl Machine<'_> {
    /// Builds the map of `kind` with `d` components, fits the linear machine on the
    /// mapped fit part, and compares it on the check part.
    pub fn fit(&self, kind: MapKind, d: usize) -> Result<AuditRow> {
        let (parts, opts) = (self.parts, self.opts);
        let spec = MapSpec {
            kind,
            dim: d,
            variant: opts.variant,
            seed: opts.seed,
            ..MapSpec::default()
        };
        let t0 = Instant::now();
        let map = build_map(
            &spec,
            self.kernel,
            parts.x_fit.ncols(),
            Some(parts.x_fit.view()),
        )?;
        let z = map.transform(parts.x_fit.view());
        let y = parts.y_fit.view();
        // Every row in the Newton solver's Hessian: the exact generalized Newton step,
        // which ends in finitely many passes (a sample's rows fit in memory).
        let fit = match self.linear.loss {
            Loss::L1 => dcd::fit(z.view(), y, &self.linear, z.nrows())?,
            Loss::L2 => newton::fit(z.view(), y, &self.linear, z.nrows())?,
        };
        let fit_seconds = t0.elapsed().as_secs_f64();
        let pred = fit.predict(map.transform(parts.x_check.view()).view());
        Ok(AuditRow {
            map: kind,
            dim: d,
            features: map.output_dim(),
            check: accuracy(parts.y_check.view(), pred.view()),
            agreement: rmse(pred.view(), self.exact_pred) / self.unit,
            kernel_error: kernel_error(map.as_ref(), self.kblock, self.k_exact),
            fit_seconds,
            converged: fit.report.converged,
            gap: fit.report.objective.gap,
            passes: fit.report.epochs,
            stopped: self.why_stopped(&fit),
        })
    }

    /// Why a fit did not reach its tolerance, in one sentence; `None` when it did.
    fn why_stopped(&self, fit: &DcdFit) -> Option<String> {
        let r = &fit.report;
        if r.converged {
            return None;
        }
        let (tol, limit) = (self.linear.tol, self.linear.max_epochs);
        let why = if r.epochs >= limit {
            format!("stopped at its limit of {limit} passes")
        } else {
            format!(
                "stopped after {} passes: no step lowered the objective further \
                 (working precision)",
                r.epochs
            )
        };
        Some(format!(
            "{} {why} with a relative duality gap of {:.2e} above its tolerance {tol:.1e}",
            solver_name(self.linear.loss),
            r.objective.gap
        ))
    }
}
