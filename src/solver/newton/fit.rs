//! In-memory fit by primal Newton passes: standardize the target, iterate passes over the
//! feature array until the relative duality gap is small, return the model in user units.

use ndarray::{s, ArrayView1, ArrayView2};

use super::{NewtonState, Step, SAMPLE_SALT};
use crate::solver::dcd::{target_scale, DcdFit, DcdReport, DcdSettings, Loss, TargetScaling};
use crate::solver::stream::BlockRows;
use crate::{Error, Result};

/// Fits a linear epsilon-SVR with the squared loss on the in-memory features `z`
/// (rows × D) and targets `y` by the primal Newton method of [this module](super),
/// with the Hessian formed each pass from a seeded sample of about `hessian_rows` rows
/// (every row when there are fewer).
///
/// The target is centred and divided by its population standard deviation and C and
/// epsilon converted with [`DcdSettings::in_standard_units`], as for
/// [`crate::solver::dcd::fit`]; `settings.sweeps_per_block` and `settings.shrinking`
/// do not apply. A pass is one epoch of the report. The returned dual variables are
/// β_i = 2C·(signed excess of the residual over the tube) at the returned weights, in
/// user units.
///
/// # Errors
/// Invalid settings, the linear loss or `hessian_rows` = 0 ([`Error::InvalidParameter`]),
/// zero rows ([`Error::NoRows`]), a non-finite feature ([`Error::NonFinite`]) or target
/// ([`Error::NonFiniteTarget`]).
///
/// # Panics
/// If `y` does not have one entry per row of `z`.
#[track_caller]
pub fn fit(
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    settings: &DcdSettings,
    hessian_rows: usize,
) -> Result<DcdFit> {
    let (n, d) = z.dim();
    assert_eq!(y.len(), n, "fit: {n} feature rows but {} targets", y.len());
    settings.validate()?;
    if settings.loss != Loss::L2 {
        return Err(Error::invalid(
            "loss",
            "the Newton solver needs the squared loss",
        ));
    }
    if hessian_rows == 0 {
        return Err(Error::invalid("hessian rows", "must be at least 1"));
    }
    let (mean, sd) = match target_scale(z, y)? {
        TargetScaling::Constant(fit) => return Ok(fit),
        TargetScaling::Scaled { mean, sd } => (mean, sd),
    };
    let ys = y.mapv(|v| (v - mean) / sd);
    let solver = settings.in_standard_units(sd);
    let pool = rayon::ThreadPoolBuilder::new()
        .build()
        .map_err(|e| Error::invalid("threads", e.to_string()))?;
    let rows: Vec<usize> = (0..n).collect();
    let share = (hessian_rows as f64 / n as f64).min(1.0);
    let mut state = NewtonState::new(d);
    let mut history = Vec::new();
    let mut converged = false;
    for _ in 0..solver.max_epochs {
        let mut acc = state.accumulator(solver.c, solver.epsilon, share, solver.seed ^ SAMPLE_SALT);
        acc.add_block(Some(&pool), BlockRows::Mapped(z), ys.view(), &rows);
        let objective = match state.step(acc)? {
            Step::Certified { objective, .. } => objective,
            Step::Moved { bound, .. } => bound,
            Step::Stalled { objective } => {
                history.push(objective);
                converged = objective.gap <= solver.tol;
                break;
            }
        };
        history.push(objective);
        if objective.gap <= solver.tol {
            converged = true;
            break;
        }
    }
    let w = &state.w;
    let f = z.dot(&w.slice(s![..d])) + w[d];
    let beta = ys
        .iter()
        .zip(&f)
        .map(|(yi, fi)| {
            let r = yi - fi;
            let e = (r.abs() - solver.epsilon).max(0.0) * r.signum();
            2.0 * solver.c * e * sd
        })
        .collect();
    Ok(DcdFit {
        weights: w.slice(s![..d]).mapv(|v| v * sd),
        intercept: mean + sd * w[d],
        beta,
        report: DcdReport {
            epochs: history.len(),
            objective: *history.last().expect("at least one pass runs"),
            history,
            converged,
            updates: 0,
        },
    })
}
