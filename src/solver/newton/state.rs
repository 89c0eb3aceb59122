//! The driver's side of the Newton method: the iterate between passes, and the step a
//! pass's statistics support (line search, certificate, sampled Newton matrix, next
//! direction and leverage sketch).

use ndarray::{Array1, Array2};

use super::hessian::{leverage, newton_direction, newton_matrix, Lever};
use super::pass::empty_gram;
use super::stats::{PassStats, Plan, Sample, Sums};
use super::{ARMIJO, GRID, HESSIAN_DECAY, STEPS};
use crate::error::{Error, Result};
use crate::solver::dcd::Objective;

/// The iterate between passes: weights, the pending direction and what is known at w.
///
/// The driver of a fit keeps one: [`NewtonState::accumulator`] opens each pass's
/// statistics, the rows are added (here or elsewhere, then merged), and
/// [`NewtonState::step`] takes the step they support.
#[derive(Clone, Debug)]
pub struct NewtonState {
    /// Weights, D + 1 entries (the last the bias), in solver units (standardized target,
    /// C and epsilon as given to [`NewtonState::accumulator`]).
    pub w: Array1<f64>,
    pub(super) dir: Option<Array1<f64>>,
    /// P(w), known once a pass certified w.
    pub(super) f0: f64,
    /// gᵀd at w.
    pub(super) slope: f64,
    /// The best dual value met so far (a lower bound on the optimum).
    pub(super) dual: f64,
    /// Sum of the weighted sampled Gram matrices of the passes so far (upper triangle),
    /// earlier passes decayed by `HESSIAN_DECAY` per pass, when the Hessian is sampled.
    pub(super) hess_sum: Option<Array2<f64>>,
    /// Σ HESSIAN_DECAY^j over the passes summed in `hess_sum`.
    pub(super) hess_weight: f64,
    /// Passes gathered so far (salts each pass's sample).
    pub(super) passes: u64,
    /// Leverage estimates for the next pass's Hessian sample.
    pub(super) lever: Option<Lever>,
}

/// What a pass decided.
#[derive(Clone, Debug, PartialEq)]
pub enum Step {
    /// w moved to a certified point.
    Certified {
        /// The certificate of the new w.
        objective: Objective,
        /// The share of training rows outside the tube there.
        support_share: f64,
        /// The step taken along the direction.
        step: f64,
    },
    /// w moved along the grid without a gradient (the next pass gathers one).
    Moved {
        /// The step taken along the direction.
        step: f64,
        /// The exact new primal value with the last dual value, a valid lower bound.
        bound: Objective,
    },
    /// No step lowers the objective: optimal to working precision; w is unchanged.
    Stalled {
        /// The certificate of w.
        objective: Objective,
    },
}

impl NewtonState {
    /// Zero weights for `features` mapped features.
    pub fn new(features: usize) -> Self {
        NewtonState {
            w: Array1::zeros(features + 1),
            dir: None,
            f0: f64::NAN,
            slope: 0.0,
            dual: 0.0,
            hess_sum: None,
            hess_weight: 0.0,
            passes: 0,
            lever: None,
        }
    }

    /// A start at `w` (D + 1 entries) with no direction yet (a warm start).
    pub fn starting_at(w: Array1<f64>) -> Self {
        NewtonState {
            w,
            ..NewtonState::new(0)
        }
    }

    /// Empty statistics for the next pass with the problem's `c` and `epsilon` (solver
    /// units), the share of rows the Hessian's sample should hold (1: every row outside
    /// the tube, the exact Hessian) and the sample's seed.
    pub fn accumulator(&self, c: f64, epsilon: f64, share: f64, sample_seed: u64) -> PassStats {
        let dim = self.w.len() - 1;
        let (steps, grid) = match self.dir {
            Some(_) => (
                STEPS.to_vec(),
                (0..GRID).map(|j| (-(j as f64) / 2.0).exp2()).collect(),
            ),
            None => (vec![0.0], Vec::new()),
        };
        let sums = Sums::zeros(steps.len(), grid.len(), dim);
        PassStats {
            plan: Plan {
                dim,
                c,
                epsilon,
                w: self.w.clone(),
                dir: self.dir.clone(),
                steps,
                grid,
                share,
                lever: self.lever.clone(),
                sample_seed: sample_seed ^ self.passes.wrapping_mul(0x9E37_79B9_7F4A_7C15),
                inputs: None,
            },
            sums,
            sample: Sample::Gram(empty_gram(dim)),
        }
    }

    /// Takes the step the pass supports and computes the next direction.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if `stats` belong to a pass opened at another iterate;
    /// [`Error::Numerical`] if the Newton system cannot be factorized (it is positive
    /// definite in exact arithmetic, so this means non-finite data reached the solver).
    ///
    /// # Panics
    /// If the sample is kept as input rows and was not mapped
    /// ([`PassStats::map_sample`]).
    #[track_caller]
    pub fn step(&mut self, stats: PassStats) -> Result<Step> {
        let PassStats {
            plan: acc,
            sums,
            sample,
        } = stats;
        let Sample::Gram(hess) = sample else {
            panic!("step: the sample of input rows must be mapped first (map_sample)");
        };
        if acc.w != self.w || acc.dir != self.dir {
            return Err(Error::invalid(
                "pass statistics",
                "the statistics belong to a pass opened at another Newton iterate",
            ));
        }
        self.passes += 1;
        let c = acc.c;
        let along = |t: f64| -> Array1<f64> {
            match &acc.dir {
                Some(d) => &acc.w + &(d * t),
                None => acc.w.clone(),
            }
        };
        let value = |t: f64, loss: f64| {
            let v = along(t);
            0.5 * v.dot(&v) + c * loss
        };
        let chosen = match acc.dir {
            None => Some(0),
            Some(_) => (0..acc.steps.len()).find(|&k| {
                let t = acc.steps[k];
                value(t, sums.loss[k].value()) <= self.f0 + ARMIJO * t * self.slope
            }),
        };
        let Some(k) = chosen else {
            let best = (0..acc.grid.len())
                .map(|j| (value(acc.grid[j], sums.grid_loss[j].value()), acc.grid[j]))
                .fold((f64::INFINITY, 0.0), |a, b| if b.0 < a.0 { b } else { a });
            if best.0 < self.f0 {
                self.w = along(best.1);
                self.dir = None;
                self.f0 = best.0;
                return Ok(Step::Moved {
                    step: best.1,
                    bound: certificate(self.f0, self.dual),
                });
            }
            return Ok(Step::Stalled {
                objective: certificate(self.f0, self.dual),
            });
        };
        let t = acc.steps[k];
        let w = along(t);
        let primal = value(t, sums.loss[k].value());
        let g_sum = sums.grad.row(k).to_owned();
        let dual = -(0.5 * g_sum.dot(&g_sum) - sums.y_beta[k].value()
            + acc.epsilon * sums.beta_l1[k].value()
            + sums.beta_sq[k].value() / (4.0 * c));
        self.dual = self.dual.max(dual).max(scaled_dual(
            g_sum.dot(&g_sum),
            sums.y_beta[k].value() - acc.epsilon * sums.beta_l1[k].value(),
            sums.beta_sq[k].value() / (2.0 * c),
        ));
        let objective = certificate(primal, self.dual);
        let grad = &w - &g_sum;
        let sampled = acc.share < 1.0;
        let (hess, scale) = if sampled {
            let sum = match self.hess_sum.take() {
                Some(s) => s * HESSIAN_DECAY + &hess,
                None => hess,
            };
            self.hess_weight = self.hess_weight * HESSIAN_DECAY + 1.0;
            self.hess_sum = Some(sum.clone());
            (sum, 2.0 * c / self.hess_weight)
        } else {
            (hess, 2.0 * c)
        };
        let factor = newton_matrix(hess, scale)?;
        let dir = newton_direction(&factor, &grad)?;
        self.lever = if sampled {
            let target = acc.share * sums.rows as f64;
            leverage(&factor, target, acc.sample_seed)
        } else {
            None
        };
        self.slope = grad.dot(&dir);
        self.dir = Some(dir);
        self.f0 = primal;
        self.w = w;
        Ok(Step::Certified {
            objective,
            support_share: sums.active[k] as f64 / sums.rows.max(1) as f64,
            step: t,
        })
    }
}

/// The best dual value along the ray s·β, s ≥ 0: with a = ‖Σβ_i ẑ_i‖², b = yᵀβ − ε‖β‖₁
/// and q = ‖β‖²/(2C), D(sβ) = s·b − ½s²(a + q), which peaks at s = b/(a + q) with value
/// b²/(2(a + q)) (0 when b ≤ 0). Rescaling the duals this way turns β(w) of a point still
/// far from the optimum into a useful lower bound (a standard dual scaling, as used for
/// duality-gap stopping rules in first-order solvers).
fn scaled_dual(a: f64, b: f64, q: f64) -> f64 {
    if b > 0.0 && a + q > 0.0 {
        0.5 * b * b / (a + q)
    } else {
        0.0
    }
}

fn certificate(primal: f64, dual: f64) -> Objective {
    Objective {
        primal,
        dual,
        gap: (primal - dual) / primal.abs().max(f64::MIN_POSITIVE),
    }
}
