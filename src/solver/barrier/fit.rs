//! In-memory fit by barrier passes: standardize the target, iterate passes over the
//! feature array until the relative duality gap is small, return the model in user units.

use ndarray::{s, ArrayView1, ArrayView2};

use super::BarrierState;
use crate::solver::dcd::{target_scale, DcdFit, DcdReport, DcdSettings, Loss, TargetScaling};
use crate::solver::newton::Step;
use crate::{Error, Result};

/// Fits a linear epsilon-SVR with the linear loss on the in-memory features `z`
/// (rows × D) and targets `y` by the barrier method of [this module](super), with the
/// exact Hessian every pass.
///
/// The target is standardized and C and epsilon converted with
/// [`DcdSettings::in_standard_units`], as for [`crate::solver::dcd::fit`];
/// `settings.sweeps_per_block` and `settings.shrinking` do not apply. A pass is one epoch
/// of the report. The returned dual variables are ±C (user units) for the rows outside
/// the tube at the returned weights and 0 for the others.
///
/// # Errors
/// Invalid settings or the squared loss ([`Error::InvalidParameter`]), zero rows
/// ([`Error::NoRows`]), a non-finite feature ([`Error::NonFinite`]) or target
/// ([`Error::NonFiniteTarget`]).
///
/// # Panics
/// If `y` does not have one entry per row of `z`.
#[track_caller]
pub fn fit(z: ArrayView2<f64>, y: ArrayView1<f64>, settings: &DcdSettings) -> Result<DcdFit> {
    let (n, d) = z.dim();
    assert_eq!(y.len(), n, "fit: {n} feature rows but {} targets", y.len());
    settings.validate()?;
    if settings.loss != Loss::L1 {
        return Err(Error::invalid(
            "loss",
            "the barrier solver needs the linear loss",
        ));
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
    let mut state = BarrierState::new(d, solver.c, solver.epsilon);
    let mut history = Vec::new();
    let mut converged = false;
    for _ in 0..solver.max_epochs {
        let mut pass = state.accumulator();
        pass.add_block(Some(&pool), z, ys.view());
        let objective = match state.step(pass)? {
            Step::Certified { objective, .. } => objective,
            Step::Moved { bound, .. } => bound,
            Step::Stalled { objective } => {
                history.push(objective);
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
            let e = (r.abs() - solver.epsilon).max(0.0);
            if e > 0.0 {
                solver.c * r.signum() * sd
            } else {
                0.0
            }
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
