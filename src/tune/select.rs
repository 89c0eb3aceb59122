//! The grid loop: score every candidate of the current grid, move any edge that holds a
//! clearly lowest error (within the budget of fits), then choose by the
//! one-standard-error rule. The same loop serves both stages: the exact machine on a
//! sample ([`super::grid`]) and the refinement on every sample row ([`super::refine`]).

use std::collections::HashMap;

use crate::error::{Error, Result};

use super::grid::{key, Axis3, Scored, Table};
use super::report::CandidateResult;
use crate::heuristics::Defaults;

/// Scores every (C, epsilon) pair given (factor, value) at one gamma factor.
pub(crate) type Scorer<'a> = dyn Fn(f64, &[(f64, f64)], &[(f64, f64)]) -> Result<Vec<Scored>> + 'a;

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

/// Scores every grid point of `axes` (and every point of `extra`) not yet in `table`.
fn fill(
    d: &Defaults,
    axes: &[Axis3; 3],
    extra: &[[f64; 3]],
    score: &Scorer,
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
        for s in score(gf, &cs, &eps)? {
            table.entry(key(s.factors)).or_insert(s);
        }
    }
    for &[gf, cf, ef] in extra {
        if !table.contains_key(&key([gf, cf, ef])) {
            for s in score(gf, &[(cf, d.c * cf)], &[(ef, d.epsilon * ef)])? {
                table.entry(key(s.factors)).or_insert(s);
            }
        }
    }
    Ok(())
}

/// Pooled RMSE and the standard error of the per-fold RMSEs.
fn summary(s: &Scored, rows: &[usize]) -> (f64, f64, Vec<f64>) {
    let total: usize = rows.iter().sum();
    let pooled = (s.sse.iter().sum::<f64>() / total as f64).sqrt();
    let per: Vec<f64> = s
        .sse
        .iter()
        .zip(rows)
        .map(|(e, r)| (e / *r as f64).sqrt())
        .collect();
    (pooled, standard_error(&per), per)
}

/// `a` is lower than its neighbour `b` by more than the standard error of their
/// per-fold differences (paired over folds); an unscored neighbour counts as higher.
fn clearly_lower(a: &Scored, b: Option<&Scored>, rows: &[usize]) -> bool {
    let Some(b) = b else { return true };
    let (_, _, pa) = summary(a, rows);
    let (_, _, pb) = summary(b, rows);
    let diff: Vec<f64> = pb.iter().zip(&pa).map(|(b, a)| b - a).collect();
    let mean = diff.iter().sum::<f64>() / diff.len().max(1) as f64;
    mean.is_nan() || mean > standard_error(&diff)
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

/// Runs the grid search from `axes` within `max_fits` grid points, with validation
/// folds of `rows` rows each, scoring by `score`; the points of `extra` (such as the
/// defaults, [1, 1, 1]) are scored too.
pub(crate) fn search(
    mut axes: [Axis3; 3],
    max_fits: usize,
    rows: &[usize],
    extra: &[[f64; 3]],
    d: &Defaults,
    score: &Scorer,
) -> Result<Search> {
    let mut table: Table = HashMap::new();
    let mut extensions = 0;
    let mut budget_reached;
    loop {
        fill(d, &axes, extra, score, &mut table)?;
        budget_reached = false;
        let lowest = table
            .values()
            .filter(|s| summary(s, rows).0.is_finite())
            .min_by(|a, b| {
                summary(a, rows)
                    .0
                    .total_cmp(&summary(b, rows).0)
                    .then(a.factors[0].total_cmp(&b.factors[0]))
                    .then(a.factors[1].total_cmp(&b.factors[1]))
                    .then(b.factors[2].total_cmp(&a.factors[2]))
            });
        let Some(lowest) = lowest else { break };
        // An edge moves only when the lowest candidate lies on it and is clearly lower
        // than its inner neighbour on that axis: a flat axis (epsilon under the squared
        // loss, typically) does not spend the budget. Axes move one at a time, gamma
        // first, each while the grid stays within the budget.
        let mut moved = false;
        for i in 0..3 {
            let v = lowest.factors[i];
            for up in [false, true] {
                let a = &axes[i].values;
                let (edge, inner) = if up {
                    (a.last(), a.len().checked_sub(2).map(|k| a[k]))
                } else {
                    (a.first(), a.get(1).copied())
                };
                if edge != Some(&v) {
                    continue;
                }
                let Some(inner) = inner else { continue };
                let mut nf = lowest.factors;
                nf[i] = inner;
                if !clearly_lower(lowest, table.get(&key(nf)), rows) {
                    continue;
                }
                let Some(f) = axes[i].beyond(up) else {
                    continue;
                };
                let size: usize = (0..3)
                    .map(|k| axes[k].values.len() + usize::from(k == i))
                    .product();
                if size > max_fits {
                    budget_reached = true;
                    continue;
                }
                axes[i].values.push(f);
                axes[i].values.sort_by(f64::total_cmp);
                moved = true;
            }
        }
        if !moved {
            break;
        }
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
            let (error, se, fold_errors) = summary(s, rows);
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
        .ok_or_else(|| Error::TuneFailed("the defaults were not scored".into()))?;
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
