//! Exact kernel epsilon-SVR by sequential minimal optimization (SMO).
//!
//! The dual of epsilon-SVR with an unregularised bias is a quadratic programme in 2n
//! variables `α⁺, α⁻ ∈ [0, C]` with one equality constraint `Σ(α⁺ − α⁻) = 0`
//! (Smola & Schölkopf, *A tutorial on support vector regression*, Statistics and
//! Computing 14, 2004, eq. 10). It is solved by SMO (Platt, 1998) with the second-order
//! working-set selection of Fan, Chen & Lin (JMLR 6, 2005, "WSS2"), or the maximal
//! violating pair for comparison, stopping when `m(α) − M(α) ≤ tol`. Kernel rows come
//! from a least-recently-used cache with a memory budget and are computed in parallel;
//! shrinking (Joachims, 1999) removes bounded variables, and the gradient is rebuilt on
//! every row before the final optimality check.
//!
//! With the squared loss beyond the tube ([`Loss::L2`]) the dual is the same with
//! `K + I/(2C)` in place of `K` and no upper bound on the α (Ho & Lin, JMLR 13, 2012,
//! §2, for the linear case); the same selection and steps solve it.
//!
//! Results are bit-identical whatever the number of threads: only independent kernel
//! values are computed in parallel, every sum runs in a fixed order.
//!
//! ```
//! use kernlake::kernel::Kernel;
//! use kernlake::solver::smo::{fit, SmoSettings};
//! use ndarray::array;
//!
//! let x = array![[0.0], [0.5], [1.0], [1.5], [2.0]];
//! let y = array![0.0, 0.25, 1.0, 2.25, 4.0];
//! let fitted = fit(x.view(), y.view(), Kernel::gaussian(1.0).unwrap(), &SmoSettings::default()).unwrap();
//! assert!(fitted.report.converged);
//! let p = fitted.model.predict(x.view());
//! assert_eq!(p.len(), 5);
//! ```

mod cache;
mod engine;
mod rows;
mod scan;
mod team;
#[cfg(test)]
mod tests;

use std::time::Instant;

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::kernel::Kernel;
pub use crate::solver::dcd::Loss;
use cache::{RowCache, RowSource};
use engine::Engine;
use rows::{Tiles, TILE};
use team::with_crew;

/// How SMO chooses the pair of variables to move.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Selection {
    /// Second-order selection (Fan, Chen & Lin, JMLR 2005, WSS2): the first variable is
    /// the most violating, the second maximises the guaranteed decrease of the objective.
    SecondOrder,
    /// First-order selection: the maximal violating pair (Keerthi et al., Neural
    /// Computation 13, 2001).
    FirstOrder,
}

/// Parameters of the exact SMO fit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SmoSettings {
    /// Weight C > 0 of the loss: the box bound of the linear loss, or the weight of the
    /// squared residuals beyond the tube for the squared loss.
    pub c: f64,
    /// Loss beyond the tube: linear (the classic epsilon-SVR) or squared.
    pub loss: Loss,
    /// Half-width ε ≥ 0 of the insensitive tube, in the units of the target.
    pub epsilon: f64,
    /// Stopping tolerance on the maximal violation `m(α) − M(α)`, > 0.
    pub tol: f64,
    /// Memory budget of the kernel-row cache in bytes; must hold at least two rows
    /// (`16·n` bytes).
    pub cache_bytes: usize,
    /// Whether to shrink the active set.
    pub shrinking: bool,
    /// Maximum number of SMO steps; reaching it is reported, not an error.
    pub max_iterations: u64,
    /// Working-set selection.
    pub selection: Selection,
}

impl Default for SmoSettings {
    /// C = 1, the linear loss, ε = 0.1, tol = 1e-3, 1 GiB cache, shrinking, 10 million
    /// steps, WSS2.
    fn default() -> Self {
        SmoSettings {
            c: 1.0,
            loss: Loss::L1,
            epsilon: 0.1,
            tol: 1e-3,
            cache_bytes: 1 << 30,
            shrinking: true,
            max_iterations: 10_000_000,
            selection: Selection::SecondOrder,
        }
    }
}

/// What happened during an SMO fit.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SmoReport {
    /// SMO steps taken.
    pub iterations: u64,
    /// Kernel values computed (rows for the cache, the diagonal, gradient rebuilds).
    pub kernel_evaluations: u64,
    /// Training rows with a non-zero coefficient.
    pub support_vectors: usize,
    /// Dual objective `½ βᵀKβ − yᵀβ + ε Σ(α⁺+α⁻)` at the solution (to be minimised),
    /// plus `‖β‖²/(4C)` for the squared loss.
    pub objective: f64,
    /// Wall-clock seconds of the fit.
    pub seconds: f64,
    /// Of which, seconds spent computing kernel values (cache rows, the diagonal and
    /// gradient rebuilds).
    pub kernel_seconds: f64,
    /// Whether `m(α) − M(α) ≤ tol` was reached.
    pub converged: bool,
    /// `m(α) − M(α)` at the end, over all variables.
    pub final_gap: f64,
}

/// An exact kernel model: the support vectors, their coefficients and the bias.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct KernelModel {
    /// The kernel.
    pub kernel: Kernel,
    /// Support vectors, one per row (same columns as the training input).
    pub support: Array2<f64>,
    /// Coefficient `α⁺ − α⁻` of each support vector.
    pub coef: Array1<f64>,
    /// The bias b.
    pub bias: f64,
}

impl KernelModel {
    /// `f(x) = Σ_s coef_s k(support_s, x) + b` for every row of `x`, in parallel over rows
    /// (each row's sum runs in a fixed order, so results do not depend on threads).
    ///
    /// # Panics
    /// If `x` has a different number of columns than the support vectors, or `coef`
    /// and `support` disagree in length.
    pub fn predict(&self, x: ArrayView2<f64>) -> Array1<f64> {
        assert_eq!(
            x.ncols(),
            self.support.ncols(),
            "predict: input has {} columns, the model expects {}",
            x.ncols(),
            self.support.ncols()
        );
        assert_eq!(
            self.coef.len(),
            self.support.nrows(),
            "predict: coef and support disagree in length"
        );
        let sv = self.support.as_standard_layout();
        let mut tiles = Tiles::new(sv.ncols());
        tiles.gather(sv.as_slice().expect("standard layout"), 0..sv.nrows());
        let coef = self.coef.as_standard_layout();
        let coef = coef.as_slice().expect("standard layout");
        let mut out = Array1::zeros(x.nrows());
        let rows: Vec<_> = x.axis_iter(Axis(0)).collect();
        // Blocks of rows in parallel, one kernel-row buffer per block; each row's sum
        // runs over the support vectors in order.
        out.as_slice_mut()
            .expect("fresh array")
            .par_chunks_mut(TILE / 8)
            .zip(rows.par_chunks(TILE / 8))
            .for_each(|(outs, rows)| {
                let mut k = vec![0.0; tiles.len()];
                let mut xr = vec![0.0; rows.first().map_or(0, |r| r.len())];
                for (o, row) in outs.iter_mut().zip(rows) {
                    xr.iter_mut().zip(row).for_each(|(a, b)| *a = *b);
                    tiles.row_into_seq(&self.kernel, &xr, &mut k);
                    let mut acc = 0.0;
                    for (c, kv) in coef.iter().zip(&k) {
                        acc += c * kv;
                    }
                    *o = acc + self.bias;
                }
            });
        out
    }
}

/// The result of [`fit`].
#[derive(Clone, Debug)]
pub struct SmoFit {
    /// The model (support vectors only).
    pub model: KernelModel,
    /// `α⁺ − α⁻` for every training row (zero for rows that are not support vectors).
    pub dual_coef: Array1<f64>,
    /// Iterations, timings and the optimality gap.
    pub report: SmoReport,
}

fn check_settings(settings: &SmoSettings, n: usize) -> Result<()> {
    if !(settings.c.is_finite() && settings.c > 0.0) {
        return Err(Error::invalid(
            "C",
            format!("must be a finite number > 0, got {}", settings.c),
        ));
    }
    if !(settings.epsilon.is_finite() && settings.epsilon >= 0.0) {
        return Err(Error::invalid(
            "epsilon",
            format!("must be a finite number ≥ 0, got {}", settings.epsilon),
        ));
    }
    if !(settings.tol.is_finite() && settings.tol > 0.0) {
        return Err(Error::invalid(
            "tol",
            format!("must be a finite number > 0, got {}", settings.tol),
        ));
    }
    if RowCache::rows_in_budget(settings.cache_bytes, n) < 2.min(n) {
        return Err(Error::invalid(
            "cache",
            format!(
                "{} bytes cannot hold two kernel rows of {} rows (need at least {} bytes)",
                settings.cache_bytes,
                n,
                2 * n * std::mem::size_of::<f64>()
            ),
        ));
    }
    Ok(())
}

/// Fits exact kernel epsilon-SVR on `x` (n × d, already standardized by the caller) and
/// `y` (in user units) by SMO; see the module documentation.
///
/// Reaching `max_iterations` is not an error: the report says `converged = false` and
/// gives the remaining gap. A constant target gives all coefficients zero and the
/// constant as bias.
///
/// # Errors
/// [`Error::NoRows`] for zero rows; [`Error::InvalidParameter`] for C ≤ 0, ε < 0,
/// tol ≤ 0 or a cache budget below two kernel rows; [`Error::NonFinite`] for NaN or ±inf
/// in `x`, or in `y` (reported as column `d`, one past the last input column).
///
/// # Panics
/// If `x` and `y` disagree in rows.
pub fn fit(
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    kernel: Kernel,
    settings: &SmoSettings,
) -> Result<SmoFit> {
    assert_eq!(
        x.nrows(),
        y.len(),
        "smo::fit: x has {} rows but y has {} values",
        x.nrows(),
        y.len()
    );
    let start = Instant::now();
    let (n, d) = x.dim();
    if n == 0 {
        return Err(Error::NoRows("the training array has zero rows".into()));
    }
    check_settings(settings, n)?;
    for (r, row) in x.axis_iter(Axis(0)).enumerate() {
        if let Some(col) = row.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite {
                row: r,
                column: col,
            });
        }
    }
    if let Some(r) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFinite { row: r, column: d });
    }
    let xs = x.as_standard_layout();
    let xs = xs.as_slice().expect("standard layout");
    let ys = y.to_vec();
    let (bound, shift) = match settings.loss {
        Loss::L1 => (settings.c, 0.0),
        Loss::L2 => (f64::INFINITY, 0.5 / settings.c),
    };
    let src = RowSource::new(kernel, xs, d, n).with_shift(shift);
    let cache_rows = RowCache::rows_in_budget(settings.cache_bytes, n);
    let mut engine = Engine::new(src, &ys, bound, settings.epsilon, cache_rows);
    // Kernel rows, gradient rebuilds and the long scans are split over a crew of as many
    // threads as the current rayon pool has, kept awake for the whole fit (`team.rs`).
    let (outcome, (final_gap, bias)) = with_crew(|crew| {
        let outcome = engine.run(
            crew,
            settings.tol,
            settings.max_iterations,
            settings.shrinking,
            settings.selection,
        );
        (outcome, engine.gap_and_bias(crew))
    });
    let objective = engine.objective();

    let support_rows: Vec<usize> = (0..n).filter(|&r| engine.beta[r] != 0.0).collect();
    let mut support = Array2::zeros((support_rows.len(), d));
    for (k, &r) in support_rows.iter().enumerate() {
        support.row_mut(k).assign(&x.row(r));
    }
    let coef: Array1<f64> = support_rows.iter().map(|&r| engine.beta[r]).collect();
    let report = SmoReport {
        iterations: outcome.iterations,
        kernel_evaluations: engine.cache.evaluations + engine.extra_evaluations,
        support_vectors: support_rows.len(),
        objective,
        seconds: start.elapsed().as_secs_f64(),
        kernel_seconds: engine.cache.seconds + engine.extra_seconds,
        converged: outcome.converged,
        final_gap,
    };
    Ok(SmoFit {
        model: KernelModel {
            kernel,
            support,
            coef,
            bias,
        },
        dual_coef: Array1::from(engine.beta),
        report,
    })
}
