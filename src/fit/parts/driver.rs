//! The driver's side of a fit in parts: the checks before any job, the plan from the
//! merged survey (defaults and feature map chosen exactly as the single-machine fit
//! chooses them), one Newton step per pass of the partitions, and the stopping rules of
//! `crate::solver::blocks` (certified gap, holdout patience, working precision, epoch
//! limit).

use std::time::Instant;

use ndarray::{s, Array1};

use super::pass::{plan_bytes, read_part, Head};
use crate::data::{MissingPolicy, SurveyPart};
use crate::error::{Error, Result};
use crate::features::map_from_parts;
use crate::fit::choose::{assemble, choose, report_of, Chosen};
use crate::fit::facts::{facts_of_survey, Facts};
use crate::fit::FitOptions;
use crate::metrics::{Metrics, MetricsAccumulator};
use crate::model::Model;
use crate::settings::thread_pool;
use crate::solver::blocks::{EpochRecord, Method, StopReason, TrainOutcome};
use crate::solver::dcd::{DcdSettings, Loss, Objective};
use crate::solver::newton::{NewtonState, PassStats, Step, SAMPLE_SALT};

/// Checks the options of a fit in parts before any job runs: every setting as the
/// single-machine fit checks it, and the solver, which must be the Newton method for the
/// squared loss (the only pass-based solver wired to parts so far).
///
/// # Errors
/// [`Error::InvalidParameter`] naming the setting.
pub fn check(opts: &FitOptions) -> Result<()> {
    if opts.loss == Loss::L1 {
        return Err(Error::invalid(
            "loss",
            "a fit in parts (on Spark) supports only the squared loss (l2) so far; fit the linear loss on one machine",
        ));
    }
    if !matches!(opts.method, Method::Auto | Method::Newton) {
        return Err(Error::invalid(
            "solver",
            "a fit in parts (on Spark) runs the Newton solver only; use solver 'auto' or 'newton'",
        ));
    }
    opts.validate()
}

/// The best holdout error so far: its value, the weights and their certificate.
type Best = (f64, Array1<f64>, Objective, Option<Metrics>);

/// A fit in parts, held by the driver between passes (see the module docs of
/// [`super`]).
pub struct PartsFit {
    opts: FitOptions,
    facts: Facts,
    chosen: Chosen,
    plan: Vec<u8>,
    pool: rayon::ThreadPool,
    dcd: DcdSettings,
    share: f64,
    inputs: usize,
    state: NewtonState,
    /// The pass opened last, awaiting its parts.
    open: Option<PassStats>,
    history: Vec<EpochRecord>,
    best: Option<Best>,
    since_best: usize,
    last: Option<(Array1<f64>, Objective, Option<Metrics>)>,
    stop: Option<StopReason>,
    support_share: f64,
    rows_trained: u64,
    rows_holdout: u64,
    t0: Instant,
    pass_t0: Instant,
}

impl PartsFit {
    /// Plans the fit from the merged survey parts: the facts (constant inputs dropped,
    /// scaler, target scale, sample), the defaults and the feature map. `missing` is the
    /// policy the partitions apply to the rows of every pass, as the survey did.
    ///
    /// # Errors
    /// As [`check`], and as the single-machine fit from its survey on.
    pub fn plan(survey: SurveyPart, opts: FitOptions, missing: MissingPolicy) -> Result<Self> {
        check(&opts)?;
        let t0 = Instant::now();
        if survey.rows() == 0 {
            return Err(Error::NoRows("the data has no rows".into()));
        }
        let all = survey.finish()?;
        let columns = all.columns.clone();
        let facts = facts_of_survey(all)?;
        let pool = thread_pool(opts.threads)?;
        let chosen = choose(&opts, &facts, &pool)?;
        let kept = facts
            .columns
            .features
            .iter()
            .map(|f| columns.features.iter().position(|g| g == f).unwrap_or(0))
            .collect();
        let head = Head {
            columns,
            kept,
            holdout: opts.holdout,
            seed: opts.seed,
            mean: facts.target.mean,
            sd: facts.target.sd,
            missing,
            epsilon: chosen.dcd.epsilon,
        };
        let dim = chosen.map.output_dim();
        let empty = outcome_of(
            Array1::zeros(dim),
            0.0,
            Objective {
                primal: 0.0,
                dual: 0.0,
                gap: 0.0,
            },
            Vec::new(),
        );
        let template = Model::new(
            facts.columns.clone(),
            facts.scaler.clone(),
            chosen.kernel,
            chosen.spec.clone(),
            map_from_parts(&chosen.map.to_parts())?,
            Array1::zeros(dim),
            facts.target.mean,
            chosen.dcd.clone(),
            report_of(&facts, &chosen, &empty, 1, 0.0),
        );
        let plan = plan_bytes(&head, &template)?;
        let settings = &chosen.settings;
        settings.validate()?;
        let dcd = settings.dcd.in_standard_units(facts.target.sd);
        let expected = (facts.rows_total as f64 * (1.0 - settings.holdout)).max(1.0);
        let share = (settings.hessian_rows as f64 / expected).min(1.0);
        Ok(PartsFit {
            inputs: facts.scaler.dim(),
            state: NewtonState::new(dim),
            opts,
            facts,
            chosen,
            plan,
            pool,
            dcd,
            share,
            open: None,
            history: Vec::new(),
            best: None,
            since_best: 0,
            last: None,
            stop: None,
            support_share: 0.0,
            rows_trained: 0,
            rows_holdout: 0,
            t0,
            pass_t0: Instant::now(),
        })
    }

    /// The bytes every partition needs for the whole fit (broadcast once; read with
    /// [`super::PartWorker::from_plan`]).
    pub fn plan_bytes(&self) -> &[u8] {
        &self.plan
    }

    /// Passes closed so far.
    pub fn passes(&self) -> usize {
        self.history.len()
    }

    /// Whether a stopping rule fired (then [`PartsFit::finish`]).
    pub fn done(&self) -> bool {
        self.stop.is_some()
    }

    /// Opens the next pass: the bytes to broadcast to the partitions
    /// ([`super::PartPass::new`]).
    pub fn open_pass(&mut self) -> Vec<u8> {
        let acc = self
            .state
            .accumulator(
                self.dcd.c,
                self.dcd.epsilon,
                self.share,
                self.opts.seed ^ SAMPLE_SALT,
            )
            .with_input_sample(self.inputs);
        let bytes = acc.to_bytes();
        self.open = Some(acc);
        self.pass_t0 = Instant::now();
        bytes
    }

    /// Closes the open pass with the partitions' bytes, in partition order: merges them,
    /// maps the Hessian's sample, takes the step, records the epoch and applies the
    /// stopping rules. Returns whether the fit is done.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for bytes of another pass or no open pass;
    /// [`Error::NoRows`] when no partition had a training row; the step's errors.
    pub fn close_pass(&mut self, parts: &[&[u8]]) -> Result<bool> {
        let mut total = self.open.take().ok_or_else(|| {
            Error::invalid("pass statistics", "no pass is open; call open_pass first")
        })?;
        let mut holdout: Option<Vec<MetricsAccumulator>> = None;
        for bytes in parts {
            let (stats, accs) = read_part(bytes)?;
            total.merge(stats)?;
            match &mut holdout {
                None => holdout = Some(accs),
                Some(h) if h.len() == accs.len() => {
                    for (a, b) in h.iter_mut().zip(&accs) {
                        a.merge(b);
                    }
                }
                Some(_) => {
                    return Err(Error::invalid(
                        "pass statistics",
                        "parts of different Newton passes cannot be merged",
                    ))
                }
            }
        }
        if total.rows() == 0 {
            return Err(Error::NoRows(
                "every usable row fell in the holdout or was skipped".to_string(),
            ));
        }
        self.rows_trained = total.rows();
        let candidates = total.candidates();
        let holdout = holdout.unwrap_or_default();
        self.rows_holdout = holdout.first().map_or(0, MetricsAccumulator::rows);
        let metrics_at = |t: f64| -> Option<Metrics> {
            let k = candidates.iter().position(|(s, _)| *s == t)?;
            holdout
                .get(k)
                .filter(|a| a.rows() > 0)
                .map(MetricsAccumulator::finish)
        };
        total.map_sample(Some(&self.pool), self.chosen.map.as_ref());
        let taken = self.pool.install(|| self.state.step(total))?;
        // As the single-machine Newton strategy reports its epoch.
        let (objective, step, final_ok, stalled, metrics) = match taken {
            Step::Certified {
                objective,
                support_share,
                step,
            } => {
                self.support_share = support_share;
                (objective, step, true, false, metrics_at(step))
            }
            Step::Moved { step, bound } => (bound, step, false, false, None),
            Step::Stalled { objective } => (objective, 0.0, true, true, None),
        };
        let epoch = self.history.len() + 1;
        self.history.push(EpochRecord {
            epoch,
            objective,
            holdout: metrics,
            updates: 0,
            step: Some(step),
            seconds: self.pass_t0.elapsed().as_secs_f64(),
            resident_blocks: 0,
        });
        // The stopping rules of the epoch loop (crate::solver::blocks), in its order.
        let current = self.state.w.clone();
        self.last = Some((current.clone(), objective, metrics));
        if final_ok && self.dcd.tol > 0.0 && objective.gap <= self.dcd.tol {
            self.stop = Some(StopReason::Gap);
        } else if stalled {
            self.stop = Some(StopReason::Precision);
        } else if let Some(m) = metrics {
            let improved = self
                .best
                .as_ref()
                .is_none_or(|(b, _, _, _)| m.rmse < b * (1.0 - 1e-4));
            if improved {
                self.best = Some((m.rmse, current, objective, metrics));
                self.since_best = 0;
            } else {
                self.since_best += 1;
                let patience = self.chosen.settings.patience;
                if patience > 0 && self.since_best >= patience {
                    self.stop = Some(StopReason::Holdout);
                }
            }
        }
        if self.stop.is_none() && epoch >= self.dcd.max_epochs {
            self.stop = Some(StopReason::MaxEpochs);
        }
        Ok(self.stop.is_some())
    }

    /// The fitted model: the certified weights (or the best holdout's), the report, and
    /// the coverage threshold from the sample rows not used as landmarks.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] before any pass closed; coverage errors.
    pub fn finish(self) -> Result<Model> {
        let stop = self.stop.unwrap_or(StopReason::MaxEpochs);
        let (w, objective, metrics) = match (stop, self.best, self.last) {
            (StopReason::Holdout, Some((_, w, obj, m)), _) => (w, obj, m),
            (_, _, Some(last)) => last,
            _ => {
                return Err(Error::invalid(
                    "fit in parts",
                    "no pass has been closed, so there is no model yet",
                ))
            }
        };
        let dim = w.len() - 1;
        let sd = self.facts.target.sd;
        let weights = w.slice(s![..dim]).mapv(|v| v * sd);
        let intercept = self.facts.target.mean + sd * w[dim];
        let mut out = outcome_of(weights, intercept, objective, self.history);
        out.stop = stop;
        out.rows_trained = self.rows_trained;
        out.rows_holdout = self.rows_holdout;
        out.holdout_kept = self.rows_holdout;
        out.holdout = metrics;
        out.support_share = self.support_share;
        assemble(self.facts, self.chosen, out, &self.pool, self.t0)
    }
}

/// An outcome of the Newton solver with these weights and history (counts filled later).
fn outcome_of(
    weights: Array1<f64>,
    intercept: f64,
    objective: Objective,
    history: Vec<EpochRecord>,
) -> TrainOutcome {
    TrainOutcome {
        weights,
        intercept,
        objective,
        method: Method::Newton,
        history,
        stop: StopReason::MaxEpochs,
        rows_trained: 0,
        rows_holdout: 0,
        holdout_kept: 0,
        holdout: None,
        support_share: 0.0,
        updates: 0,
        holdout_inputs: None,
        // A Spark fit keeps no holdout rows on the driver: its models have no band.
        holdout_rows: None,
    }
}
