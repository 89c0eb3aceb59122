//! The epoch loop shared by every solver: one pass an epoch through a [`Strategy`], the
//! holdout check, and the stopping rules (certified gap, holdout patience, precision,
//! epoch limit).

use ndarray::{s, Array1, ArrayView1};

use super::barrier::BarrierStrategy;
use super::dual::DualStrategy;
use super::newton::NewtonStrategy;
use super::strategy::{PassContext, Strategy};
use super::{objective, EpochRecord, Method, StopReason, TrainObserver, TrainOutcome, Trainer};
use crate::error::Result;
use crate::solver::cache::{PassCache, HOLDOUT_KEPT};
use crate::solver::dcd::Objective;
use crate::solver::source::BlockSource;
use crate::solver::stream::Streamer;

impl Trainer<'_> {
    /// Runs the chosen solver over `source` until a stopping rule fires.
    pub fn run(
        &self,
        source: &dyn BlockSource,
        observer: &dyn TrainObserver,
    ) -> Result<TrainOutcome> {
        self.settings.validate()?;
        let dcd = self.settings.dcd.in_standard_units(self.target.sd);
        let dim = self.map.output_dim();
        let method = self.settings.method.resolve(dcd.loss);
        let expected_holdout = self.rows_total as f64 * self.settings.holdout;
        let streamer = Streamer {
            scaler: self.scaler,
            map: self.map,
            mean: self.target.mean,
            sd: self.target.sd,
            holdout: self.settings.holdout,
            holdout_keep: (HOLDOUT_KEPT as f64 / expected_holdout.max(1.0)).min(1.0),
            seed: self.settings.dcd.seed,
            epsilon: self.settings.dcd.epsilon,
            pool: self.pool,
            lazy: method == Method::Newton,
        };
        let mut strategy: Box<dyn Strategy> = match method {
            Method::Newton => {
                let expected = (self.rows_total as f64 * (1.0 - self.settings.holdout)).max(1.0);
                Box::new(NewtonStrategy::new(
                    dim,
                    (self.settings.hessian_rows as f64 / expected).min(1.0),
                    self.settings.dcd.seed,
                ))
            }
            Method::Barrier => Box::new(BarrierStrategy::new(dim, dcd.c, dcd.epsilon)),
            _ => Box::new(DualStrategy::new(
                dim,
                self.rows_total as usize,
                self.settings.dcd.seed,
                self.settings.block_rows,
            )),
        };
        let ctx = PassContext {
            streamer: &streamer,
            source,
            observer,
            dcd: &dcd,
            pool: self.pool,
        };
        // The barrier method's iterates follow the central path of a smoothed problem
        // whose holdout error need not fall pass by pass; only its certificate stops it.
        let patience = match method {
            Method::Barrier => 0,
            _ => self.settings.patience,
        };
        let mut cache = PassCache::new(source.units(), self.settings.memory_bytes);
        let mut history = Vec::new();
        let mut best: Option<(f64, Array1<f64>, Option<Objective>)> = None;
        let mut since_best = 0usize;
        let mut updates_total = 0u64;
        let mut stop = StopReason::MaxEpochs;
        let mut certified: Option<(Array1<f64>, Objective)> = None;
        let mut last: Option<(Array1<f64>, Objective)> = None;

        for epoch in 1..=self.settings.dcd.max_epochs {
            ctx.check_stop()?;
            let t0 = std::time::Instant::now();
            observer.pass_started(epoch, if epoch == 1 { 0 } else { cache.rows_read });
            let (out, resident_blocks) = strategy.epoch(&ctx, &mut cache)?;
            updates_total += out.updates;
            let current = strategy.weights().clone();
            let holdout = streamer.holdout_metrics(current.view(), &cache);
            let record = EpochRecord {
                epoch,
                objective: out.objective,
                holdout,
                updates: out.updates,
                step: out.step,
                seconds: t0.elapsed().as_secs_f64(),
                resident_blocks,
            };
            observer.epoch_finished(&record);
            history.push(record);
            let current_cert = (out.certified == current).then_some(out.objective);
            if current_cert.is_some() {
                last = Some((current.clone(), out.objective));
            }
            if out.final_ok && dcd.tol > 0.0 && out.objective.gap <= dcd.tol {
                certified = Some((out.certified, out.objective));
                stop = StopReason::Gap;
                break;
            }
            if out.stalled {
                stop = StopReason::Precision;
                break;
            }
            if let Some(m) = holdout {
                let improved = best
                    .as_ref()
                    .is_none_or(|(b, _, _)| m.rmse < b * (1.0 - 1e-4));
                if improved {
                    best = Some((m.rmse, current, current_cert));
                    since_best = 0;
                } else {
                    since_best += 1;
                    if patience > 0 && since_best >= patience {
                        stop = StopReason::Holdout;
                        break;
                    }
                }
            }
        }

        let current = strategy.weights().clone();
        let (w_solver, objective) = match (stop, certified, best) {
            (StopReason::Gap, Some(c), _) => c,
            (StopReason::Holdout, _, Some((_, w, Some(obj)))) => (w, obj),
            (StopReason::Holdout, _, Some((_, w, None))) => {
                let obj = evaluate(strategy.as_ref(), &ctx, &mut cache, w.view())?;
                (w, obj)
            }
            _ => match last {
                Some((w, obj)) if w == current => (w, obj),
                _ => {
                    let obj = evaluate(strategy.as_ref(), &ctx, &mut cache, current.view())?;
                    (current, obj)
                }
            },
        };
        let holdout = streamer.holdout_metrics(w_solver.view(), &cache);
        let sd = self.target.sd;
        let weights = w_solver.slice(s![..dim]).mapv(|v| v * sd);
        let intercept = self.target.mean + sd * w_solver[dim];
        let rows_trained = cache.rows_trained;
        Ok(TrainOutcome {
            weights,
            intercept,
            objective,
            method,
            history,
            stop,
            rows_trained,
            rows_holdout: cache.holdout_rows(),
            holdout_kept: cache.holdout_kept() as u64,
            holdout,
            support_share: strategy.support_share(rows_trained),
            updates: updates_total,
            holdout_inputs: cache.holdout_inputs(10_000),
            holdout_rows: cache.holdout_all(),
        })
    }
}

/// Exact primal/dual certificate for `w` (one pass; resident blocks are not re-read).
/// When `w` is not the solver's own point (holdout stop), the dual value is a bound, so
/// the gap is an upper bound.
fn evaluate(
    strategy: &dyn Strategy,
    ctx: &PassContext,
    cache: &mut PassCache,
    w: ArrayView1<f64>,
) -> Result<Objective> {
    let mut loss = 0.0;
    let streamer = ctx.streamer;
    ctx.streamer
        .pass(ctx.source, &ctx.all_units(), cache, &|_| {}, &mut |mb| {
            ctx.check_stop()?;
            loss += super::loss_sum(
                w,
                mb.mapped(streamer.map, streamer.pool).view(),
                mb.y.view(),
                ctx.dcd,
            );
            Ok(())
        })?;
    let dual = strategy.dual_bound(ctx.dcd);
    Ok(objective(0.5 * w.dot(&w) + ctx.dcd.c * loss, dual))
}
