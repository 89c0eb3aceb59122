//! The choice of gamma, C and epsilon on the exact kernel machine: cross-validation on a
//! sample, a grid around the defaults that grows while its best point lies on an edge
//! (within a budget of fits), and the one-standard-error rule.

use std::collections::HashMap;

use ndarray::{s, Array1, Array2, ArrayView2, Axis};
use rayon::prelude::*;

use crate::error::Result;
use crate::kernel::Kernel;
use crate::solver::dcd::Loss;
use crate::solver::smo::{self, SmoSettings};

use super::exact::solve_l2;
use super::search::Folds;

/// One fold of the exact machine's sample: standardized inputs, training targets
/// centred and scaled by their own mean and standard deviation.
pub(crate) struct ExactFold {
    pub x_train: Array2<f64>,
    pub x_val: Array2<f64>,
    /// Raw training targets.
    pub y_raw: Array1<f64>,
    /// Training targets, standardized.
    pub y_train: Array1<f64>,
    /// Raw validation targets.
    pub y_val: Array1<f64>,
    pub mean: f64,
    pub sd: f64,
}

impl ExactFold {
    /// Every fold of `folds`.
    pub fn all(folds: &Folds) -> Vec<ExactFold> {
        (0..folds.ranges.len())
            .map(|f| {
                let r = folds.ranges[f].clone();
                let train: Vec<usize> = (0..r.start).chain(r.end..folds.x.nrows()).collect();
                let y_raw = folds.y.select(Axis(0), &train);
                let mean = y_raw.sum() / y_raw.len() as f64;
                let sd = (y_raw.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>()
                    / y_raw.len() as f64)
                    .sqrt()
                    .max(f64::MIN_POSITIVE);
                ExactFold {
                    x_train: folds.x.select(Axis(0), &train),
                    x_val: folds.x.slice(s![r.clone(), ..]).to_owned(),
                    y_train: y_raw.mapv(|v| (v - mean) / sd),
                    y_raw,
                    y_val: folds.y.slice(s![r]).to_owned(),
                    mean,
                    sd,
                }
            })
            .collect()
    }

    /// Gram matrices Q = K + 1 (the bias as a constant feature) of the training rows and
    /// of the validation rows against them.
    pub fn grams(&self, kernel: &Kernel) -> (Array2<f64>, Array2<f64>) {
        let gram = |a: ArrayView2<f64>| {
            let mut k = Array2::zeros((a.nrows(), self.x_train.nrows()));
            kernel.block_into(a, self.x_train.view(), k.view_mut());
            k.mapv_inplace(|v| v + 1.0);
            k
        };
        (gram(self.x_train.view()), gram(self.x_val.view()))
    }

    /// Each validation row's squared error (target units) of predictions `f`
    /// (standardized units).
    pub fn squared_errors(&self, f: &Array1<f64>) -> Vec<f64> {
        f.iter()
            .zip(&self.y_val)
            .map(|(f, y)| (y - (self.mean + self.sd * f)).powi(2))
            .collect()
    }
}

/// One candidate's cross-validated outcome.
#[derive(Clone, Debug)]
pub(crate) struct Scored {
    /// Factors of the defaults' gamma, C and epsilon.
    pub factors: [f64; 3],
    /// Squared validation error per fold.
    pub sse: Vec<f64>,
    /// Each validation row's squared error, folds in order (empty when a fold failed).
    pub rows: Vec<f64>,
    /// Newton steps (or SMO iterations), largest over folds.
    pub steps: u64,
    /// Every fold's solve met its optimality condition.
    pub converged: bool,
}

impl Scored {
    /// Records fold `fi`'s per-row squared errors (`sq` empty when its solve failed:
    /// the fold's error is then NaN and the rows are dropped, so no paired comparison
    /// is made). Folds are absorbed in order.
    pub fn absorb(&mut self, fi: usize, fold_rows: usize, sq: Vec<f64>) {
        let failed_before = self.sse[..fi].iter().any(|e| e.is_nan());
        if sq.len() == fold_rows {
            self.sse[fi] = sq.iter().sum();
            if !failed_before {
                self.rows.extend(sq);
            }
        } else {
            self.sse[fi] = f64::NAN;
            self.rows.clear();
        }
    }
}

/// Evaluates every (C, epsilon) pair at one gamma on every fold of the exact machine:
/// for the squared loss, chains of increasing C per epsilon, each warm-started from the
/// previous C's coefficients; for the linear loss, one SMO fit each.
pub(crate) fn score_gamma(
    folds: &[ExactFold],
    kernel: &Kernel,
    loss: Loss,
    cs: &[(f64, f64)],
    eps: &[(f64, f64)],
    gamma_factor: f64,
) -> Result<Vec<Scored>> {
    // cs and eps: (factor, value in target units for L1 / solver units for L2's C).
    let mut out: Vec<Scored> = Vec::with_capacity(cs.len() * eps.len());
    for &(ef, _) in eps {
        for &(cf, _) in cs {
            out.push(Scored {
                factors: [gamma_factor, cf, ef],
                sse: vec![f64::NAN; folds.len()],
                rows: Vec::new(),
                steps: 0,
                converged: true,
            });
        }
    }
    for (fi, fold) in folds.iter().enumerate() {
        let per_eps: Vec<Vec<(Vec<f64>, u64, bool)>> = match loss {
            Loss::L2 => {
                let (q, qv) = fold.grams(kernel);
                eps.par_iter()
                    .map(|&(_, e)| {
                        let mut prev: Option<Array1<f64>> = None;
                        cs.iter()
                            .map(|&(_, c)| {
                                match solve_l2(
                                    q.view(),
                                    fold.y_train.view(),
                                    c,
                                    e / fold.sd,
                                    prev.as_ref(),
                                ) {
                                    Ok(sol) => {
                                        let f = qv.dot(&sol.beta);
                                        let r = (
                                            fold.squared_errors(&f),
                                            sol.steps as u64,
                                            sol.converged,
                                        );
                                        prev = Some(sol.beta);
                                        r
                                    }
                                    Err(_) => (Vec::new(), 0, false),
                                }
                            })
                            .collect()
                    })
                    .collect()
            }
            Loss::L1 => eps
                .iter()
                .map(|&(_, e)| {
                    cs.iter()
                        .map(|&(_, c)| {
                            let settings = SmoSettings {
                                c,
                                epsilon: e,
                                cache_bytes: 256 << 20,
                                ..SmoSettings::default()
                            };
                            match smo::fit(
                                fold.x_train.view(),
                                fold.y_raw.view(),
                                *kernel,
                                &settings,
                            ) {
                                Ok(fit) => {
                                    let p = fit.model.predict(fold.x_val.view());
                                    let sq = p
                                        .iter()
                                        .zip(&fold.y_val)
                                        .map(|(p, y)| (y - p) * (y - p))
                                        .collect();
                                    (sq, fit.report.iterations, fit.report.converged)
                                }
                                Err(_) => (Vec::new(), 0, false),
                            }
                        })
                        .collect()
                })
                .collect(),
        };
        for (ei, row) in per_eps.into_iter().enumerate() {
            for (ci, (sq, steps, conv)) in row.into_iter().enumerate() {
                let s = &mut out[ei * cs.len() + ci];
                s.absorb(fi, fold.y_val.len(), sq);
                s.steps = s.steps.max(steps);
                s.converged &= conv;
            }
        }
    }
    Ok(out)
}

/// A grid axis: sorted factors, and the ratio by which it grows past an edge.
#[derive(Clone, Debug)]
pub(crate) struct Axis3 {
    pub values: Vec<f64>,
}

impl Axis3 {
    pub fn new(mut v: Vec<f64>) -> Axis3 {
        v.sort_by(f64::total_cmp);
        v.dedup();
        Axis3 { values: v }
    }

    /// The next factor beyond the lower (`up = false`) or upper edge, spaced as the two
    /// outermost values on that side; `None` for a single-valued axis (held fixed).
    pub fn beyond(&self, up: bool) -> Option<f64> {
        let v = &self.values;
        if v.len() < 2 {
            return None;
        }
        Some(if up {
            v[v.len() - 1] * v[v.len() - 1] / v[v.len() - 2]
        } else {
            v[0] * v[0] / v[1]
        })
    }
}

/// Key of a candidate in the table of scored candidates.
pub(crate) fn key(f: [f64; 3]) -> (u64, u64, u64) {
    (f[0].to_bits(), f[1].to_bits(), f[2].to_bits())
}

/// The scored table, keyed by factors.
pub(crate) type Table = HashMap<(u64, u64, u64), Scored>;
