//! Successive halving over the candidate grid (Jamieson & Talwalkar, "Non-stochastic
//! best arm identification and hyperparameter optimization", AISTATS 2016): every
//! surviving candidate is trained to the rung's epoch budget (resuming where it stopped),
//! scored on the validation folds, and only the best 1/η go on to a budget η times
//! larger. Within a rung, candidates sharing gamma (hence the mapped features) and
//! epsilon form a chain along increasing C, each started from its neighbour's duals.

use ndarray::ArrayView2;
use rayon::prelude::*;

use crate::error::Result;
use crate::features::{build_map, MapSpec};
use crate::kernel::Kernel;
use crate::solver::dcd::DcdSettings;

use super::options::TuneOptions;
use super::search::{run_seed, FoldData, Folds, Run};

/// One point of the grid and what its runs reached.
#[derive(Clone, Debug)]
pub(crate) struct Candidate {
    pub gamma: f64,
    pub c: f64,
    pub epsilon: f64,
    /// Position in the grid (gamma, C, epsilon factor indices); `None` off the grid.
    pub grid: Option<[usize; 3]>,
    /// Never pruned (the defaults, so the result is never worse than them on validation).
    pub protected: bool,
    /// One resumable run per fold (`None` before the first rung or after pruning).
    pub runs: Vec<Option<Run>>,
    /// Squared validation error per fold at the last rung run.
    pub sse: Vec<f64>,
    /// Pooled validation RMSE at the last rung run (NaN if a run diverged).
    pub error: f64,
    /// Last rung this candidate was trained in.
    pub rung: usize,
    /// Epochs per fold at the last rung run (largest over folds).
    pub epochs: usize,
    /// Every fold's run reached the gap tolerance.
    pub converged: bool,
    /// Epochs summed over folds (the work spent on this candidate).
    pub work: usize,
}

impl Candidate {
    pub fn new(
        gamma: f64,
        c: f64,
        epsilon: f64,
        grid: Option<[usize; 3]>,
        folds: usize,
    ) -> Candidate {
        Candidate {
            gamma,
            c,
            epsilon,
            grid,
            protected: false,
            runs: vec![None; folds],
            sse: vec![f64::NAN; folds],
            error: f64::NAN,
            rung: 0,
            epochs: 0,
            converged: false,
            work: 0,
        }
    }

    pub(crate) fn settings(&self, opts: &TuneOptions) -> DcdSettings {
        DcdSettings {
            c: self.c,
            epsilon: self.epsilon,
            loss: opts.loss,
            shrinking: true,
            sweeps_per_block: opts.sweeps_per_epoch,
            tol: opts.tol,
            max_epochs: opts.max_epochs,
            seed: opts.seed,
        }
    }
}

/// Epoch budgets of the rungs for `n` candidates: rungs are added until at most η
/// candidates remain, the last one gets `max_epochs` and each earlier one 1/η of the
/// next (at least one epoch). Without halving: one rung at `max_epochs`.
pub fn rung_budgets(n: usize, eta: usize, max_epochs: usize, halving: bool) -> Vec<usize> {
    let mut prunes = 0u32;
    let mut left = n;
    if halving {
        while left > eta {
            left = left.div_ceil(eta);
            prunes += 1;
        }
    }
    (0..=prunes)
        .map(|r| {
            let div = (eta as u64).saturating_pow(prunes - r);
            ((max_epochs as u64 / div).max(1)) as usize
        })
        .collect()
}

/// Orders candidates by validation error, failed (NaN) ones last, ties by position.
pub(crate) fn by_error(cands: &[Candidate], idx: &mut [usize]) {
    idx.sort_by(|&a, &b| {
        let ea = cands[a].error;
        let eb = cands[b].error;
        ea.is_nan()
            .cmp(&eb.is_nan())
            .then(ea.total_cmp(&eb))
            .then(a.cmp(&b))
    });
}

/// Shared inputs of every rung.
pub(crate) struct Search<'a> {
    pub folds: &'a Folds,
    pub opts: &'a TuneOptions,
    /// D of the grid search.
    pub components: usize,
}

impl Search<'_> {
    /// The feature map for one gamma at D = `components`.
    pub fn map(
        &self,
        gamma: f64,
        components: usize,
    ) -> Result<Box<dyn crate::features::FeatureMap>> {
        let kernel = Kernel::new(self.opts.kernel, gamma)?;
        let spec = MapSpec {
            components,
            seed: self.opts.seed,
            ..self.opts.map.clone()
        };
        let x: ArrayView2<f64> = self.folds.x.view();
        build_map(&spec, kernel, x.ncols(), Some(x))
    }

    /// Trains the candidates `alive` to `budget` epochs on every fold, resuming their
    /// runs, and sets their validation errors.
    pub fn run_rung(
        &self,
        cands: &mut [Candidate],
        alive: &[usize],
        rung: usize,
        budget: usize,
    ) -> Result<()> {
        let mut gammas: Vec<f64> = alive.iter().map(|&i| cands[i].gamma).collect();
        gammas.sort_by(f64::total_cmp);
        gammas.dedup();
        for &g in &gammas {
            let map = self.map(g, self.components)?;
            for f in 0..self.folds.ranges.len() {
                let fold = FoldData::new(self.folds, f, map.as_ref())?;
                // Chains of equal epsilon, each in increasing C.
                let mut members: Vec<usize> = alive
                    .iter()
                    .copied()
                    .filter(|&i| cands[i].gamma == g)
                    .collect();
                members.sort_by(|&a, &b| {
                    cands[a]
                        .epsilon
                        .total_cmp(&cands[b].epsilon)
                        .then(cands[a].c.total_cmp(&cands[b].c))
                        .then(a.cmp(&b))
                });
                let mut chains: Vec<Vec<Slot>> = Vec::new();
                for &i in &members {
                    let slot = Slot {
                        index: i,
                        run: cands[i].runs[f].take(),
                        settings: cands[i].settings(self.opts),
                        sse: f64::NAN,
                    };
                    match chains.last_mut() {
                        Some(ch) if cands[ch[0].index].epsilon == cands[i].epsilon => ch.push(slot),
                        _ => chains.push(vec![slot]),
                    }
                }
                let warm = self.opts.warm_start;
                let seed = self.opts.seed;
                chains.par_iter_mut().for_each(|chain| {
                    for k in 0..chain.len() {
                        let (before, rest) = chain.split_at_mut(k);
                        let slot = &mut rest[0];
                        let mut run = match slot.run.take() {
                            Some(r) => r,
                            None => match before.last().and_then(|p| p.run.as_ref()) {
                                Some(prev) if warm => Run::warm(
                                    prev,
                                    &fold,
                                    &slot.settings,
                                    run_seed(seed, slot.index, f),
                                ),
                                _ => Run::cold(&fold, run_seed(seed, slot.index, f)),
                            },
                        };
                        run.advance(&fold, &slot.settings, budget);
                        slot.sse = run.validation_sse(&fold);
                        slot.run = Some(run);
                    }
                });
                for slot in chains.into_iter().flatten() {
                    let c = &mut cands[slot.index];
                    c.sse[f] = slot.sse;
                    c.runs[f] = slot.run;
                }
            }
        }
        let n_val: usize = self.folds.ranges.iter().map(|r| r.len()).sum();
        for &i in alive {
            let c = &mut cands[i];
            c.error = (c.sse.iter().sum::<f64>() / n_val as f64).sqrt();
            c.rung = rung;
            c.epochs = c.runs.iter().flatten().map(|r| r.epochs).max().unwrap_or(0);
            c.converged = c.runs.iter().flatten().all(|r| r.converged);
            c.work = c.runs.iter().flatten().map(|r| r.epochs).sum();
        }
        Ok(())
    }

    /// Runs every rung; returns the candidates alive at the last one, best first, and
    /// the budgets used.
    pub fn run(&self, cands: &mut [Candidate]) -> Result<(Vec<usize>, Vec<usize>)> {
        let o = self.opts;
        let budgets = rung_budgets(cands.len(), o.eta, o.max_epochs, o.halving);
        let mut alive: Vec<usize> = (0..cands.len()).collect();
        for (r, &budget) in budgets.iter().enumerate() {
            self.run_rung(cands, &alive, r, budget)?;
            by_error(cands, &mut alive);
            if r + 1 < budgets.len() {
                let keep = alive.len().div_ceil(o.eta);
                let (kept, pruned) = alive.split_at(keep);
                let mut next = kept.to_vec();
                for &i in pruned {
                    if cands[i].protected {
                        next.push(i);
                    } else {
                        cands[i].runs.iter_mut().for_each(|r| *r = None);
                    }
                }
                alive = next;
            }
        }
        Ok((alive, budgets))
    }
}

/// A candidate's run on one fold while its chain is worked on.
struct Slot {
    index: usize,
    run: Option<Run>,
    settings: DcdSettings,
    sse: f64,
}
