//! The dual solver's epoch: block minimization (Yu, Hsieh, Chang & Lin, KDD 2010) with
//! dual coordinate descent on each group of blocks (Ho & Lin, JMLR 2012). One dual
//! variable per row (8 bytes a row) lives in [`DcdState`] for the whole run; units are
//! visited in a seeded random order each epoch.
//!
//! Certificate: during epoch k the primal loss of the weights the epoch *started* with is
//! accumulated block by block, and the dual value of the duals it started with is known
//! exactly (maintained incrementally), so at the end of epoch k the relative duality gap
//! of the start-of-epoch model is exact.

use std::sync::Arc;

use ndarray::{Array1, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use super::strategy::{EpochOut, PassContext, Strategy};
use super::{loss_sum, objective};
use crate::error::Result;
use crate::solver::cache::PassCache;
use crate::solver::dcd::{solve_block, BlockWorkspace, DcdSettings, DcdState};
use crate::solver::rows::MappedBlock;
use crate::solver::stream::Streamer;

/// Block minimization's state: the duals, the sweep workspace and the order generator.
pub(super) struct DualStrategy {
    state: DcdState,
    ws: BlockWorkspace,
    rng: ChaCha8Rng,
    /// Rows read (before the holdout split) gathered into one sub-problem.
    block_rows: usize,
}

impl DualStrategy {
    pub fn new(dim: usize, rows_total: usize, seed: u64, block_rows: usize) -> Self {
        DualStrategy {
            state: DcdState::new(dim, rows_total),
            ws: BlockWorkspace::new(),
            rng: ChaCha8Rng::seed_from_u64(seed),
            block_rows: block_rows.max(1),
        }
    }
}

impl Strategy for DualStrategy {
    fn epoch(&mut self, ctx: &PassContext, cache: &mut PassCache) -> Result<(EpochOut, usize)> {
        let first = cache.passes() == 0;
        let dcd = ctx.dcd;
        let mut order = ctx.all_units();
        order.shuffle(&mut self.rng);
        let w_start = self.state.w.clone();
        let dual_start = self.state.dual_value(dcd);
        let mut loss_start = 0.0;
        let mut updates = 0u64;
        // Blocks are gathered into groups of at least `block_rows` rows read before the
        // solver sees them: small files (one site, one month) then mix into one
        // sub-problem instead of pulling the weights towards each file in turn.
        let mut group: Vec<Arc<MappedBlock>> = Vec::new();
        let mut group_rows = 0usize;
        let target_rows = self.block_rows;
        let Self { state, ws, rng, .. } = self;
        let mut sweep = |group: &mut Vec<Arc<MappedBlock>>| {
            let mut g = Group {
                state: &mut *state,
                ws: &mut *ws,
                rng: &mut *rng,
            };
            updates += g.solve(group, ctx.streamer, dcd, &mut loss_start, &w_start);
        };
        let rows_done = |r: u64| ctx.observer.rows_done(r);
        let resident = ctx
            .streamer
            .pass(ctx.source, &order, cache, &rows_done, &mut |mb| {
                ctx.check_stop()?;
                group.push(Arc::clone(mb));
                group_rows += mb.read_rows as usize;
                if group_rows >= target_rows {
                    sweep(&mut group);
                    group_rows = 0;
                }
                Ok(())
            })?;
        sweep(&mut group);
        let primal = 0.5 * w_start.dot(&w_start) + dcd.c * loss_start;
        let out = EpochOut {
            objective: objective(primal, dual_start),
            certified: w_start,
            final_ok: !first,
            updates,
            step: None,
            stalled: false,
        };
        Ok((out, resident))
    }

    fn weights(&self) -> &Array1<f64> {
        &self.state.w
    }

    fn dual_bound(&self, dcd: &DcdSettings) -> f64 {
        self.state.dual_value(dcd)
    }

    fn support_share(&self, rows_trained: u64) -> f64 {
        let nonzero = self.state.beta.iter().filter(|b| **b != 0.0).count() as f64;
        nonzero / rows_trained.max(1) as f64
    }
}

/// The parts of the state one group's sweeps change.
struct Group<'a> {
    state: &'a mut DcdState,
    ws: &'a mut BlockWorkspace,
    rng: &'a mut ChaCha8Rng,
}

impl Group<'_> {
    /// Runs the sweeps on one group of mapped blocks, after adding the group's primal loss
    /// at the start-of-epoch weights to `loss_start`; returns the updates made and
    /// empties the group.
    fn solve(
        &mut self,
        group: &mut Vec<Arc<MappedBlock>>,
        streamer: &Streamer,
        dcd: &DcdSettings,
        loss_start: &mut f64,
        w_start: &Array1<f64>,
    ) -> u64 {
        if group.is_empty() {
            return 0;
        }
        // The dual solver's stream is not lazy, so these borrow the mapped rows.
        let mapped: Vec<_> = group
            .iter()
            .map(|mb| mb.mapped(streamer.map, streamer.pool))
            .collect();
        for (mb, z) in group.iter().zip(&mapped) {
            *loss_start += loss_sum(w_start.view(), z.view(), mb.y.view(), dcd);
        }
        let (state, ws, rng) = (&mut *self.state, &mut *self.ws, &mut *self.rng);
        let st = if group.len() == 1 {
            let mb = &group[0];
            solve_block(state, mapped[0].view(), mb.y.view(), &mb.rows, dcd, rng, ws)
        } else {
            let zs: Vec<_> = mapped.iter().map(|z| z.view()).collect();
            let ys: Vec<_> = group.iter().map(|m| m.y.view()).collect();
            let z = ndarray::concatenate(Axis(0), &zs).expect("blocks share D");
            let y = ndarray::concatenate(Axis(0), &ys).expect("vectors");
            let rows: Vec<usize> = group.iter().flat_map(|m| m.rows.iter().copied()).collect();
            solve_block(state, z.view(), y.view(), &rows, dcd, rng, ws)
        };
        drop(mapped);
        group.clear();
        st.updates
    }
}
