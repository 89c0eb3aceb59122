//! The second stage of the search: the best region of the exact stage, scored again on
//! every row of the sample.
//!
//! Measured on CCPP, airfoil self-noise and concrete (issue 14), the exact machine on a
//! 1,000-row sample prefers wider kernels (smaller gamma) and smaller C than the same
//! data wants with all its rows: a small sample cannot show the gain of a narrower,
//! less regularised fit, and the one-standard-error rule leans the same way. So the
//! exact stage's lowest candidate (gamma*, C*, epsilon*) starts a second grid, gamma* ×
//! {1, 2, 4}, C* × {1, √10, 10}, epsilon*, plus the defaults, cross-validated on the
//! sample's first `refine_rows` rows (a uniform sample: the rows are in random order)
//! with the same folds scheme; this grid too grows past an edge holding a
//! clearly lowest error, within `refine_fits` candidates, and the choice is again the
//! simplest within one standard error of the lowest.
//!
//! The machine of the second stage is the exact one when a fold's training rows are at
//! most `refine_dim` (its cost, the cube of the rows, is then below that of the map),
//! else the squared-loss fit on `refine_dim` mapped features, solved in the primal by
//! Newton's method on the active rows (Keerthi & DeCoste, JMLR 6, 2005; Chapelle 2007):
//! its cost is rows × D² for the features' Gram matrix, once per gamma and fold, and a
//! D × D Cholesky factorization per step.

use ndarray::{concatenate, s, Array1, Array2, ArrayView1, ArrayView2, Axis};
use ndarray_linalg::{FactorizeC, SolveC, UPLO};
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::features::{build_map, MapKind, MapSpec};
use crate::heuristics::Defaults;
use crate::kernel::Kernel;
use crate::solver::dcd::Loss;

use super::exact::{backtrack, solve_l2, tube_loss, Solution};
use super::grid::{score_gamma, Axis3, ExactFold, Scored};
use super::options::TuneOptions;
use super::report::CandidateResult;
use super::search::Folds;
use super::select::{search, Search};

/// Newton steps at most (primal).
const MAX_STEPS: usize = 40;

/// ½‖w‖² + C Σ max(0, |y − f| − ε)² with f = Zw.
fn objective(w: &Array1<f64>, f: &Array1<f64>, y: ArrayView1<f64>, c: f64, eps: f64) -> f64 {
    0.5 * w.dot(w) + c * tube_loss(f, y, eps)
}

/// The squared-loss epsilon-SVR on mapped rows `z` (rows × p, the last column the
/// constant 1 of the bias) in the primal, given `g` = ZᵀZ; each Newton step solves
/// `(I + 2C Z_AᵀZ_A) w = 2C Z_Aᵀ(y_A − ε s_A)` for the rows A outside the tube, with
/// Z_AᵀZ_A formed as G minus the rows inside the tube when those are fewer. A
/// backtracking line search keeps the objective decreasing; it stops when A no longer
/// changes (the KKT conditions then hold).
///
/// # Errors
/// [`Error::Numerical`] when a Newton system cannot be factorized.
pub(crate) fn solve_l2_primal(
    z: ArrayView2<f64>,
    g: ArrayView2<f64>,
    y: ArrayView1<f64>,
    c: f64,
    eps: f64,
    start: Option<&Array1<f64>>,
) -> Result<Solution> {
    let (n, p) = z.dim();
    let mut w = match start {
        Some(b) if b.len() == p => b.clone(),
        _ => Array1::zeros(p),
    };
    let mut f = z.dot(&w);
    let mut obj = objective(&w, &f, y, c, eps);
    let mut prev: Vec<usize> = Vec::new();
    for step in 0..MAX_STEPS {
        let (mut active, mut inside, mut signed) = (Vec::new(), Vec::new(), Vec::new());
        for i in 0..n {
            let r = y[i] - f[i];
            if r.abs() > eps {
                active.push(i);
                signed.push(y[i] - eps * r.signum());
            } else {
                inside.push(i);
            }
        }
        if step > 0 && active == prev {
            return Ok(Solution {
                beta: w,
                steps: step,
                converged: true,
            });
        }
        let mut h = if inside.is_empty() {
            g.to_owned()
        } else if inside.len() < active.len() {
            let zi = z.select(Axis(0), &inside);
            &g - &zi.t().dot(&zi)
        } else {
            let za = z.select(Axis(0), &active);
            za.t().dot(&za)
        };
        h *= 2.0 * c;
        for j in 0..p {
            h[[j, j]] += 1.0;
        }
        let mut v = Array1::zeros(n);
        for (&i, t) in active.iter().zip(&signed) {
            v[i] = 2.0 * c * t;
        }
        let rhs = z.t().dot(&v);
        crate::blas::single_threaded();
        let factor = h.factorizec(UPLO::Lower).map_err(|e| {
            Error::Numerical(format!(
                "the mapped machine's Newton system ({p} features) could not be factorized: {e}"
            ))
        })?;
        let target = factor.solvec(&rhs).map_err(|e| {
            Error::Numerical(format!(
                "the mapped machine's Newton system could not be solved: {e}"
            ))
        })?;
        let dir = &target - &w;
        let fd = z.dot(&dir);
        let moved = backtrack(&mut w, &mut f, &mut obj, &dir, &fd, |b, fb| {
            objective(b, fb, y, c, eps)
        });
        prev = active;
        if !moved {
            return Ok(Solution {
                beta: w,
                steps: step + 1,
                converged: true,
            });
        }
    }
    Ok(Solution {
        beta: w,
        steps: MAX_STEPS,
        converged: false,
    })
}

/// One fold's rows on the map: the Gram form (rows × rows, when the rows are at most
/// the features) or the primal form (features' Gram matrix).
enum OnMap {
    Gram {
        q: Array2<f64>,
        qv: Array2<f64>,
    },
    Primal {
        z: Array2<f64>,
        zv: Array2<f64>,
        g: Array2<f64>,
    },
}

/// Every (C, epsilon) pair at `gamma` on the map `spec` on every fold (squared
/// loss), chains of increasing C per epsilon warm-started as on the exact machine; the
/// folds run in parallel, each fold's result is independent of the others.
#[allow(clippy::too_many_arguments)]
pub(crate) fn score_on_map(
    opts: &TuneOptions,
    folds: &Folds,
    exact: &[ExactFold],
    gamma: f64,
    spec: &MapSpec,
    cs: &[(f64, f64)],
    eps: &[(f64, f64)],
    gamma_factor: f64,
) -> Result<Vec<Scored>> {
    let kernel = Kernel::new(opts.kernel, gamma)?;
    let spec = MapSpec {
        seed: opts.seed,
        ..spec.clone()
    };
    // Nyström landmarks come from each fold's training rows, as a fit's come from its
    // own rows: a validation row that is also a landmark would be predicted as by the
    // exact machine and flatter the map. Random maps do not look at the rows; one
    // serves every fold.
    let shared = match spec.kind {
        MapKind::Nystrom => None,
        _ => Some(build_map(
            &spec,
            kernel,
            folds.x.ncols(),
            Some(folds.x.view()),
        )?),
    };
    let per_fold: Vec<Vec<(Vec<f64>, u64, bool)>> = exact
        .par_iter()
        .map(|fold| -> Result<Vec<(Vec<f64>, u64, bool)>> {
            let own;
            let map = match &shared {
                Some(m) => m.as_ref(),
                None => {
                    own = build_map(
                        &spec,
                        kernel,
                        fold.x_train.ncols(),
                        Some(fold.x_train.view()),
                    )?;
                    own.as_ref()
                }
            };
            let ones = |a: Array2<f64>| {
                let one = Array2::ones((a.nrows(), 1));
                concatenate(Axis(1), &[a.view(), one.view()]).expect("same rows")
            };
            let z = ones(map.transform(fold.x_train.view()));
            let zv = ones(map.transform(fold.x_val.view()));
            let m = if z.nrows() <= z.ncols() {
                OnMap::Gram {
                    q: z.dot(&z.t()),
                    qv: zv.dot(&z.t()),
                }
            } else {
                OnMap::Primal {
                    g: z.t().dot(&z),
                    z,
                    zv,
                }
            };
            let mut out = Vec::with_capacity(cs.len() * eps.len());
            for &(_, e) in eps {
                let mut prev: Option<Array1<f64>> = None;
                for &(_, c) in cs {
                    let e = e / fold.sd;
                    let sol = match &m {
                        OnMap::Gram { q, .. } => {
                            solve_l2(q.view(), fold.y_train.view(), c, e, prev.as_ref())
                        }
                        OnMap::Primal { z, g, .. } => solve_l2_primal(
                            z.view(),
                            g.view(),
                            fold.y_train.view(),
                            c,
                            e,
                            prev.as_ref(),
                        ),
                    };
                    out.push(match sol {
                        Ok(sol) => {
                            let f = match &m {
                                OnMap::Gram { qv, .. } => qv.dot(&sol.beta),
                                OnMap::Primal { zv, .. } => zv.dot(&sol.beta),
                            };
                            let r = (fold.squared_errors(&f), sol.steps as u64, sol.converged);
                            prev = Some(sol.beta);
                            r
                        }
                        Err(_) => (Vec::new(), 0, false),
                    });
                }
            }
            Ok(out)
        })
        .collect::<Result<_>>()?;
    let mut per_fold = per_fold;
    let mut scored = Vec::with_capacity(cs.len() * eps.len());
    for (ei, &(ef, _)) in eps.iter().enumerate() {
        for (ci, &(cf, _)) in cs.iter().enumerate() {
            let k = ei * cs.len() + ci;
            let mut s = Scored {
                factors: [gamma_factor, cf, ef],
                sse: vec![f64::NAN; per_fold.len()],
                rows: Vec::new(),
                steps: per_fold.iter().map(|f| f[k].1).max().unwrap_or(0),
                converged: per_fold.iter().all(|f| f[k].2),
            };
            for (fi, (f, fold)) in per_fold.iter_mut().zip(exact).enumerate() {
                s.absorb(fi, fold.y_val.len(), std::mem::take(&mut f[k].0));
            }
            scored.push(s);
        }
    }
    Ok(scored)
}

/// What the second stage found, and the folds it scored on.
pub(crate) struct Refined {
    pub search: Search,
    pub folds: Folds,
    pub exact: Vec<ExactFold>,
    /// D of the map it scored on; `None` for the exact machine.
    pub dim: Option<usize>,
}

/// The second stage on the whole sample `x` (standardized, in random order), `y`,
/// around the exact stage's lowest candidate `centre` (squared loss only).
pub(crate) fn refine(
    opts: &TuneOptions,
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    d: &Defaults,
    centre: &CandidateResult,
) -> Result<Refined> {
    let rows = x.nrows().min(opts.refine_rows);
    let (x, y) = (x.slice(s![..rows, ..]), y.slice(s![..rows]));
    let folds = Folds::new(x, y, opts.validation, opts.seed)?;
    let exact = ExactFold::all(&folds);
    let train_rows = exact.iter().map(|f| f.x_train.nrows()).max().unwrap_or(0);
    let dim = (train_rows > opts.refine_dim).then_some(opts.refine_dim);
    let [g, c, e] = centre.factors;
    let axes = [
        Axis3::new(vec![g, 2.0 * g, 4.0 * g]),
        Axis3::new(vec![c, 10f64.sqrt() * c, 10.0 * c]),
        Axis3::new(vec![e]),
    ];
    let score = |gf: f64, cs: &[(f64, f64)], eps: &[(f64, f64)]| -> Result<Vec<Scored>> {
        match dim {
            None => {
                let kernel = Kernel::new(opts.kernel, d.gamma * gf)?;
                score_gamma(&exact, &kernel, Loss::L2, cs, eps, gf)
            }
            Some(dm) => {
                let spec = MapSpec {
                    dim: dm,
                    ..opts.map.clone()
                };
                score_on_map(opts, &folds, &exact, d.gamma * gf, &spec, cs, eps, gf)
            }
        }
    };
    let rows: Vec<usize> = exact.iter().map(|f| f.y_val.len()).collect();
    let search = search(axes, opts.refine_fits, &rows, &[[1.0; 3]], d, &score)?;
    Ok(Refined {
        search,
        folds,
        exact,
        dim,
    })
}
