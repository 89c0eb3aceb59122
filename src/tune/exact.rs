//! The squared-loss epsilon-SVR on a Gram matrix, solved exactly by primal Newton in the
//! span of the training rows (Chapelle, "Training a support vector machine in the
//! primal", Neural Computation 19, 2007, §3–4).
//!
//! With ẑ_i = [z_i, 1] (the bias as a constant, regularised feature, as in kernlake's
//! linear solvers) and Q = K + 1 the Gram matrix of the ẑ_i, the problem
//!
//! `min_w ½‖w‖² + C Σ_i max(0, |y_i − wᵀẑ_i| − ε)²`
//!
//! has its minimiser at w = Σ β_i ẑ_i (representer theorem), f = Qβ on the training
//! rows. Given the rows A outside the tube (|y_i − f_i| > ε, signs s), the stationarity
//! condition reads β_A = 2C (y_A − f_A − ε s_A), β = 0 elsewhere, that is
//! `(Q_AA + I/(2C)) β_A = y_A − ε s_A`. Each Newton step solves this system for the
//! current A (one Cholesky factorization), a backtracking line search on the objective
//! keeps the descent monotone, and the iteration stops when A no longer changes (then
//! the KKT conditions hold exactly).
//!
//! Fed with the exact kernel's Gram matrix this is the exact kernel machine; fed with
//! the Gram matrix of D mapped features it is the same problem as the linear fit on
//! those features, solved in n instead of D dimensions.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2};
use ndarray_linalg::{FactorizeC, SolveC, UPLO};

use crate::error::{Error, Result};

/// Newton steps at most.
const MAX_STEPS: usize = 40;

/// Relative decrease of the objective below which a step counts as no progress.
const FLAT: f64 = 1e-12;

/// A solution of [`solve_l2`].
#[derive(Clone, Debug)]
pub struct Solution {
    /// Coefficients β (one per training row); predictions are Q(x, ·)·β.
    pub beta: Array1<f64>,
    /// Newton steps taken.
    pub steps: usize,
    /// The set of rows outside the tube stopped changing (KKT conditions hold).
    pub converged: bool,
}

/// The primal objective ½βᵀQβ + C Σ max(0, |y − f| − ε)² with f = Qβ.
fn objective(beta: &Array1<f64>, f: &Array1<f64>, y: ArrayView1<f64>, c: f64, eps: f64) -> f64 {
    0.5 * beta.dot(f) + c * tube_loss(f, y, eps)
}

/// Σ max(0, |y − f| − ε)²: the squared loss beyond the tube.
pub(super) fn tube_loss(f: &Array1<f64>, y: ArrayView1<f64>, eps: f64) -> f64 {
    y.iter()
        .zip(f)
        .map(|(y, f)| {
            let e = ((y - f).abs() - eps).max(0.0);
            e * e
        })
        .sum()
}

/// Backtracking line search from the full Newton step (Chapelle 2007, §4): halves `t`
/// from 1 (at most 30 times) until `objective(x + t·dir, f + t·fd)` is at most `obj`, and
/// moves `x`, `f` and `obj` there. Returns whether the decrease counts as progress.
pub(super) fn backtrack(
    x: &mut Array1<f64>,
    f: &mut Array1<f64>,
    obj: &mut f64,
    dir: &Array1<f64>,
    fd: &Array1<f64>,
    objective: impl Fn(&Array1<f64>, &Array1<f64>) -> f64,
) -> bool {
    let mut t = 1.0;
    for _ in 0..30 {
        let b = &*x + &(t * dir);
        let fb = &*f + &(t * fd);
        let o = objective(&b, &fb);
        if o <= *obj {
            let moved = o < *obj * (1.0 - FLAT);
            *x = b;
            *f = fb;
            *obj = o;
            return moved;
        }
        t *= 0.5;
    }
    false
}

/// Solves the squared-loss epsilon-SVR on Gram matrix `q` (n × n, symmetric, bias
/// included), targets `y`, penalty `c` > 0 and tube `eps` ≥ 0, starting from `start`
/// (a warm start, e.g. the previous C's solution) or zero.
///
/// # Errors
/// [`Error::Numerical`] when a Newton system cannot be factorized.
pub fn solve_l2(
    q: ArrayView2<f64>,
    y: ArrayView1<f64>,
    c: f64,
    eps: f64,
    start: Option<&Array1<f64>>,
) -> Result<Solution> {
    let n = y.len();
    let mut beta = match start {
        Some(b) if b.len() == n => b.clone(),
        _ => Array1::zeros(n),
    };
    let mut f = q.dot(&beta);
    let mut obj = objective(&beta, &f, y, c, eps);
    let mut prev: Vec<(usize, bool)> = Vec::new();
    for step in 0..MAX_STEPS {
        let active: Vec<(usize, bool)> = (0..n)
            .filter_map(|i| {
                let r = y[i] - f[i];
                (r.abs() > eps).then_some((i, r > 0.0))
            })
            .collect();
        if step > 0 && active == prev {
            return Ok(Solution {
                beta,
                steps: step,
                converged: true,
            });
        }
        let m = active.len();
        let mut target = Array1::zeros(n);
        if m > 0 {
            let mut h = Array2::zeros((m, m));
            for (a, &(i, _)) in active.iter().enumerate() {
                for (b, &(j, _)) in active.iter().enumerate().take(a + 1) {
                    h[[a, b]] = q[[i, j]];
                }
                h[[a, a]] += 0.5 / c;
            }
            let rhs: Array1<f64> = active
                .iter()
                .map(|&(i, up)| y[i] - if up { eps } else { -eps })
                .collect();
            crate::blas::single_threaded();
            let factor = h.factorizec(UPLO::Lower).map_err(|e| {
                Error::Numerical(format!(
                    "the exact machine's Newton system ({m} rows) could not be factorized: {e}"
                ))
            })?;
            let sol = factor.solvec(&rhs).map_err(|e| {
                Error::Numerical(format!(
                    "the exact machine's Newton system could not be solved: {e}"
                ))
            })?;
            for (&(i, _), v) in active.iter().zip(sol.iter()) {
                target[i] = *v;
            }
        }
        let dir = &target - &beta;
        let fd = q.dot(&dir);
        let moved = backtrack(&mut beta, &mut f, &mut obj, &dir, &fd, |b, fb| {
            objective(b, fb, y, c, eps)
        });
        prev = active;
        if !moved {
            return Ok(Solution {
                beta,
                steps: step + 1,
                converged: true,
            });
        }
    }
    Ok(Solution {
        beta,
        steps: MAX_STEPS,
        converged: false,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn kkt_conditions_hold_at_the_solution() {
        // published: Chapelle (2007) — at the optimum β_i = 2C(y_i − f_i − ε s_i) outside
        // the tube and β_i = 0 inside it.
        let x: [f64; 7] = [0.0, 0.3, 0.7, 1.0, 1.4, 2.0, 2.2];
        let y = array![0.1, 0.5, 0.4, 1.2, 0.9, 2.1, 1.7];
        let q = Array2::from_shape_fn((7, 7), |(i, j)| (-(x[i] - x[j]).powi(2)).exp() + 1.0);
        let (c, eps) = (3.0, 0.15);
        let s = solve_l2(q.view(), y.view(), c, eps, None).unwrap();
        assert!(s.converged);
        let f = q.dot(&s.beta);
        for i in 0..7 {
            let r = y[i] - f[i];
            let want = if r.abs() > eps {
                2.0 * c * (r - eps * r.signum())
            } else {
                0.0
            };
            assert!(
                (s.beta[i] - want).abs() < 1e-9,
                "row {i}: {} vs {want}",
                s.beta[i]
            );
        }
        // A warm start from the solution stops at once with the same answer.
        let w = solve_l2(q.view(), y.view(), c, eps, Some(&s.beta)).unwrap();
        assert!(w.converged && w.steps <= 1);
        assert!((&w.beta - &s.beta).iter().all(|v| v.abs() < 1e-12));
    }
}
