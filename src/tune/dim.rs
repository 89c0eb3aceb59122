//! The choice of D: the chosen gamma, C and epsilon on the feature map at D = `dim`,
//! 2·`dim`, … until the map's validation RMSE agrees with the reference machine's (the
//! exact machine, or the map the second stage scored on), on the folds that made the
//! choice.
//!
//! For the squared loss the fit on D mapped features is solved through the Gram matrix
//! of the mapped rows or in the primal, whichever is smaller
//! ([`super::refine::score_on_map`]). For the linear loss the fold's mapped
//! rows are trained by dual coordinate descent (Ho & Lin, JMLR 2012).

use crate::error::Result;
use crate::features::{build_map, FeatureMap, MapSpec};
use crate::kernel::Kernel;
use crate::solver::dcd::{DcdSettings, Loss};

use super::grid::ExactFold;
use super::options::TuneOptions;
use super::refine::score_on_map;
use super::report::DimStep;
use super::search::{run_seed, FoldData, Folds, Run};

/// The map for `gamma` at D = `dim`, landmarks (Nyström) from the sample `x`.
fn map(opts: &TuneOptions, gamma: f64, dim: usize, folds: &Folds) -> Result<Box<dyn FeatureMap>> {
    let kernel = Kernel::new(opts.kernel, gamma)?;
    let spec = MapSpec {
        dim,
        seed: opts.seed,
        ..opts.map.clone()
    };
    build_map(&spec, kernel, folds.x.ncols(), Some(folds.x.view()))
}

/// Pooled validation RMSE of (gamma, C, epsilon) on the map with D = `dim`.
fn map_error(
    opts: &TuneOptions,
    folds: &Folds,
    exact: &[ExactFold],
    (gamma, c, epsilon): (f64, f64, f64),
    dim: usize,
) -> Result<f64> {
    let (mut sse, mut rows) = (0.0, 0usize);
    match opts.loss {
        Loss::L2 => {
            let s = score_on_map(
                opts,
                folds,
                exact,
                gamma,
                dim,
                &[(1.0, c)],
                &[(1.0, epsilon)],
                1.0,
            )?;
            sse = s[0].sse.iter().sum();
            rows = exact.iter().map(|f| f.y_val.len()).sum();
        }
        Loss::L1 => {
            let map = map(opts, gamma, dim, folds)?;
            let settings = DcdSettings {
                c,
                epsilon,
                loss: Loss::L1,
                shrinking: true,
                sweeps_per_block: opts.sweeps_per_epoch,
                tol: opts.tol,
                max_epochs: opts.max_epochs,
                seed: opts.seed,
            };
            for f in 0..folds.ranges.len() {
                let fold = FoldData::new(folds, f, map.as_ref())?;
                let mut run = Run::cold(&fold, run_seed(opts.seed, usize::MAX, f));
                run.advance(&fold, &settings, opts.max_epochs);
                sse += run.validation_sse(&fold);
                rows += fold.y_val.len();
            }
        }
    }
    Ok((sse / rows.max(1) as f64).sqrt())
}

/// Tries D on the ladder until one agrees with `exact_error` (within `dim_tol`); returns
/// the steps tried and the index of the chosen one (the first agreeing, else the
/// largest tried). `known` is a D whose error on these folds is already measured.
pub(crate) fn choose_dim(
    opts: &TuneOptions,
    folds: &Folds,
    exact: &[ExactFold],
    params: (f64, f64, f64),
    exact_error: f64,
    known: Option<(usize, f64)>,
) -> Result<(Vec<DimStep>, usize)> {
    let mut steps = Vec::new();
    for d in opts.dim_ladder() {
        let error = match known {
            Some((k, e)) if k == d => e,
            _ => map_error(opts, folds, exact, params, d)?,
        };
        let agrees = error.is_finite() && error <= exact_error * (1.0 + opts.dim_tol);
        steps.push(DimStep {
            dim: d,
            error,
            agrees,
        });
        if agrees {
            break;
        }
    }
    let chosen = steps.len() - 1;
    Ok((steps, chosen))
}
