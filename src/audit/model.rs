//! Auditing an already fitted [`Model`]: the exact machine with the model's own kernel,
//! gamma, loss, C, epsilon and scaler, fitted by SMO on a sample, against the model's
//! predictions.

use ndarray::{ArrayView1, ArrayView2};
use serde::{Deserialize, Serialize};

use super::exact::{fit_exact, kernel_error, ExactSettings};
use super::parts::{accuracy, check_finite, mean_sd, Parts};
use super::{Accuracy, ExactResult};
use crate::error::{Error, Result};
use crate::features::MapSpec;
use crate::kernel::Kernel;
use crate::metrics::rmse;
use crate::model::Model;

/// Options of a model audit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ModelAuditOptions {
    /// Share of the sample the exact machine is fitted on, in (0, 1).
    pub split: f64,
    /// Memory budget of SMO's kernel-row cache, bytes.
    pub cache_bytes: usize,
    /// SMO tolerance, standardized target units.
    pub smo_tol: f64,
    /// Check rows (at most) for the kernel error.
    pub kernel_rows: usize,
    /// Seed of the split.
    pub seed: u64,
    /// Threads (0 = all cores; at most the processors unless `oversubscribe`).
    pub threads: usize,
    /// Allow `threads` above the number of processors.
    pub oversubscribe: bool,
}

impl Default for ModelAuditOptions {
    /// 80/20 split, 1 GiB cache, SMO tol 1e-3, 500 kernel rows, seed 0, all cores.
    fn default() -> Self {
        ModelAuditOptions {
            split: 0.8,
            cache_bytes: 1 << 30,
            smo_tol: 1e-3,
            kernel_rows: 500,
            seed: 0,
            threads: 0,
            oversubscribe: false,
        }
    }
}

/// What a model audit found.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ModelAuditReport {
    /// The model's kernel (with its gamma).
    pub kernel: Kernel,
    /// The model's map.
    pub map: MapSpec,
    /// Features the model's map produces.
    pub features: usize,
    /// The model's C (target units).
    pub c: f64,
    /// The model's epsilon (target units).
    pub epsilon: f64,
    /// The loss the model was trained with, which the exact machine uses too.
    pub loss: crate::solver::dcd::Loss,
    /// Rows the exact machine was fitted on.
    pub rows_fit: usize,
    /// Rows of the check part.
    pub rows_check: usize,
    /// Standard deviation of the fit part's target (the agreement's unit).
    pub target_sd: f64,
    /// The exact machine.
    pub exact: ExactResult,
    /// The model's accuracy on the check part.
    pub model: Accuracy,
    /// RMS difference of model and exact predictions on the check part, over the
    /// target's standard deviation.
    pub agreement: f64,
    /// `‖K − ZZᵀ‖_F / ‖K‖_F` of the model's map on a block of check rows.
    pub kernel_error: f64,
    /// Remarks.
    pub notes: Vec<String>,
}

/// Audits `model` on raw-unit rows `x` (columns in the model's input order) and targets
/// `y`: fits the exact machine by SMO with the model's kernel, C and epsilon on the fit
/// part (inputs standardized by the model's own scaler) and compares predictions on the
/// check part. The exact machine uses the loss the model was trained with.
///
/// # Errors
/// As [`super::audit`]: bad split, fewer than [`super::MIN_ROWS`] rows, non-finite
/// values, a cache budget below two kernel rows.
///
/// # Panics
/// If `x` and `y` differ in rows or `x` does not have the model's input columns.
#[track_caller]
pub fn audit_model(
    model: &Model,
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    opts: &ModelAuditOptions,
) -> Result<ModelAuditReport> {
    assert_eq!(x.nrows(), y.len(), "audit_model: x and y differ in rows");
    assert_eq!(
        x.ncols(),
        model.input_dim(),
        "audit_model: x has {} columns, the model expects {}",
        x.ncols(),
        model.input_dim()
    );
    crate::settings::check_threads(opts.threads, opts.oversubscribe)?;
    if !(opts.split > 0.0 && opts.split < 1.0) {
        return Err(Error::invalid(
            "split",
            format!(
                "the fit share must lie strictly between 0 and 1, got {}",
                opts.split
            ),
        ));
    }
    check_finite(x, y)?;
    let parts = Parts::split(x, y, opts.split, opts.seed, Some(&model.scaler))?;
    let notes = parts.notes();
    let (_, y_sd) = mean_sd(parts.y_fit.view());
    let unit = if y_sd > 0.0 { y_sd } else { 1.0 };
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(opts.threads)
        .build()
        .map_err(|e| Error::invalid("threads", format!("no thread pool could start: {e}")))?;
    let kernel = model.kernel;
    let exact_settings = ExactSettings {
        loss: model.problem.loss,
        c: model.problem.c,
        epsilon: model.problem.epsilon,
        tol: opts.smo_tol,
        cache_bytes: opts.cache_bytes,
    };
    let (exact, exact_pred) = pool.install(|| fit_exact(&parts, kernel, &exact_settings))?;
    let pred = pool.install(|| model.predict(parts.x_check_raw.view()));
    let kblock = parts.kernel_block(opts.kernel_rows);
    let kerr = pool.install(|| {
        let k = kernel.block(kblock.view(), kblock.view());
        kernel_error(model.map(), kblock.view(), k.view())
    });
    Ok(ModelAuditReport {
        kernel,
        map: model.map_spec.clone(),
        features: model.map().output_dim(),
        c: model.problem.c,
        epsilon: model.problem.epsilon,
        loss: model.problem.loss,
        rows_fit: parts.y_fit.len(),
        rows_check: parts.y_check.len(),
        target_sd: y_sd,
        exact,
        model: accuracy(parts.y_check.view(), pred.view()),
        agreement: rmse(pred.view(), exact_pred.view()) / unit,
        kernel_error: kerr,
        notes,
    })
}
