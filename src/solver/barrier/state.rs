//! The driver's side of the barrier method: the iterate between passes and the step a
//! pass's statistics support (Armijo line search on φ_μ, the unsmoothed certificate, the
//! Newton direction at the next barrier weight and the next μ).

use ndarray::Array1;

use super::pass::{BarrierPass, Plan};
use super::{ARMIJO, CENTRED, GRID, SHRINK, STEPS};
use crate::error::{Error, Result};
use crate::solver::dcd::Objective;
use crate::solver::newton::{newton_direction, newton_matrix, Step};

/// Starting barrier weight per unit of C: smoothing over about a tenth of the
/// standardized target's spread.
pub const MU_START: f64 = 0.1;

/// The iterate between passes.
#[derive(Clone, Debug)]
pub struct BarrierState {
    /// Weights, D + 1 entries (the last the bias), in solver units.
    pub w: Array1<f64>,
    dir: Option<Array1<f64>>,
    /// Barrier weight of the current direction (φ_μ is line-searched).
    pub mu: f64,
    /// Barrier weight the next direction is computed for.
    mu_next: f64,
    /// φ_μ(w).
    f0: f64,
    /// ∇φ_μ(w)ᵀd.
    slope: f64,
    /// Newton decrement λ² = −∇φ_μ(w)ᵀd/μ of the current direction.
    pub decrement: f64,
    /// Best dual value met so far (a lower bound on the optimum).
    dual: f64,
    /// The last certificate (of the weights before a grid move).
    last: Objective,
    c: f64,
    epsilon: f64,
}

impl BarrierState {
    /// Zero weights for `features` mapped features, for the problem with `c` and
    /// `epsilon` (solver units).
    pub fn new(features: usize, c: f64, epsilon: f64) -> Self {
        BarrierState {
            w: Array1::zeros(features + 1),
            dir: None,
            mu: c * MU_START,
            mu_next: c * MU_START,
            f0: f64::NAN,
            slope: 0.0,
            decrement: f64::INFINITY,
            dual: 0.0,
            last: certificate(f64::INFINITY, 0.0),
            c,
            epsilon,
        }
    }

    /// The best dual value certified so far (a lower bound on the optimum).
    pub fn dual(&self) -> f64 {
        self.dual
    }

    /// Empty statistics for the next pass.
    pub fn accumulator(&self) -> BarrierPass {
        let dim = self.w.len() - 1;
        let (steps, grid, hess_at) = match self.dir {
            Some(_) => {
                // The Hessian is formed where the step is expected to land: the full step
                // near the central path, the damped step 1/(1 + λ) of self-concordant
                // Newton (Nesterov & Nemirovskii 1994) far from it.
                let damped = 1.0 / (1.0 + self.decrement.sqrt());
                let hess_at = if self.decrement <= CENTRED {
                    0
                } else {
                    STEPS
                        .iter()
                        .position(|&t| t <= damped * 1.5)
                        .unwrap_or(STEPS.len() - 1)
                };
                (
                    STEPS.to_vec(),
                    (0..GRID).map(|j| (-(j as f64) / 2.0).exp2()).collect(),
                    hess_at,
                )
            }
            None => (vec![0.0], Vec::new(), 0),
        };
        BarrierPass::new(Plan {
            dim,
            c: self.c,
            epsilon: self.epsilon,
            mu: self.mu,
            mu_next: self.mu_next,
            w: self.w.clone(),
            dir: self.dir.clone(),
            steps,
            hess_at,
            grid,
        })
    }

    /// Takes the step the pass supports and computes the next direction.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if `pass` was opened at another iterate;
    /// [`Error::Numerical`] if the Newton system cannot be factorized.
    pub fn step(&mut self, pass: BarrierPass) -> Result<Step> {
        let BarrierPass { plan, sums, hess } = pass;
        if plan.w != self.w || plan.dir != self.dir || plan.mu != self.mu {
            return Err(Error::invalid(
                "pass statistics",
                "the statistics belong to a pass opened at another iterate",
            ));
        }
        let along = |t: f64| -> Array1<f64> {
            match &plan.dir {
                Some(d) => &plan.w + &(d * t),
                None => plan.w.clone(),
            }
        };
        let value = |t: f64, phi: f64| {
            let v = along(t);
            0.5 * v.dot(&v) + phi
        };
        let chosen = match plan.dir {
            None => Some(0),
            Some(_) => (0..plan.steps.len()).find(|&k| {
                let t = plan.steps[k];
                value(t, sums.phi[k].value()) <= self.f0 + ARMIJO * t * self.slope
            }),
        };
        let Some(k) = chosen else {
            let best = (0..plan.grid.len())
                .map(|j| (value(plan.grid[j], sums.grid_phi[j].value()), plan.grid[j]))
                .fold((f64::INFINITY, 0.0), |a, b| if b.0 < a.0 { b } else { a });
            if best.0 < self.f0 {
                self.w = along(best.1);
                self.dir = None;
                self.f0 = best.0;
                self.mu_next = self.mu;
                return Ok(Step::Moved {
                    step: best.1,
                    bound: self.last,
                });
            }
            return Ok(Step::Stalled {
                objective: self.last,
            });
        };
        let t = plan.steps[k];
        let w = along(t);
        let primal = 0.5 * w.dot(&w) + plan.c * sums.loss[k].value();
        let u = sums.grad.row(k).to_owned();
        let a = u.dot(&u);
        let b = sums.y_beta[k].value() - plan.epsilon * sums.beta_l1[k].value();
        let cap = plan.c / sums.beta_max[k].max(f64::MIN_POSITIVE);
        self.dual = self.dual.max(scaled_dual(a, b, cap));
        let hat = sums.grad.row(plan.steps.len());
        self.dual = self.dual.max(scaled_dual(
            hat.dot(&hat),
            sums.hat_y.value() - plan.epsilon * sums.hat_l1.value(),
            plan.c / sums.hat_max.max(f64::MIN_POSITIVE),
        ));
        let objective = certificate(primal, self.dual);
        self.last = objective;
        let grad = &w - &u;
        let factor = newton_matrix(hess, 1.0)?;
        let dir = newton_direction(&factor, &grad)?;
        self.slope = grad.dot(&dir);
        self.f0 = 0.5 * w.dot(&w) + sums.phi_next[k].value();
        self.mu = plan.mu_next;
        self.decrement = -self.slope / self.mu;
        self.mu_next = if self.decrement <= CENTRED {
            self.mu / SHRINK
        } else {
            self.mu
        };
        self.dir = Some(dir);
        self.w = w;
        Ok(Step::Certified {
            objective,
            support_share: sums.active[k] as f64 / sums.rows.max(1) as f64,
            step: t,
        })
    }
}

/// The best dual value D(sβ) = s·b − ½s²a over multiples s ∈ [0, cap] of a box-feasible
/// β (cap = C / max|β_i| keeps |sβ_i| ≤ C; s = 1 is β itself), with a = ‖Σβ_i ẑ_i‖²
/// and b = yᵀβ − ε‖β‖₁ (a standard dual scaling for duality-gap stopping rules).
fn scaled_dual(a: f64, b: f64, cap: f64) -> f64 {
    let s = if a > 0.0 {
        (b / a).clamp(0.0, cap)
    } else {
        0.0
    };
    let best = s * b - 0.5 * s * s * a;
    best.max(if cap >= 1.0 {
        b - 0.5 * a
    } else {
        f64::NEG_INFINITY
    })
}

fn certificate(primal: f64, dual: f64) -> Objective {
    Objective {
        primal,
        dual,
        gap: (primal - dual) / primal.abs().max(f64::MIN_POSITIVE),
    }
}
