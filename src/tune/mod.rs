//! Data-driven defaults for gamma, C and epsilon, and a validation search around them.
//!
//! # Defaults ([`Defaults`])
//! * gamma by the median heuristic (Gretton et al., JMLR 2012; Garreau, Jitkrittum &
//!   Kanagawa, arXiv:1707.07269, 2017): `gamma = 1 / H`, H the median squared distance
//!   between distinct rows of the standardized sample (its first 2,000 rows; the survey's
//!   sample is already in random order). For the Gaussian kernel exp(−gamma‖x−y‖²) this is
//!   a bandwidth σ² = H/2.
//! * C and epsilon by Cherkassky & Ma (Neural Networks 17, 2004):
//!   `C = max(|ȳ + 3σ_y|, |ȳ − 3σ_y|)`, `epsilon = 3σ̂·√(ln n / n)`, σ̂ the noise level from
//!   3-nearest-neighbour residuals.
//!
//! # Validation search ([`tune`])
//! The grid is the defaults times factors (by default gamma × {¼, ½, 1, 2, 4},
//! C × {1/10, 1/√10, 1, √10, 10}, epsilon × {¼, 1, 4}). Each candidate is a linear
//! epsilon-SVR on D random features, trained by dual coordinate descent (Ho & Lin, JMLR
//! 2012) and scored by k-fold (default 3) or holdout validation RMSE in target units.
//! Successive halving (Jamieson & Talwalkar, AISTATS 2016) trains every candidate for a
//! few epochs, keeps the best 1/η (η = 3), and resumes the survivors with η times the
//! epochs, up to the full budget; the defaults are never pruned, so the result is never
//! worse than them on validation. Candidates with the same gamma share their mapped
//! features, and along increasing C each starts from the previous C's duals (warm start).
//! Then D doubles from its start (256) while the winner's validation error falls by at
//! least 1% a step. Everything is seeded: the same data, options and seed give the same
//! report (apart from the timing), whatever the thread count.
//!
//! # Limits
//! * Memory: the mapped rows of one gamma and one fold are held at a time
//!   (about 8·n·D bytes), plus each surviving candidate's duals (8 bytes a training row).
//! * Candidates are compared at equal epoch budgets (passes), not at equal optimality.
//!   With the squared loss each pass is a Newton iteration (Hessian from a sample of
//!   4,096 fold rows), which reaches the gap tolerance in a few passes whatever C; with
//!   the linear loss and a large C coordinate descent may not reach it within
//!   `max_epochs`, which favours smaller C. Successive halving ranks candidates by their
//!   early errors and can miss the full grid's winner when early and final rankings
//!   differ: on Friedman #1, 20,000 rows, a 5 × 5 × 3 grid at D = 1,024 (squared loss,
//!   Newton passes) it chose the full grid's gamma and C with a larger epsilon, 0.18%
//!   worse on validation, for a quarter of the time; with the dual solver (2,000 rows)
//!   the winner was 4% worse.

mod halving;
mod heatmap;
mod options;
mod report;
mod search;

pub use crate::heuristics::{cherkassky_ma, knn_noise_sd, median_gamma, Defaults};
pub use halving::rung_budgets;
pub use heatmap::heatmap_svg;
pub use options::{TuneOptions, Validation};
pub use report::{render_tune, CandidateResult, ComponentStep, TuneReport};

use std::time::Instant;

use ndarray::{ArrayView1, ArrayView2};

use crate::error::{Error, Result};
use crate::scale::Standardizer;

use halving::{by_error, Candidate, Search};
use search::{run_seed, FoldData, Folds, Run};

/// Chooses gamma, C, epsilon and D for inputs `x` (rows × columns, raw units; they are
/// standardized here by the sample's own mean and deviation) and targets `y` by
/// validation on these rows.
///
/// # Errors
/// Invalid options, such as a non-positive grid value ([`Error::InvalidParameter`]); too
/// few rows for the validation scheme or a constant target ([`Error::NoRows`]);
/// non-finite inputs ([`Error::NonFinite`]) or targets ([`Error::NonFiniteTarget`]);
/// every candidate diverging ([`Error::TuneFailed`], naming the best attempt).
///
/// # Panics
/// If `x` and `y` differ in rows.
#[track_caller]
pub fn tune(x: ArrayView2<f64>, y: ArrayView1<f64>, opts: &TuneOptions) -> Result<TuneReport> {
    assert_eq!(
        x.nrows(),
        y.len(),
        "tune: x has {} rows but y has {}",
        x.nrows(),
        y.len()
    );
    let t0 = Instant::now();
    opts.validate()?;
    let n = x.nrows();
    if n == 0 {
        return Err(Error::NoRows("the tuning sample has zero rows".into()));
    }
    for ((row, column), v) in x.indexed_iter() {
        if !v.is_finite() {
            return Err(Error::NonFinite { row, column });
        }
    }
    if let Some(row) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFiniteTarget { row });
    }
    let mut xs = x.to_owned();
    Standardizer::fit(x).apply(xs.view_mut());
    let folds = Folds::new(xs.view(), y, opts.validation, opts.seed)?;
    let mean = y.sum() / n as f64;
    let sd = (y.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n as f64).sqrt();
    let defaults = Defaults::from_sample(
        xs.view(),
        y,
        mean,
        sd,
        opts.rows_total.unwrap_or(n as u64).max(2),
    )?;

    let k = folds.ranges.len();
    let mut cands = Vec::new();
    for (gi, gf) in opts.gamma_factors.iter().enumerate() {
        for (ci, cf) in opts.c_factors.iter().enumerate() {
            for (ei, ef) in opts.epsilon_factors.iter().enumerate() {
                let mut c = Candidate::new(
                    defaults.gamma * gf,
                    defaults.c * cf,
                    defaults.epsilon * ef,
                    Some([gi, ci, ei]),
                    k,
                );
                c.protected = *gf == 1.0 && *cf == 1.0 && *ef == 1.0;
                cands.push(c);
            }
        }
    }
    for c in &cands {
        if !(c.gamma.is_finite() && c.c.is_finite() && c.epsilon.is_finite()) {
            return Err(Error::invalid(
                "grid",
                format!(
                    "a grid point overflows: gamma = {}, C = {}, epsilon = {}",
                    c.gamma, c.c, c.epsilon
                ),
            ));
        }
    }
    if !cands.iter().any(|c| c.protected) {
        let mut c = Candidate::new(defaults.gamma, defaults.c, defaults.epsilon, None, k);
        c.protected = true;
        cands.push(c);
    }
    let search = Search {
        folds: &folds,
        opts,
        components: opts.components,
    };
    let (alive, budgets) = search.run(&mut cands)?;
    let winner = winner(&cands, &alive)?;
    let default_index = cands
        .iter()
        .position(|c| c.protected)
        .expect("defaults are a candidate");
    let default_error = cands[default_index].error;

    // Search over D at the winner's gamma, C and epsilon, cold starts, full budget.
    let mut steps = vec![ComponentStep {
        components: opts.components,
        error: cands[winner].error,
    }];
    let mut chosen = 0;
    for &d in opts.component_ladder().iter().skip(1) {
        let error = cross_validate(&search, &cands[winner], d)?;
        let prev = steps[chosen].error;
        steps.push(ComponentStep {
            components: d,
            error,
        });
        if !(error.is_finite() && prev - error >= opts.components_tol * prev) {
            break;
        }
        chosen = steps.len() - 1;
    }

    let mut ranked: Vec<usize> = (0..cands.len()).collect();
    by_error(&cands, &mut ranked);
    ranked.sort_by_key(|&i| std::cmp::Reverse(cands[i].rung));
    let result = |i: usize| {
        let c = &cands[i];
        CandidateResult {
            gamma: c.gamma,
            c: c.c,
            epsilon: c.epsilon,
            grid: c.grid,
            error: c.error,
            rung: c.rung,
            epochs: c.epochs,
            converged: c.converged,
            is_default: c.protected,
        }
    };
    Ok(TuneReport {
        rows: n,
        validation: opts.validation,
        defaults,
        default_error,
        gamma_factors: opts.gamma_factors.clone(),
        c_factors: opts.c_factors.clone(),
        epsilon_factors: opts.epsilon_factors.clone(),
        best: result(winner),
        candidates: ranked.iter().map(|&i| result(i)).collect(),
        rung_epochs: budgets,
        epochs_total: cands.iter().map(|c| c.work as u64).sum(),
        components: steps.clone(),
        chosen_components: steps[chosen].components,
        chosen_error: steps[chosen].error,
        grid_components: opts.components,
        seconds: t0.elapsed().as_secs_f64(),
    })
}

/// The best of the last rung, or a typed error naming the best attempt when every
/// candidate's validation error is non-finite.
fn winner(cands: &[Candidate], alive: &[usize]) -> Result<usize> {
    let w = alive[0];
    let c = &cands[w];
    if c.error.is_finite() {
        return Ok(w);
    }
    Err(Error::TuneFailed(format!(
        "no candidate gave a finite validation error; best attempt: gamma = {:.4e}, C = {:.4e}, epsilon = {:.4e}, validation RMSE {} after {} epochs (converged: {}); try smaller C values or larger epsilon values",
        c.gamma, c.c, c.epsilon, c.error, c.epochs, c.converged
    )))
}

/// Validation RMSE of one candidate at D = `d`, every fold trained from zero with the
/// full epoch budget.
fn cross_validate(search: &Search, cand: &Candidate, d: usize) -> Result<f64> {
    let map = search.map(cand.gamma, d)?;
    let settings = cand.settings(search.opts);
    let mut sse = 0.0;
    let mut rows = 0;
    for f in 0..search.folds.ranges.len() {
        let fold = FoldData::new(search.folds, f, map.as_ref())?;
        let mut run = Run::cold(&fold, run_seed(search.opts.seed, usize::MAX, f));
        run.advance(&fold, &settings, search.opts.max_epochs);
        sse += run.validation_sse(&fold);
        rows += fold.y_val.len();
    }
    Ok((sse / rows as f64).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_candidate_failing_is_a_typed_error_naming_the_best_attempt() {
        // common practice: a search whose every candidate diverged must not return a choice.
        let mut a = Candidate::new(0.5, 2.0, 0.1, None, 3);
        a.epochs = 7;
        let mut b = Candidate::new(0.25, 4.0, 0.1, None, 3);
        b.error = f64::INFINITY;
        let cands = vec![a, b];
        let mut alive = vec![0, 1];
        by_error(&cands, &mut alive);
        assert_eq!(alive, vec![1, 0], "NaN ranks after infinity");
        match winner(&cands, &alive) {
            Err(Error::TuneFailed(m)) => {
                assert!(
                    m.contains("gamma = 2.5000e-1") && m.contains("C = 4.0000e0"),
                    "{m}"
                )
            }
            other => panic!("expected TuneFailed, got {other:?}"),
        }
        let mut ok = cands.clone();
        ok[0].error = 3.0;
        let mut alive = vec![0, 1];
        by_error(&ok, &mut alive);
        assert_eq!(winner(&ok, &alive).unwrap(), 0);
    }
}
