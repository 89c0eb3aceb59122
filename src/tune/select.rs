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

/// Standard error of the mean of `a − b` (per-row squared errors of two candidates),
/// in RMSE units: RMSE_a − RMSE_b = (MSE_a − MSE_b) / (RMSE_a + RMSE_b) exactly, so the
/// standard error of the MSE difference is divided by `rmse_sum`. NaN when the rows do
/// not pair up (a failed fold).
fn paired_se(a: &[f64], b: &[f64], rmse_sum: f64) -> f64 {
    if a.len() != b.len() || a.is_empty() {
        return f64::NAN;
    }
    let d: Vec<f64> = a.iter().zip(b).map(|(x, y)| x - y).collect();
    let se = standard_error(&d);
    if rmse_sum > 0.0 {
        se / rmse_sum
    } else {
        0.0
    }
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
    // Paired over rows: every validation row is scored by both candidates, so the
    // differences of their squared errors share each row's difficulty; their standard
    // error measures the comparison itself, on all the rows rather than on a handful of
    // fold means (whose spread, from k − 1 degrees of freedom, let a clearly worse model
    // pass for "within one standard error"). It is known to run low for cross-validation
    // (Nadeau & Bengio, Machine Learning 52, 2003), which errs toward the lowest.
    let low_rows = &table[&key(lowest.factors)].rows;
    for c in cands.iter_mut() {
        let rows = &table[&key(c.factors)].rows;
        c.se_diff = paired_se(rows, low_rows, c.error + lowest.error);
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paired_standard_error_worked_case() {
        // Differences 1, 2, 3, 4: sample sd √(5/3), over √4; then over the RMSE sum 2.
        let se = paired_se(&[1.0, 2.0, 3.0, 4.0], &[0.0; 4], 2.0);
        assert!(
            (se - (5.0f64 / 3.0).sqrt() / 2.0 / 2.0).abs() < 1e-12,
            "{se}"
        );
        assert!(paired_se(&[1.0], &[], 1.0).is_nan());
    }

    #[test]
    fn a_candidate_worse_on_most_rows_is_not_within_one_standard_error() {
        // Three folds of 100 rows. The lowest candidate (gamma ×1) has squared error 10 on
        // every row; the simpler one (gamma ×0.5) 13 on the first fold's rows and 9 on the
        // others. Its per-fold RMSE differences (0.443, −0.162, −0.162) have a standard
        // error of 0.202, above its pooled difference of 0.052, so a rule paired over
        // folds would take it; paired over the 300 rows the standard error is 0.017.
        let rows = [100, 100, 100];
        let score = |gf: f64, cs: &[(f64, f64)], eps: &[(f64, f64)]| -> Result<Vec<Scored>> {
            let mut out = Vec::new();
            for &(ef, _) in eps {
                for &(cf, _) in cs {
                    let mut s = Scored {
                        factors: [gf, cf, ef],
                        sse: vec![f64::NAN; 3],
                        rows: Vec::new(),
                        steps: 1,
                        converged: true,
                    };
                    for fi in 0..3 {
                        let e = if gf > 1.0 {
                            20.0
                        } else if gf == 1.0 {
                            10.0
                        } else if fi == 0 {
                            13.0
                        } else {
                            9.0
                        };
                        s.absorb(fi, 100, vec![e; 100]);
                    }
                    out.push(s);
                }
            }
            Ok(out)
        };
        let d = Defaults {
            gamma: 1.0,
            c: 1.0,
            epsilon: 0.1,
            noise_sd: 0.1,
        };
        let axes = [
            Axis3::new(vec![0.5, 1.0]),
            Axis3::new(vec![1.0]),
            Axis3::new(vec![1.0]),
        ];
        let s = search(axes, 10, &rows, &[], &d, &score).unwrap();
        assert_eq!(s.lowest.factors[0], 1.0);
        let simpler = s.candidates.iter().find(|c| c.factors[0] == 0.5).unwrap();
        assert!((simpler.se_diff - 0.0171).abs() < 5e-4, "{simpler:?}");
        assert!(!simpler.within_one_se);
        assert_eq!(s.best.factors[0], 1.0);
    }
}
