//! Primal and dual objective values and the relative duality gap, the optimality
//! certificate of dual coordinate descent (Ho & Lin, JMLR 2012, §2).

use super::block::dot_row;
use super::{CompensatedSum, DcdSettings, DcdState, Loss};
use ndarray::{ArrayView1, ArrayView2};
use serde::{Deserialize, Serialize};

/// Primal value, dual value and relative duality gap (P − D)/|P| of one solver state.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Objective {
    /// P(w) = ½‖w‖² + C Σ ℓ(y_i − wᵀz_i).
    pub primal: f64,
    /// D(β) = −(½‖w‖² − yᵀβ + ε‖β‖₁ + (λ/2)‖β‖²); never above the primal (weak duality).
    pub dual: f64,
    /// (P − D)/|P|, or P − D when P = 0.
    pub gap: f64,
}

/// Primal loss accumulated over blocks during a pass with w fixed: add every block once,
/// then [`finish`](PrimalAccumulator::finish) gives the objective of the whole data.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct PrimalAccumulator {
    loss: CompensatedSum,
    rows: u64,
}

impl PrimalAccumulator {
    /// An empty accumulator.
    pub fn new() -> Self {
        Self::default()
    }

    /// Adds Σ ℓ(y_i − wᵀz_i) over one block, with `z` the block's features (no bias
    /// column) and `y` its targets in solver units.
    ///
    /// # Panics
    /// If `y` does not have one entry per row of `z`, or `state.w` does not have D + 1
    /// entries.
    #[track_caller]
    pub fn add_block(
        &mut self,
        state: &DcdState,
        z: ArrayView2<f64>,
        y: ArrayView1<f64>,
        settings: &DcdSettings,
    ) {
        let (n, d) = z.dim();
        assert_eq!(
            y.len(),
            n,
            "add_block: {n} feature rows but {} targets",
            y.len()
        );
        assert_eq!(
            state.w.len(),
            d + 1,
            "add_block: {d} features but the state has {} weights (expected D + 1)",
            state.w.len()
        );
        let w = state.w.as_slice().expect("weights are contiguous");
        let (w, bias) = w.split_at(d);
        let eps = settings.epsilon;
        for (zi, &yi) in z.rows().into_iter().zip(y.iter()) {
            let r = yi - (dot_row(w, zi) + bias[0]);
            let excess = (r.abs() - eps).max(0.0);
            let l = match settings.loss {
                Loss::L1 => excess,
                Loss::L2 => excess * excess,
            };
            self.loss.add(l);
        }
        self.rows += n as u64;
    }

    /// Rows added so far.
    pub fn rows(&self) -> u64 {
        self.rows
    }

    /// The primal value over all added rows, the state's dual value and their relative gap.
    pub fn finish(&self, state: &DcdState, settings: &DcdSettings) -> Objective {
        let primal = 0.5 * state.w.dot(&state.w) + settings.c * self.loss.value();
        let dual = state.dual_value(settings);
        let gap = if primal != 0.0 {
            (primal - dual) / primal.abs()
        } else {
            primal - dual
        };
        Objective { primal, dual, gap }
    }
}
