//! The statistics of one barrier pass: what it is computed for (weights, direction,
//! barrier weights, steps) and what its rows add (φ_μ on the step grid, gradient sums and
//! dual terms at the candidate steps, the unsmoothed loss, the Hessian). A block is
//! summed in fixed chunks of rows, merged in order, so results do not depend on threads.

use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, Axis, Zip};
use rayon::prelude::*;

use super::{row, CHUNK};
use crate::solver::dcd::CompensatedSum;
use crate::solver::newton::add_gram_upper;

/// What a pass is computed for, fixed by the driver.
#[derive(Clone, Debug, PartialEq)]
pub(super) struct Plan {
    pub dim: usize,
    pub c: f64,
    pub epsilon: f64,
    /// Barrier weight of the line search along `dir`.
    pub mu: f64,
    /// Barrier weight of the gradient and Hessian gathered for the next direction.
    pub mu_next: f64,
    pub w: Array1<f64>,
    pub dir: Option<Array1<f64>>,
    /// Candidate steps with a gradient (`[0]` without a direction).
    pub steps: Vec<f64>,
    /// Index into `steps` of the point the Hessian is formed at.
    pub hess_at: usize,
    /// Fine grid of steps with φ_μ only.
    pub grid: Vec<f64>,
}

/// Sums over the rows of a pass, per candidate step `k` and grid step `j`.
#[derive(Clone, Debug, Default, PartialEq)]
pub(super) struct Sums {
    /// Σ β_i ẑ_i at μ_next, steps × (D + 1).
    pub grad: Array2<f64>,
    /// Σ max(0, |r| − ε) (unsmoothed loss).
    pub loss: Vec<CompensatedSum>,
    /// Σ barrier row terms at μ (line search) and at μ_next (the next f0).
    pub phi: Vec<CompensatedSum>,
    pub phi_next: Vec<CompensatedSum>,
    /// yᵀβ, ‖β‖₁ and max |β| at μ_next.
    pub y_beta: Vec<CompensatedSum>,
    pub beta_l1: Vec<CompensatedSum>,
    pub beta_max: Vec<f64>,
    /// Rows outside the tube.
    pub active: Vec<u64>,
    /// yᵀβ̂ and ‖β̂‖₁ of the Newton-predicted duals at the full step (see `chunk`);
    /// Σ β̂_i ẑ_i is the last row of `grad`.
    pub hat_y: CompensatedSum,
    pub hat_l1: CompensatedSum,
    pub hat_max: f64,
    /// Σ barrier row terms at μ per grid step.
    pub grid_phi: Vec<CompensatedSum>,
    pub rows: u64,
}

impl Sums {
    fn zeros(steps: usize, grid: usize, dim: usize) -> Self {
        let z = vec![CompensatedSum::default(); steps];
        Sums {
            grad: Array2::zeros((steps + 1, dim + 1)),
            loss: z.clone(),
            phi: z.clone(),
            phi_next: z.clone(),
            y_beta: z.clone(),
            beta_l1: z,
            beta_max: vec![0.0; steps],
            active: vec![0; steps],
            hat_y: CompensatedSum::default(),
            hat_l1: CompensatedSum::default(),
            hat_max: 0.0,
            grid_phi: vec![CompensatedSum::default(); grid],
            rows: 0,
        }
    }

    fn merge(&mut self, o: &Sums) {
        self.grad += &o.grad;
        for (a, b) in [
            (&mut self.loss, &o.loss),
            (&mut self.phi, &o.phi),
            (&mut self.phi_next, &o.phi_next),
            (&mut self.y_beta, &o.y_beta),
            (&mut self.beta_l1, &o.beta_l1),
            (&mut self.grid_phi, &o.grid_phi),
        ] {
            for (x, y) in a.iter_mut().zip(b) {
                x.add(y.value());
            }
        }
        self.hat_y.add(o.hat_y.value());
        self.hat_l1.add(o.hat_l1.value());
        self.hat_max = self.hat_max.max(o.hat_max);
        for (a, b) in self.beta_max.iter_mut().zip(&o.beta_max) {
            *a = a.max(*b);
        }
        for (a, b) in self.active.iter_mut().zip(&o.active) {
            *a += b;
        }
        self.rows += o.rows;
    }
}

/// The statistics of one barrier pass: opened by
/// [`BarrierState::accumulator`](super::BarrierState::accumulator), fed block by block
/// with [`BarrierPass::add_block`] in a fixed order, consumed by
/// [`BarrierState::step`](super::BarrierState::step).
#[derive(Clone, Debug, PartialEq)]
pub struct BarrierPass {
    pub(super) plan: Plan,
    pub(super) sums: Sums,
    /// Σ θ_i ẑ_i ẑ_iᵀ at the Hessian's step (upper triangle).
    pub(super) hess: Array2<f64>,
}

impl BarrierPass {
    pub(super) fn new(plan: Plan) -> Self {
        let d = plan.dim;
        BarrierPass {
            sums: Sums::zeros(plan.steps.len(), plan.grid.len(), d),
            hess: Array2::zeros((d + 1, d + 1)),
            plan,
        }
    }

    /// Training rows added so far.
    pub fn rows(&self) -> u64 {
        self.sums.rows
    }

    /// Adds one block of mapped rows `z` (rows × D, without the constant) with targets
    /// `y` (standardized units), on `pool` or the current rayon pool.
    ///
    /// # Panics
    /// If `z` does not have the pass's D columns or `y` one entry a row.
    #[track_caller]
    pub fn add_block(
        &mut self,
        pool: Option<&rayon::ThreadPool>,
        z: ArrayView2<f64>,
        y: ArrayView1<f64>,
    ) {
        let d = self.plan.dim;
        assert_eq!(z.ncols(), d, "add_block: feature columns");
        assert_eq!(z.nrows(), y.len(), "add_block: one target a row");
        let n = z.nrows();
        let mut scaled = Array2::<f64>::zeros((n, d + 1));
        let plan = &self.plan;
        let mut run = || {
            scaled
                .axis_chunks_iter_mut(Axis(0), CHUNK)
                .into_par_iter()
                .enumerate()
                .map(|(k, a)| {
                    let lo = k * CHUNK;
                    let hi = (lo + CHUNK).min(n);
                    chunk(plan, z.slice(s![lo..hi, ..]), y.slice(s![lo..hi]), a)
                })
                .collect::<Vec<Sums>>()
        };
        let parts = match pool {
            Some(p) => p.install(run),
            None => run(),
        };
        for p in &parts {
            self.sums.merge(p);
        }
        add_gram_upper(pool, &mut self.hess, scaled.view());
    }
}

/// One chunk: every row's residuals along the line, its terms at each step, and its
/// Hessian row √θ·ẑ written into `a`. Besides the barrier duals β(w + t·d), each row
/// gives the dual the Newton step predicts, β̂_i = β_i(w) − θ_i(w)·ẑ_iᵀd clipped to
/// [−C, C] (the linearized dual update of primal-dual interior-point methods): with
/// the exact Hessian Σ β̂_i ẑ_i = w + d before clipping, so its dual value does not lag
/// behind the primal where the barrier duals' stationarity error ½‖∇φ‖² would.
fn chunk(
    plan: &Plan,
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    mut a: ndarray::ArrayViewMut2<f64>,
) -> Sums {
    let d = plan.dim;
    let mut sums = Sums::zeros(plan.steps.len(), plan.grid.len(), d);
    let (c, eps) = (plan.c, plan.epsilon);
    let fw = z.dot(&plan.w.slice(s![..d])) + plan.w[d];
    let fd = match &plan.dir {
        Some(dir) => z.dot(&dir.slice(s![..d])) + dir[d],
        None => Array1::zeros(z.nrows()),
    };
    let nsteps = plan.steps.len();
    let mut betas = Array2::<f64>::zeros((z.nrows(), nsteps + 1));
    for i in 0..z.nrows() {
        let r0 = y[i] - fw[i];
        let (_, b0, t0) = row(r0, eps, c, plan.mu);
        let hat = (b0 - t0 * fd[i]).clamp(-c, c);
        sums.hat_y.add(y[i] * hat);
        sums.hat_l1.add(hat.abs());
        sums.hat_max = sums.hat_max.max(hat.abs());
        betas[[i, nsteps]] = hat;
        for (j, &t) in plan.grid.iter().enumerate() {
            sums.grid_phi[j].add(row(r0 - t * fd[i], eps, c, plan.mu).0);
        }
        for (k, &t) in plan.steps.iter().enumerate() {
            let r = r0 - t * fd[i];
            let e = r.abs() - eps;
            if e > 0.0 {
                sums.loss[k].add(e);
                sums.active[k] += 1;
            }
            if plan.dir.is_some() {
                sums.phi[k].add(row(r, eps, c, plan.mu).0);
            }
            let (v, beta, theta) = row(r, eps, c, plan.mu_next);
            sums.phi_next[k].add(v);
            sums.y_beta[k].add(y[i] * beta);
            sums.beta_l1[k].add(beta.abs());
            sums.beta_max[k] = sums.beta_max[k].max(beta.abs());
            betas[[i, k]] = beta;
            if k == plan.hess_at {
                let root = theta.sqrt();
                let mut ai = a.row_mut(i);
                Zip::from(ai.slice_mut(s![..d]))
                    .and(z.row(i))
                    .for_each(|o, &v| *o = root * v);
                ai[d] = root;
            }
        }
    }
    // Σ_i β_ik ẑ_i for every step at once.
    let g = betas.t().dot(&z);
    sums.grad.slice_mut(s![.., ..d]).assign(&g);
    for (k, col) in betas.axis_iter(Axis(1)).enumerate() {
        sums.grad[[k, d]] = col.sum();
    }
    sums.rows = z.nrows() as u64;
    sums
}
