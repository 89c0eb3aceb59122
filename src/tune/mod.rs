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
//! gamma, C and epsilon are chosen on the exact kernel machine, so that the feature
//! map's approximation error does not bias the comparison (a narrow kernel needs more
//! features than a wide one): on a seeded random subset of the sample (`exact_rows`,
//! default 2,000), by k-fold (default 3) or holdout validation RMSE in target units.
//! For the squared loss the exact machine is solved by primal Newton on the Gram matrix
//! (Chapelle, Neural Computation 19, 2007; [`exact`]), warm-started along increasing C;
//! for the linear loss by SMO ([`crate::solver::smo`]). Every candidate is trained to
//! its optimality conditions before it is compared: nothing is pruned on a partly
//! trained model.
//!
//! The grid starts as the defaults times factors (gamma × {¼, ½, 1, 2, 4},
//! C × {1/10, 1/√10, 1, √10, 10}, epsilon × {¼, 1, 4}) and grows past any edge that
//! holds the lowest error, one step at that edge's spacing, while the number of
//! candidates stays within `max_fits` (a practitioner's rule: a minimum on the edge of a
//! grid is not a minimum). Each candidate's error comes with its standard error over
//! folds, and the choice is the simplest candidate (smallest gamma, then smallest C,
//! then largest epsilon) within one standard error of the lowest (the one-standard-error
//! rule; Breiman et al., *Classification and Regression Trees*, 1984; Hastie,
//! Tibshirani & Friedman, *The Elements of Statistical Learning*, §7.10), where the
//! standard error is that of the candidate's per-fold differences to the lowest (paired
//! over folds: the folds' own difficulty cancels, which with 3 folds is most of the
//! spread). The defaults are a candidate, so the choice is never worse than them on
//! validation by more than that standard error.
//!
//! Then D doubles from `dim` (256) up to `max_dim` until the chosen machine on the
//! feature map agrees with the exact one (validation RMSE at most `dim_tol` above it):
//! the smallest such D is chosen. Everything is seeded: the same data, options and seed
//! give the same report (apart from the timing), whatever the thread count.
//!
//! # Limits
//! * The exact machine's cost grows like the cube of `exact_rows` (one Cholesky
//!   factorization per Newton step) and its memory like the square (a Gram matrix per
//!   fold). A narrower kernel's advantage that shows only with more rows than
//!   `exact_rows` is not seen.
//! * For C, the squared loss uses solver units (unit-free, as the fit does: the
//!   Cherkassky & Ma value divided by the target's standard deviation).

mod dim;
pub mod exact;
mod grid;
mod heatmap;
mod hint;
mod options;
mod report;
mod search;
mod select;

pub use crate::heuristics::{cherkassky_ma, knn_noise_sd, median_gamma, Defaults};
pub use heatmap::heatmap_svg;
pub use hint::{gamma_hint, gamma_hint_for_model, GammaHint, HINT_FACTOR, HINT_GAIN, HINT_ROWS};
pub use options::{TuneOptions, Validation};
pub use report::{render_tune, CandidateResult, DimStep, TuneReport};

use std::time::Instant;

use ndarray::{ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::data::splitmix64;
use crate::error::{Error, Result};
use crate::scale::Standardizer;
use crate::solver::dcd::Loss;

use grid::ExactFold;
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
    let search = select::search(opts, &exact, &defaults)?;

    let grid_seconds = t0.elapsed().as_secs_f64();
    let b = &search.best;
    let (dims, chosen) = dim::choose_dim(opts, &folds, &exact, (b.gamma, b.c, b.epsilon), b.error)?;
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
        best: search.best,
        candidates: search.candidates,
        max_fits: opts.max_fits,
        extensions: search.extensions,
        budget_reached: search.budget_reached,
        chosen_dim: dims[chosen].dim,
        chosen_error: dims[chosen].error,
        dims,
        dim_tol: opts.dim_tol,
        grid_seconds,
        seconds: t0.elapsed().as_secs_f64(),
    })
}
