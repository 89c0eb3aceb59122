//! The barrier solver's epoch for the linear loss: one pass gathers the statistics of
//! [`crate::solver::barrier`] block by block in file order, then the driver steps and
//! certifies the point it moved to with a feasible dual point of the unsmoothed problem.
//! No per-row state.

use ndarray::Array1;

use super::strategy::{EpochOut, PassContext, Strategy};
use crate::error::Result;
use crate::solver::barrier::BarrierState;
use crate::solver::cache::PassCache;
use crate::solver::dcd::DcdSettings;
use crate::solver::newton::Step;

/// The barrier method's state between passes.
pub(super) struct BarrierStrategy {
    state: BarrierState,
    support_share: f64,
}

impl BarrierStrategy {
    /// `c` and `epsilon` in standardized target units.
    pub fn new(dim: usize, c: f64, epsilon: f64) -> Self {
        BarrierStrategy {
            state: BarrierState::new(dim, c, epsilon),
            support_share: 0.0,
        }
    }
}

impl Strategy for BarrierStrategy {
    fn epoch(&mut self, ctx: &PassContext, cache: &mut PassCache) -> Result<(EpochOut, usize)> {
        let map = ctx.streamer.map;
        let mut acc = self.state.accumulator();
        let rows_done = |r: u64| ctx.observer.rows_done(r);
        let before = self.state.w.clone();
        let resident =
            ctx.streamer
                .pass(ctx.source, &ctx.all_units(), cache, &rows_done, &mut |mb| {
                    ctx.check_stop()?;
                    let z = mb.mapped(map, ctx.pool);
                    acc.add_block(Some(ctx.pool), z.view(), mb.y.view());
                    Ok(())
                })?;
        let taken = self.state.step(acc)?;
        let out = match taken {
            Step::Certified {
                objective,
                support_share,
                step,
            } => {
                self.support_share = support_share;
                EpochOut {
                    objective,
                    certified: self.state.w.clone(),
                    final_ok: true,
                    updates: 0,
                    step: Some(step),
                    stalled: false,
                }
            }
            // A grid move: the last certificate still belongs to the weights before it.
            Step::Moved { step, bound } => EpochOut {
                objective: bound,
                certified: before,
                final_ok: true,
                updates: 0,
                step: Some(step),
                stalled: false,
            },
            Step::Stalled { objective } => EpochOut {
                objective,
                certified: self.state.w.clone(),
                final_ok: true,
                updates: 0,
                step: Some(0.0),
                stalled: true,
            },
        };
        Ok((out, resident))
    }

    fn weights(&self) -> &Array1<f64> {
        &self.state.w
    }

    /// The best dual value certified so far: a lower bound on the optimum.
    fn dual_bound(&self, _dcd: &DcdSettings) -> f64 {
        self.state.dual()
    }

    fn support_share(&self, _rows_trained: u64) -> f64 {
        self.support_share
    }
}
