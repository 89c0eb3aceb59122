//! The grid loop: score every candidate of the current grid on the exact machine, move
//! any edge that holds the lowest error (within the budget of fits), then choose by the
//! one-standard-error rule.

use std::collections::HashMap;

use crate::error::{Error, Result};
use crate::kernel::Kernel;

use super::grid::{key, score_gamma, Axis3, ExactFold, Scored, Table};
use super::options::TuneOptions;
use super::report::CandidateResult;
use crate::heuristics::Defaults;

/// What the grid search found.
pub(crate) struct Search {
    /// Final factor lists (gamma, C, epsilon), sorted.
    pub axes: [Vec<f64>; 3],
    pub candidates: Vec<CandidateResult>,
    pub lowest: CandidateResult,
    pub best: CandidateResult,
    pub default: CandidateResult,
    pub extensions: usize,
    pub budget_reached: bool,
}

/// Scores every grid point of `axes` not yet in `table`.
fn fill(
    opts: &TuneOptions,
    folds: &[ExactFold],
    d: &Defaults,
    axes: &[Axis3; 3],
    table: &mut Table,
) -> Result<()> {
    for &gf in &axes[0].values {
        let missing = |cf: f64, ef: f64| !table.contains_key(&key([gf, cf, ef]));
        let cs: Vec<(f64, f64)> = axes[1]
            .values
            .iter()
            .filter(|&&cf| axes[2].values.iter().any(|&ef| missing(cf, ef)))
            .map(|&cf| (cf, d.c * cf))
            .collect();
        let eps: Vec<(f64, f64)> = axes[2]
            .values
            .iter()
            .filter(|&&ef| axes[1].values.iter().any(|&cf| missing(cf, ef)))
            .map(|&ef| (ef, d.epsilon * ef))
            .collect();
        if cs.is_empty() {
            continue;
        }
        let kernel = Kernel::new(opts.kernel, d.gamma * gf)?;
        for s in score_gamma(folds, &kernel, opts.loss, &cs, &eps, gf)? {
            table.entry(key(s.factors)).or_insert(s);
        }
    }
    Ok(())
}

/// Pooled RMSE and the standard error of the per-fold RMSEs.
fn summary(s: &Scored, folds: &[ExactFold]) -> (f64, f64, Vec<f64>) {
    let rows: usize = folds.iter().map(|f| f.y_val.len()).sum();
    let pooled = (s.sse.iter().sum::<f64>() / rows as f64).sqrt();
    let per: Vec<f64> = s
        .sse
        .iter()
        .zip(folds)
        .map(|(e, f)| (e / f.y_val.len() as f64).sqrt())
        .collect();
    (pooled, standard_error(&per), per)
}

/// Sample standard deviation over √count (0 for fewer than two values).
fn standard_error(v: &[f64]) -> f64 {
    if v.len() < 2 {
        return 0.0;
    }
    let k = v.len() as f64;
    let m = v.iter().sum::<f64>() / k;
    (v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (k - 1.0) / k).sqrt()
}

/// Lowest error first, failed (NaN) last, ties by simplicity.
fn by_error(a: &CandidateResult, b: &CandidateResult) -> std::cmp::Ordering {
    a.error
        .is_nan()
        .cmp(&b.error.is_nan())
        .then(a.error.total_cmp(&b.error))
        .then_with(|| by_simplicity(a, b))
}

/// Smallest gamma (smoothest), then smallest C (most regularised), then largest epsilon.
fn by_simplicity(a: &CandidateResult, b: &CandidateResult) -> std::cmp::Ordering {
    a.factors[0]
        .total_cmp(&b.factors[0])
        .then(a.factors[1].total_cmp(&b.factors[1]))
        .then(b.factors[2].total_cmp(&a.factors[2]))
}

/// Runs the grid search on the exact machine's folds around `d`.
pub(crate) fn search(opts: &TuneOptions, folds: &[ExactFold], d: &Defaults) -> Result<Search> {
    let mut axes = [
        Axis3::new(opts.gamma_factors.clone()),
        Axis3::new(opts.c_factors.clone()),
        Axis3::new(opts.epsilon_factors.clone()),
    ];
    // The defaults are always a candidate.
    for a in axes.iter_mut() {
        if !a.values.contains(&1.0) {
            a.values.push(1.0);
            a.values.sort_by(f64::total_cmp);
        }
    }
    let mut table: Table = HashMap::new();
    let (mut extensions, mut budget_reached) = (0, false);
    loop {
        fill(opts, folds, d, &axes, &mut table)?;
        let lowest = table
            .values()
            .filter(|s| {
                let (e, _, _) = summary(s, folds);
                e.is_finite()
            })
            .min_by(|a, b| {
                summary(a, folds)
                    .0
                    .total_cmp(&summary(b, folds).0)
                    .then(a.factors[0].total_cmp(&b.factors[0]))
                    .then(a.factors[1].total_cmp(&b.factors[1]))
                    .then(b.factors[2].total_cmp(&a.factors[2]))
            });
        let Some(lowest) = lowest else { break };
        let mut next = axes.clone();
        let mut moved = false;
        for (i, a) in next.iter_mut().enumerate() {
            let v = lowest.factors[i];
            for up in [false, true] {
                let edge = if up {
                    a.values.last()
                } else {
                    a.values.first()
                };
                if edge == Some(&v) {
                    if let Some(f) = a.beyond(up) {
                        a.values.push(f);
                        a.values.sort_by(f64::total_cmp);
                        moved = true;
                    }
                }
            }
        }
        if !moved {
            break;
        }
        let size: usize = next.iter().map(|a| a.values.len()).product();
        if size > opts.max_fits {
            budget_reached = true;
            break;
        }
        axes = next;
        extensions += 1;
    }

    let axes_v = [
        axes[0].values.clone(),
        axes[1].values.clone(),
        axes[2].values.clone(),
    ];
    let pos = |i: usize, v: f64| axes_v[i].iter().position(|&x| x == v).unwrap_or(0);
    let mut cands: Vec<CandidateResult> = table
        .values()
        .map(|s| {
            let (error, se, fold_errors) = summary(s, folds);
            let f = s.factors;
            CandidateResult {
                gamma: d.gamma * f[0],
                c: d.c * f[1],
                epsilon: d.epsilon * f[2],
                factors: f,
                grid: [pos(0, f[0]), pos(1, f[1]), pos(2, f[2])],
                error,
                se,
                fold_errors,
                steps: s.steps,
                converged: s.converged,
                se_diff: 0.0,
                within_one_se: false,
                is_default: f == [1.0, 1.0, 1.0],
            }
        })
        .collect();
    cands.sort_by(by_error);
    let lowest = cands[0].clone();
    if !lowest.error.is_finite() {
        return Err(Error::TuneFailed(format!(
            "no candidate gave a finite validation error on the exact machine; first attempt: gamma = {:.4e}, C = {:.4e}, epsilon = {:.4e}; try smaller C values or larger epsilon values",
            lowest.gamma, lowest.c, lowest.epsilon
        )));
    }
    // Paired over folds: the per-fold RMSE differences to the lowest candidate share
    // each fold's difficulty, so their standard error measures the comparison itself.
    for c in cands.iter_mut() {
        let diff: Vec<f64> = c
            .fold_errors
            .iter()
            .zip(&lowest.fold_errors)
            .map(|(a, b)| a - b)
            .collect();
        c.se_diff = standard_error(&diff);
        c.within_one_se = c.error - lowest.error <= c.se_diff;
    }
    let best = cands
        .iter()
        .filter(|c| c.within_one_se)
        .min_by(|a, b| by_simplicity(a, b))
        .cloned()
        .expect("the lowest is within one standard error of itself");
    let default = cands
        .iter()
        .find(|c| c.is_default)
        .cloned()
        .expect("the defaults are a candidate");
    Ok(Search {
        axes: axes_v,
        candidates: cands,
        lowest,
        best,
        default,
        extensions,
        budget_reached,
    })
}
