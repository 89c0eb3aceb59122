//! The choice of map and D: the chosen gamma, C and epsilon on the feature map at D =
//! `dim`, 2·`dim`, … until the map's validation RMSE agrees with the reference machine's
//! (the exact machine, or the map the second stage scored on), on the folds that made the
//! choice.
//!
//! Random maps (Fourier, orthogonal) cost O(D · inputs) a row; their kernel error
//! shrinks like 1/√D only (Rahimi & Recht, NIPS 2007), so a narrow kernel on a small
//! table can stay several percent from the exact machine at any D a fit can afford. When
//! the options' random map does not agree at the largest D, Nyström maps are tried on
//! the same ladder (Williams & Seeger, NIPS 2001; landmarks from each fold's training
//! rows), which cost O(D²) a row but reproduce the exact machine once every training row
//! is a landmark; the ladder stops there.
//!
//! For the squared loss the fit on D mapped features is solved through the Gram matrix
//! of the mapped rows or in the primal, whichever is smaller
//! ([`super::refine::score_on_map`]). For the linear loss the fold's mapped
//! rows are trained by dual coordinate descent (Ho & Lin, JMLR 2012).

use ndarray::Axis;

use crate::error::Result;
use crate::features::{build_map, MapKind, MapSpec};
use crate::kernel::Kernel;
use crate::solver::dcd::{DcdSettings, Loss};

use super::grid::ExactFold;
use super::options::TuneOptions;
use super::refine::score_on_map;
use super::report::DimStep;
use super::search::{run_seed, FoldData, Folds, Run};

/// Pooled validation RMSE of (gamma, C, epsilon) on the map `spec`.
fn map_error(
    opts: &TuneOptions,
    folds: &Folds,
    exact: &[ExactFold],
    (gamma, c, epsilon): (f64, f64, f64),
    spec: &MapSpec,
) -> Result<f64> {
    let (mut sse, mut rows) = (0.0, 0usize);
    match opts.loss {
        Loss::L2 => {
            let s = score_on_map(
                opts,
                folds,
                exact,
                gamma,
                spec,
                &[(1.0, c)],
                &[(1.0, epsilon)],
                1.0,
            )?;
            sse = s[0].sse.iter().sum();
            rows = exact.iter().map(|f| f.y_val.len()).sum();
        }
        Loss::L1 => {
            let kernel = Kernel::new(opts.kernel, gamma)?;
            let spec = MapSpec {
                seed: opts.seed,
                ..spec.clone()
            };
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
                // Landmarks (Nyström) from the fold's training rows only; random maps
                // ignore the rows.
                let train = folds.x.select(Axis(0), &folds.train_rows(f));
                let map = build_map(&spec, kernel, folds.x.ncols(), Some(train.view()))?;
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

/// The maps tried, in order: the options' map on the whole ladder, then (when it is a
/// random map and the fallback is on) Nyström up to the first D with every training
/// row of the largest fold as a landmark.
fn ladders(opts: &TuneOptions, train_rows: usize) -> Vec<(MapKind, Vec<usize>)> {
    let ladder = opts.dim_ladder();
    let mut out = vec![(opts.map.kind, ladder.clone())];
    if opts.map_fallback && opts.map.kind != MapKind::Nystrom {
        let mut nys = Vec::new();
        for d in ladder {
            nys.push(d);
            if d >= train_rows {
                break;
            }
        }
        out.push((MapKind::Nystrom, nys));
    }
    out
}

/// Tries maps and D on their ladders until one agrees with `exact_error` (within
/// `dim_tol`); returns the steps tried and the index of the chosen one: the first
/// agreeing, else the lowest error (ties to the step tried first, the cheaper). `known`
/// is a D of the options' map whose error on these folds is already measured.
pub(crate) fn choose_dim(
    opts: &TuneOptions,
    folds: &Folds,
    exact: &[ExactFold],
    params: (f64, f64, f64),
    exact_error: f64,
    known: Option<(usize, f64)>,
) -> Result<(Vec<DimStep>, usize)> {
    let train_rows = exact.iter().map(|f| f.x_train.nrows()).max().unwrap_or(0);
    let mut steps = Vec::new();
    for (kind, ladder) in ladders(opts, train_rows) {
        for d in ladder {
            let error = match known {
                Some((k, e)) if k == d && kind == opts.map.kind => e,
                _ => {
                    let spec = MapSpec {
                        kind,
                        dim: d,
                        ..opts.map.clone()
                    };
                    map_error(opts, folds, exact, params, &spec)?
                }
            };
            let agrees = error.is_finite() && error <= exact_error * (1.0 + opts.dim_tol);
            steps.push(DimStep {
                map: kind,
                dim: d,
                error,
                agrees,
            });
            if agrees {
                let chosen = steps.len() - 1;
                return Ok((steps, chosen));
            }
        }
    }
    let chosen = lowest(&steps);
    Ok((steps, chosen))
}

/// Index of the lowest finite error (the first of equals); the last step when none is
/// finite.
fn lowest(steps: &[DimStep]) -> usize {
    let mut best: Option<usize> = None;
    for (i, s) in steps.iter().enumerate() {
        if s.error.is_finite() && best.is_none_or(|b| s.error < steps[b].error) {
            best = Some(i);
        }
    }
    best.unwrap_or(steps.len().saturating_sub(1))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn step(dim: usize, error: f64) -> DimStep {
        DimStep {
            map: MapKind::Fourier,
            dim,
            error,
            agrees: false,
        }
    }

    #[test]
    fn without_agreement_the_lowest_error_is_chosen_and_ties_go_to_the_cheaper() {
        let s = [
            step(256, 3.0),
            step(512, 2.5),
            step(1024, 2.5),
            step(2048, f64::NAN),
        ];
        assert_eq!(lowest(&s), 1);
        assert_eq!(lowest(&[step(256, f64::NAN)]), 0);
    }

    #[test]
    fn nystrom_follows_a_random_map_and_stops_once_every_training_row_is_a_landmark() {
        let opts = TuneOptions {
            dim: 256,
            max_dim: 4096,
            ..TuneOptions::default()
        };
        let l = ladders(&opts, 800);
        assert_eq!(l[0], (MapKind::Fourier, vec![256, 512, 1024, 2048, 4096]));
        assert_eq!(l[1], (MapKind::Nystrom, vec![256, 512, 1024]));
        let keep = TuneOptions {
            map_fallback: false,
            ..opts.clone()
        };
        assert_eq!(ladders(&keep, 800).len(), 1);
        let nys = TuneOptions {
            map: MapSpec {
                kind: MapKind::Nystrom,
                ..MapSpec::default()
            },
            ..opts
        };
        assert_eq!(ladders(&nys, 800).len(), 1);
    }
}
