//! The exact machine of an audit (SMO with the audit's loss) and the exact kernel's
//! error measure for a map.

use ndarray::{Array1, ArrayView2};

use super::parts::{accuracy, mean_sd, Parts};
use super::ExactResult;
use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::kernel::Kernel;
use crate::solver::dcd::Loss;
use crate::solver::smo::{self, KernelModel, SmoSettings};

/// What the exact machine is fitted with.
#[derive(Clone, Copy, Debug)]
pub(super) struct ExactSettings {
    /// The loss beyond the tube.
    pub loss: Loss,
    /// C in the loss's own units (target units for the linear loss, unit-free for the
    /// squared loss).
    pub c: f64,
    /// Tube half-width, target units.
    pub epsilon: f64,
    /// SMO's tolerance on the maximal violation, standardized target units.
    pub tol: f64,
    /// Kernel-row cache budget, bytes.
    pub cache_bytes: usize,
}

/// Fits the exact machine by SMO on the fit part and predicts the check part.
///
/// The target is centred and divided by its standard deviation `sd`, ε by `sd`, and C
/// by `sd` for the linear loss (the squared loss's C is unit-free: ½‖w‖² + C Σ ξ²
/// scales by sd² as a whole), so that SMO's tolerance is in standardized units; with a
/// free bias this is the same problem (the solution scales back exactly: coefficients ×
/// sd, bias × sd + mean).
pub(super) fn fit_exact(
    parts: &Parts,
    kernel: Kernel,
    s: &ExactSettings,
) -> Result<(ExactResult, Array1<f64>)> {
    let (mean, sd) = mean_sd(parts.y_fit.view());
    let unit = if sd > 0.0 { sd } else { 1.0 };
    if !(s.c.is_finite() && s.c > 0.0) {
        return Err(Error::invalid(
            "C",
            format!("must be a finite number > 0, got {}", s.c),
        ));
    }
    let settings = SmoSettings {
        c: match s.loss {
            Loss::L1 => s.c / unit,
            Loss::L2 => s.c,
        },
        loss: s.loss,
        epsilon: s.epsilon / unit,
        tol: s.tol,
        cache_bytes: s.cache_bytes,
        ..SmoSettings::default()
    };
    let ys = parts.y_fit.mapv(|v| (v - mean) / unit);
    let fit = smo::fit(parts.x_fit.view(), ys.view(), kernel, &settings)?;
    let model = KernelModel {
        coef: fit.model.coef.mapv(|b| b * unit),
        bias: fit.model.bias * unit + mean,
        ..fit.model
    };
    let pred = model.predict(parts.x_check.view());
    let r = &fit.report;
    let stopped = (!r.converged).then(|| {
        format!(
            "SMO stopped at its limit of {} steps with a violation of {:.3e} above its \
             tolerance {:.1e}",
            settings.max_iterations, r.final_gap, settings.tol
        )
    });
    Ok((
        ExactResult {
            check: accuracy(parts.y_check.view(), pred.view()),
            fit_seconds: r.seconds,
            support_vectors: r.support_vectors,
            iterations: r.iterations,
            converged: r.converged,
            violation: r.final_gap,
            tol: settings.tol,
            stopped,
        },
        pred,
    ))
}

/// `‖K − ZZᵀ‖_F / ‖K‖_F` with Z the map of the rows `xb` and K their exact kernel.
pub(super) fn kernel_error(map: &dyn FeatureMap, xb: ArrayView2<f64>, k: ArrayView2<f64>) -> f64 {
    let z = map.transform(xb);
    let approx = z.dot(&z.t());
    let num: f64 = k
        .iter()
        .zip(approx.iter())
        .map(|(a, b)| (a - b) * (a - b))
        .sum();
    let den: f64 = k.iter().map(|a| a * a).sum();
    (num / den).sqrt()
}
