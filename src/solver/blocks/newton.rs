//! The Newton solver's epoch: one pass gathers the statistics of
//! [`crate::solver::newton`] block by block in file order, then the driver steps and
//! certifies the point it moved to with the dual point β(w). No per-row state.

use ndarray::Array1;

use super::strategy::{EpochOut, PassContext, Strategy};
use crate::error::Result;
use crate::solver::cache::PassCache;
use crate::solver::dcd::DcdSettings;
use crate::solver::newton::{NewtonState, Step, SAMPLE_SALT};

/// Primal Newton's state between passes.
pub(super) struct NewtonStrategy {
    state: NewtonState,
    /// Expected share of the training rows in each pass's Hessian sample.
    share: f64,
    seed: u64,
    support_share: f64,
}

impl NewtonStrategy {
    pub fn new(dim: usize, share: f64, seed: u64) -> Self {
        NewtonStrategy {
            state: NewtonState::new(dim),
            share,
            seed,
            support_share: 0.0,
        }
    }
}

impl Strategy for NewtonStrategy {
    fn epoch(&mut self, ctx: &PassContext, cache: &mut PassCache) -> Result<(EpochOut, usize)> {
        let dcd = ctx.dcd;
        let map = ctx.streamer.map;
        let mut acc =
            self.state
                .accumulator(dcd.c, dcd.epsilon, self.share, self.seed ^ SAMPLE_SALT);
        let rows_done = |r: u64| ctx.observer.rows_done(r);
        let resident =
            ctx.streamer
                .pass(ctx.source, &ctx.all_units(), cache, &rows_done, &mut |mb| {
                    ctx.check_stop()?;
                    acc.add_block(Some(ctx.pool), mb.rows_view(map), mb.y.view(), &mb.rows);
                    Ok(())
                })?;
        let taken = self.state.step(acc)?;
        let w = &self.state.w;
        let out = |objective, step, final_ok, stalled| EpochOut {
            objective,
            certified: w.clone(),
            final_ok,
            updates: 0,
            step: Some(step),
            stalled,
        };
        let out = match taken {
            Step::Certified {
                objective,
                support_share,
                step,
            } => {
                self.support_share = support_share;
                out(objective, step, true, false)
            }
            Step::Moved { step, bound } => out(bound, step, false, false),
            Step::Stalled { objective } => out(objective, 0.0, true, true),
        };
        Ok((out, resident))
    }

    fn weights(&self) -> &Array1<f64> {
        &self.state.w
    }

    /// β = 0 is a feasible dual point of the squared loss, with dual value 0.
    fn dual_bound(&self, _dcd: &DcdSettings) -> f64 {
        0.0
    }

    fn support_share(&self, _rows_trained: u64) -> f64 {
        self.support_share
    }
}
