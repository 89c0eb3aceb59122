//! Linear epsilon-SVR with the squared epsilon-insensitive loss by a primal Newton method
//! in the explicit feature space, one pass over the data per iteration.
//!
//! The primal (bias appended as a constant feature, ẑ_i = [z_i, 1]) is
//!
//! ```text
//! P(w) = ½‖w‖² + C Σ_i max(0, |y_i − wᵀẑ_i| − ε)²,
//! ```
//!
//! once differentiable and piecewise quadratic. Its gradient is g = w − Σ β_i ẑ_i with
//! β_i = 2C·(excess of the residual r_i over the tube, signed), and its generalized
//! Hessian H = I + 2C Σ_{|r_i| > ε} ẑ_i ẑ_iᵀ (Mangasarian, "A finite Newton method for
//! classification", Optim. Methods Softw. 2002; Keerthi & DeCoste, "A modified finite
//! Newton method for fast solution of large scale linear SVMs", JMLR 2005; Ho & Lin,
//! JMLR 2012, §2.2 treat this loss for regression with a trust-region Newton method).
//! Each Newton direction solves H d = −g by a Cholesky factorization of the
//! (D + 1) × (D + 1) matrix.
//!
//! Passes over data larger than memory are what cost, so each pass does three jobs at
//! once. With w and the last direction d fixed, it accumulates
//! * the objective along the line w + t·d on a fine grid of steps (a few scalar
//!   operations a row), for the line search;
//! * for the candidate steps t ∈ {1, ½, ¼}: the gradient sum Σ β_i ẑ_i, and the dual
//!   terms yᵀβ, ‖β‖₁, ‖β‖² that give a duality-gap certificate for w + t·d;
//! * the Hessian at t = 1 from a fixed hash-chosen sample of rows (sub-sampled Newton:
//!   Byrd, Chin, Neveitt & Nocedal, SIAM J. Optim. 2011; Roosta-Khorasani & Mahoney,
//!   Math. Program. 2019), scaled by the inverse sampling share. Without sampling (few
//!   rows) the step is the exact generalized Newton step, which ends in finitely many
//!   iterations.
//!
//! The largest candidate meeting the Armijo condition becomes the new w, certified with
//! the dual point β(w) (the squared loss's duals are unconstrained, so any β is feasible:
//! D(β) = −(½‖Σβ_i ẑ_i‖² − yᵀβ + ε‖β‖₁ + ‖β‖²/(4C)) ≤ P(w) for every w). When none
//! qualifies the best step of the fine grid is taken and the next pass only gathers the
//! gradient there; when no step lowers P at all the weights are optimal to working
//! precision.

mod fit;
mod pass;

pub use fit::fit;
pub(crate) use pass::{LineAccumulator, SAMPLE_SALT};

use ndarray::{Array1, Array2};
use ndarray_linalg::{FactorizeC, SolveC, UPLO};

use crate::error::{Error, Result};
use crate::solver::dcd::{CompensatedSum, Objective};

/// Candidate steps whose gradient is gathered in a pass, largest first.
pub(crate) const STEPS: [f64; 3] = [1.0, 0.5, 0.25];
/// Sufficient decrease of the Armijo rule.
const ARMIJO: f64 = 1e-4;
/// Fine grid of steps 2^(−j/2), j = 0..GRID, for the fallback line search.
const GRID: usize = 48;

/// The iterate between passes: weights, the pending direction and what is known at w.
#[derive(Clone, Debug)]
pub(crate) struct NewtonState {
    /// Weights, D + 1 entries (the last the bias), in solver units.
    pub w: Array1<f64>,
    dir: Option<Array1<f64>>,
    /// P(w), known once a pass certified w.
    f0: f64,
    /// gᵀd at w.
    slope: f64,
    /// The best dual value met so far (a lower bound on the optimum).
    dual: f64,
    /// Sum of the sampled Gram matrices of the passes so far (upper triangle), when the
    /// Hessian is sampled; each pass draws a new sample, so their average converges to
    /// the whole data's curvature while the active set settles.
    hess_sum: Option<Array2<f64>>,
    /// Passes summed in `hess_sum`.
    hess_passes: usize,
    /// Passes gathered so far (salts each pass's sample).
    passes: u64,
}

/// What a pass decided.
#[derive(Clone, Debug)]
pub(crate) enum Step {
    /// w moved to a certified point; the figures are its certificate and the share of
    /// training rows outside the tube there.
    Certified {
        objective: Objective,
        support_share: f64,
        step: f64,
    },
    /// w moved along the grid without a gradient (the next pass gathers one); `bound`
    /// pairs the exact new primal value with the last dual value, a valid lower bound.
    Moved { step: f64, bound: Objective },
    /// No step lowers the objective: optimal to working precision; w is unchanged and
    /// `objective` is its certificate.
    Stalled { objective: Objective },
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
            hess_passes: 0,
            passes: 0,
        }
    }

    /// A start at `w` (D + 1 entries) with no direction yet (a warm start).
    pub fn starting_at(w: Array1<f64>) -> Self {
        NewtonState {
            w,
            ..NewtonState::new(0)
        }
    }

    /// An accumulator for the next pass.
    pub fn accumulator(
        &self,
        c: f64,
        epsilon: f64,
        share: f64,
        sample_seed: u64,
    ) -> LineAccumulator {
        let dim = self.w.len() - 1;
        let (steps, grid) = match self.dir {
            Some(_) => (
                STEPS.to_vec(),
                (0..GRID).map(|j| (-(j as f64) / 2.0).exp2()).collect(),
            ),
            None => (vec![0.0], Vec::new()),
        };
        let m = steps.len();
        LineAccumulator {
            dim,
            c,
            epsilon,
            w: self.w.clone(),
            dir: self.dir.clone(),
            grad: Array2::zeros((dim + 1, m)),
            loss: vec![CompensatedSum::default(); m],
            y_beta: vec![CompensatedSum::default(); m],
            beta_l1: vec![CompensatedSum::default(); m],
            beta_sq: vec![CompensatedSum::default(); m],
            active: vec![0; m],
            grid_loss: vec![CompensatedSum::default(); grid.len()],
            steps,
            grid,
            hess: Array2::zeros((dim + 1, dim + 1)),
            share,
            sample_seed: sample_seed ^ self.passes.wrapping_mul(0x9E37_79B9_7F4A_7C15),
            rows: 0,
        }
    }

    /// Takes the step the pass supports and computes the next direction.
    ///
    /// # Errors
    /// [`Error::Numerical`] if the Newton system cannot be factorized (it is positive
    /// definite in exact arithmetic, so this means non-finite data reached the solver).
    pub fn step(&mut self, acc: LineAccumulator) -> Result<Step> {
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
                value(t, acc.loss[k].value()) <= self.f0 + ARMIJO * t * self.slope
            }),
        };
        let Some(k) = chosen else {
            let best = (0..acc.grid.len())
                .map(|j| (value(acc.grid[j], acc.grid_loss[j].value()), acc.grid[j]))
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
        let primal = value(t, acc.loss[k].value());
        let g_sum = acc.grad.column(k).to_owned();
        let dual = -(0.5 * g_sum.dot(&g_sum) - acc.y_beta[k].value()
            + acc.epsilon * acc.beta_l1[k].value()
            + acc.beta_sq[k].value() / (4.0 * c));
        self.dual = self.dual.max(dual).max(scaled_dual(
            g_sum.dot(&g_sum),
            acc.y_beta[k].value() - acc.epsilon * acc.beta_l1[k].value(),
            acc.beta_sq[k].value() / (2.0 * c),
        ));
        let objective = certificate(primal, self.dual);
        let grad = &w - &g_sum;
        let (hess, scale) = if acc.share >= 1.0 {
            (acc.hess, 2.0 * c)
        } else {
            let sum = match self.hess_sum.take() {
                Some(s) => s + &acc.hess,
                None => acc.hess,
            };
            self.hess_passes += 1;
            let scale = 2.0 * c / (acc.share * self.hess_passes as f64);
            self.hess_sum = Some(sum.clone());
            (sum, scale)
        };
        let dir = newton_direction(hess, scale, &grad)?;
        self.slope = grad.dot(&dir);
        self.dir = Some(dir);
        self.f0 = primal;
        self.w = w;
        Ok(Step::Certified {
            objective,
            support_share: acc.active[k] as f64 / acc.rows.max(1) as f64,
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

/// Solves (I + scale·S) d = −g by Cholesky, reading S from its upper triangle only.
fn newton_direction(mut s: Array2<f64>, scale: f64, g: &Array1<f64>) -> Result<Array1<f64>> {
    let n = s.nrows();
    for j in 0..n {
        for i in 0..j {
            s[[i, j]] *= scale;
        }
        s[[j, j]] = 1.0 + scale * s[[j, j]];
    }
    let factor = s
        .factorizec(UPLO::Upper)
        .map_err(|e| Error::Numerical(format!("the Newton system could not be factorized: {e}")))?;
    let rhs = g.mapv(|v| -v);
    let d = factor
        .solvec(&rhs)
        .map_err(|e| Error::Numerical(format!("the Newton system could not be solved: {e}")))?;
    if d.iter().any(|v| !v.is_finite()) {
        return Err(Error::Numerical(
            "the Newton direction is not finite".to_string(),
        ));
    }
    Ok(d)
}
