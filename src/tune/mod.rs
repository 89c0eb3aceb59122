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
//! gamma, C and epsilon are chosen in two stages, so that the feature map's
//! approximation error does not bias the comparison (a narrow kernel needs more
//! features than a wide one) and a small sample does not either.
//!
//! **The exact stage** runs on a seeded random subset of the sample (`exact_rows`,
//! default 1,000), by k-fold (default 3) or holdout validation RMSE in target units.
//! For the squared loss the exact machine is solved by primal Newton on the Gram matrix
//! (Chapelle, Neural Computation 19, 2007; [`exact`]), warm-started along increasing C;
//! for the linear loss by SMO ([`crate::solver::smo`]). Every candidate is trained to
//! its optimality conditions before it is compared: nothing is pruned on a partly
//! trained model. The grid starts as the defaults times factors (gamma × {¼, ½, 1, 2,
//! 4}, C × {1/10, 1/√10, 1, √10, 10}, epsilon × {¼, 1, 4}) and grows past an edge that
//! holds the lowest error, one step at that edge's spacing, when that error is clearly
//! (by more than the paired standard error) below its inner neighbour's, axis by axis
//! while the number of candidates stays within `max_fits` (a practitioner's rule: a
//! minimum on the edge of a grid is not a minimum; a flat axis does not spend the
//! budget).
//!
//! **The second stage** (squared loss, when the sample has more rows than the exact
//! stage used; `refine.rs`) starts from the exact stage's lowest candidate and scores
//! gamma × {1, 2, 4}, C × {1, √10, 10} around it, and the defaults, on up to
//! `refine_rows` sample rows with the same validation scheme: on the exact machine when
//! a fold's training rows are at most `refine_dim`, else on the map with D =
//! `refine_dim`. Measured (issue 14): on CCPP the exact stage's 1,000 rows prefer the
//! median-heuristic gamma and C × 0.3, while all training rows prefer gamma × 8; on
//! airfoil self-noise, gamma × 4 and C × 1 against C × √10. Its grid grows past edges as
//! the first one's does, within `refine_fits` candidates.
//!
//! In each stage every candidate's error comes with its standard error over folds, and
//! the choice is the simplest candidate (smallest gamma, then smallest C, then largest
//! epsilon) within one standard error of the lowest (the one-standard-error rule;
//! Breiman et al., *Classification and Regression Trees*, 1984; Hastie, Tibshirani &
//! Friedman, *The Elements of Statistical Learning*, §7.10), where the standard error
//! is that of the candidate's difference to the lowest, paired over the validation rows
//! (each row's difficulty cancels, and the spread comes from every row rather than
//! from 3 fold means). The
//! defaults are a candidate in both stages, so the choice is never worse than them on
//! validation by more than that standard error; the last stage that ran makes the
//! choice.
//!
//! Then D doubles from `dim` (256) up to `max_dim` until the chosen machine on the
//! feature map agrees with the machine that chose it (validation RMSE at most `dim_tol`
//! above it, on the same folds): the smallest such D is chosen. Everything is seeded:
//! the same data, options and seed give the same report (apart from the timing),
//! whatever the thread count.
//!
//! # Limits
//! * The exact machine's cost grows like the cube of `exact_rows` (one Cholesky
//!   factorization per Newton step) and its memory like the square (a Gram matrix per
//!   fold); the second stage's like `refine_rows` × `refine_dim`² (the features' Gram
//!   matrix per gamma and fold) and its memory like `refine_rows` × `refine_dim`.
//! * The second stage runs for the squared loss only; for the linear loss the exact
//!   stage chooses, and a narrower kernel's advantage that shows only with more rows
//!   than `exact_rows` is not seen.
//! * The second stage looks only toward narrower kernels and larger C from the exact
//!   stage's lowest (the direction measured), and moves past its grid's edges only
//!   within `refine_fits`.
//! * For C, the squared loss uses solver units (unit-free, as the fit does: the
//!   Cherkassky & Ma value divided by the target's standard deviation).

mod dim;
pub mod exact;
mod grid;
mod heatmap;
mod hint;
mod options;
mod refine;
mod report;
mod search;
mod select;

pub use crate::heuristics::{cherkassky_ma, knn_noise_sd, median_gamma, Defaults};
pub use heatmap::heatmap_svg;
pub use hint::{gamma_hint, gamma_hint_for_model, GammaHint, HINT_FACTOR, HINT_GAIN, HINT_ROWS};
pub use options::{TuneOptions, Validation};
pub use report::{render_tune, CandidateResult, DimStep, Refinement, TuneReport};

use std::time::Instant;

use ndarray::{ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::data::splitmix64;
use crate::error::{Error, Result};
use crate::scale::Standardizer;
use crate::solver::dcd::Loss;

use crate::kernel::Kernel;
use grid::{score_gamma, Axis3, ExactFold};
use search::Folds;

/// Chooses gamma, C, epsilon and D for inputs `x` (rows × columns, raw units; they are
/// standardized here by the sample's own mean and deviation) and targets `y` by
/// validation on these rows.
///
/// # Errors
/// Invalid options, such as a non-positive grid value ([`Error::InvalidParameter`]); too
/// few rows for the validation scheme or a constant target ([`Error::NoRows`]);
/// non-finite inputs ([`Error::NonFinite`]) or targets ([`Error::NonFiniteTarget`]);
/// every candidate failing ([`Error::TuneFailed`]).
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
    // A seeded random order, so that every prefix is a uniform sample of the rows.
    let mut order: Vec<usize> = (0..n).collect();
    order.shuffle(&mut ChaCha8Rng::seed_from_u64(splitmix64(
        opts.seed,
        0x0065_7861_6374,
    )));
    let xs = xs.select(Axis(0), &order);
    let ys = y.select(Axis(0), &order);
    let mean = ys.sum() / n as f64;
    let sd = (ys.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n as f64).sqrt();
    if !(sd > 0.0 && sd.is_finite()) {
        return Err(Error::NoRows(
            "the target is constant on the tuning sample; nothing to tune".into(),
        ));
    }
    let mut defaults = Defaults::from_sample(
        xs.view(),
        ys.view(),
        mean,
        sd,
        opts.rows_total.unwrap_or(n as u64).max(2),
    )?;
    // The squared loss's C is unit-free: the fit divides the rule's value by the sd.
    if opts.loss == Loss::L2 {
        defaults.c /= sd;
    }
    let m = n.min(opts.exact_rows);
    let folds = Folds::new(
        xs.slice(ndarray::s![..m, ..]),
        ys.slice(ndarray::s![..m]),
        opts.validation,
        opts.seed,
    )?;
    let exact = ExactFold::all(&folds);
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
    let score = |gf: f64, cs: &[(f64, f64)], eps: &[(f64, f64)]| {
        let kernel = Kernel::new(opts.kernel, defaults.gamma * gf)?;
        score_gamma(&exact, &kernel, opts.loss, cs, eps, gf)
    };
    let rows: Vec<usize> = exact.iter().map(|f| f.y_val.len()).collect();
    let search = select::search(axes, opts.max_fits, &rows, &[], &defaults, &score)?;
    let grid_seconds = t0.elapsed().as_secs_f64();

    // The second stage, on every sample row, when there are more than the exact stage
    // used (squared loss).
    let refined = if opts.loss == Loss::L2 && n.min(opts.refine_rows) > m && opts.refine_fits > 0 {
        Some(refine::refine(
            opts,
            xs.view(),
            ys.view(),
            &defaults,
            &search.lowest,
        )?)
    } else {
        None
    };
    let (dims, chosen) = match &refined {
        Some(r) => {
            let b = &r.search.best;
            let known = r.dim.map(|d| (d, b.error));
            dim::choose_dim(
                opts,
                &r.folds,
                &r.exact,
                (b.gamma, b.c, b.epsilon),
                b.error,
                known,
            )?
        }
        None => {
            let b = &search.best;
            dim::choose_dim(
                opts,
                &folds,
                &exact,
                (b.gamma, b.c, b.epsilon),
                b.error,
                None,
            )?
        }
    };
    let refine_seconds = t0.elapsed().as_secs_f64() - grid_seconds;
    let best = match &refined {
        Some(r) => r.search.best.clone(),
        None => search.best.clone(),
    };
    let refinement = refined.map(|r| Refinement {
        rows: r.folds.x.nrows(),
        dim: r.dim,
        gamma_factors: r.search.axes[0].clone(),
        c_factors: r.search.axes[1].clone(),
        candidates: r.search.candidates,
        lowest: r.search.lowest,
        default: r.search.default,
        max_fits: opts.refine_fits,
        extensions: r.search.extensions,
        budget_reached: r.search.budget_reached,
    });
    Ok(TuneReport {
        rows: n,
        exact_rows: m,
        validation: opts.validation,
        defaults,
        default: search.default,
        gamma_factors: search.axes[0].clone(),
        c_factors: search.axes[1].clone(),
        epsilon_factors: search.axes[2].clone(),
        lowest: search.lowest,
        best,
        candidates: search.candidates,
        max_fits: opts.max_fits,
        extensions: search.extensions,
        budget_reached: search.budget_reached,
        chosen_map: dims[chosen].map,
        chosen_dim: dims[chosen].dim,
        chosen_error: dims[chosen].error,
        dims,
        dim_tol: opts.dim_tol,
        refinement,
        grid_seconds,
        refine_seconds,
        seconds: t0.elapsed().as_secs_f64(),
    })
}
