//! What the epoch loop asks of a solver: one [`Strategy`] per solver, the context a
//! pass runs in, and what an epoch reports back.

use ndarray::Array1;

use super::TrainObserver;
use crate::error::{Error, Result};
use crate::solver::cache::PassCache;
use crate::solver::dcd::{DcdSettings, Objective};
use crate::solver::source::BlockSource;
use crate::solver::stream::Streamer;

/// What one epoch of a solver produced.
pub(super) struct EpochOut {
    pub objective: Objective,
    /// The weights `objective` certifies.
    pub certified: Array1<f64>,
    /// Whether `objective` may stop the run.
    pub final_ok: bool,
    pub updates: u64,
    pub step: Option<f64>,
    pub stalled: bool,
}

/// What a solver's epoch may use.
pub(super) struct PassContext<'a> {
    pub streamer: &'a Streamer<'a>,
    pub source: &'a dyn BlockSource,
    pub observer: &'a dyn TrainObserver,
    /// Solver settings in standardized target units.
    pub dcd: &'a DcdSettings,
    pub pool: &'a rayon::ThreadPool,
}

impl PassContext<'_> {
    /// Every unit, in order.
    pub fn all_units(&self) -> Vec<usize> {
        (0..self.source.units()).collect()
    }

    /// Fails with [`Error::Interrupted`] when the person asked to stop.
    pub fn check_stop(&self) -> Result<()> {
        if self.observer.should_stop() {
            Err(Error::Interrupted)
        } else {
            Ok(())
        }
    }
}

/// One solver behind the epoch loop: a third solver is one more implementation.
pub(super) trait Strategy {
    /// One pass over the data; returns the epoch's figures and the blocks served from
    /// memory.
    fn epoch(&mut self, ctx: &PassContext, cache: &mut PassCache) -> Result<(EpochOut, usize)>;
    /// The current weights in solver units (D + 1 entries, the last the bias).
    fn weights(&self) -> &Array1<f64>;
    /// A dual value that bounds the optimum, for certifying weights the solver did not
    /// end on (a holdout stop).
    fn dual_bound(&self, dcd: &DcdSettings) -> f64;
    /// Share of the training rows that are support vectors.
    fn support_share(&self, rows_trained: u64) -> f64;
}
