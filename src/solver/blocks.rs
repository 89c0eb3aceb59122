//! Out-of-core training of linear epsilon-SVR on mapped features, with two solvers that
//! share the streaming pass of [`crate::solver::stream`]:
//!
//! * **dual** — block minimization (Yu, Hsieh, Chang & Lin, "Large linear classification
//!   when data cannot fit in memory", KDD 2010) with dual coordinate descent on each block
//!   (Ho & Lin, JMLR 2012). One dual variable per row (8 bytes a row) lives in
//!   [`DcdState`] for the whole run; units are visited in a seeded random order each
//!   epoch, and blocks (or whole small files) are gathered into sub-problems of
//!   `block_rows` rows that are swept several times before the next arrives. Works for
//!   both losses.
//! * **newton** — the primal Newton method of [`crate::solver::newton`] for the squared
//!   loss: one pass per iteration, no per-row state, a certified duality gap after every
//!   pass.
//!
//! A holdout share of rows, chosen by a hash of the row's stable index (so the same rows
//! every epoch), is never trained on and gives validation metrics after each epoch.
//!
//! # Optimality certificate
//! Dual solver: during epoch k the primal loss of the weights the epoch *started* with is
//! accumulated block by block, and the dual value of the duals it started with is known
//! exactly (maintained incrementally), so at the end of epoch k the relative duality gap
//! of the start-of-epoch model is exact. Newton solver: each pass certifies the point it
//! moves to with the dual point β(w). When the gap is within the tolerance, the certified
//! model is returned.

use ndarray::{s, Array1, ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::metrics::Metrics;
use crate::scale::Standardizer;
use crate::solver::dcd::{solve_block, BlockWorkspace, DcdSettings, DcdState, Loss, Objective};
use crate::solver::newton::{NewtonState, Step, SAMPLE_SALT};
use crate::solver::stream::{PassCache, Streamer};

pub use crate::solver::stream::{is_holdout, piece_rows, ArraySource, BlockSource, TargetScale};

/// Which solver trains the linear model.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Method {
    /// Newton for the squared loss, dual coordinate descent for the linear loss.
    #[default]
    Auto,
    /// Block minimization with dual coordinate descent (either loss).
    Dual,
    /// Primal Newton passes (squared loss only).
    Newton,
}

impl Method {
    /// The solver `Auto` stands for with `loss`.
    pub fn resolve(self, loss: Loss) -> Method {
        match (self, loss) {
            (Method::Auto, Loss::L2) => Method::Newton,
            (Method::Auto, Loss::L1) => Method::Dual,
            (m, _) => m,
        }
    }
}

fn default_hessian_rows() -> usize {
    16_384
}

/// Settings of the streaming trainer (the solver's own settings are in [`DcdSettings`],
/// expressed in the user's target units).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainSettings {
    /// Solver settings in target units (C, epsilon, loss, tolerance, epochs, seed, and the
    /// dual solver's sweeps and shrinking).
    pub dcd: DcdSettings,
    /// Which solver runs.
    #[serde(default)]
    pub method: Method,
    /// Newton solver: rows (expected) in the sample that forms the Hessian each pass; all
    /// rows when there are fewer.
    #[serde(default = "default_hessian_rows")]
    pub hessian_rows: usize,
    /// Bytes of mapped blocks kept resident between epochs.
    pub memory_bytes: usize,
    /// Share of rows held out for validation, in [0, 0.5].
    pub holdout: f64,
    /// Epochs without a holdout improvement (relative 1e-4) before stopping; 0 disables.
    pub patience: usize,
    /// Threads for reading, mapping and the Newton solver's sums.
    pub threads: usize,
    /// Dual solver: rows read (before the holdout split) gathered into one sub-problem;
    /// blocks and whole small files are grouped until they reach it.
    pub block_rows: usize,
}

impl Default for TrainSettings {
    fn default() -> Self {
        TrainSettings {
            dcd: DcdSettings::default(),
            method: Method::Auto,
            hessian_rows: default_hessian_rows(),
            memory_bytes: 1 << 30,
            holdout: 0.0,
            patience: 3,
            threads: 0,
            block_rows: 16_384,
        }
    }
}

impl TrainSettings {
    /// Checks every value; one sentence per problem.
    pub fn validate(&self) -> Result<()> {
        self.dcd.validate()?;
        if !(0.0..=0.5).contains(&self.holdout) {
            return Err(Error::invalid(
                "holdout",
                format!("must be a share between 0 and 0.5, got {}", self.holdout),
            ));
        }
        if self.method == Method::Newton && self.dcd.loss == Loss::L1 {
            return Err(Error::invalid(
                "solver",
                "the Newton solver needs the squared loss; use the dual solver for the linear loss",
            ));
        }
        if self.hessian_rows == 0 {
            return Err(Error::invalid("hessian rows", "must be at least 1"));
        }
        Ok(())
    }
}

/// Figures of one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EpochRecord {
    /// One-based epoch number.
    pub epoch: usize,
    /// Gap certificate of the epoch: for the dual solver, of the weights the epoch started
    /// with; for the Newton solver, of the weights it moved to.
    #[serde(alias = "start_objective")]
    pub objective: Objective,
    /// Holdout metrics after the epoch (user units), if there is a holdout.
    pub holdout: Option<Metrics>,
    /// Dual solver: coordinate updates made in the epoch (0 for Newton).
    pub updates: u64,
    /// Newton solver: the line-search step taken (None for the dual solver).
    #[serde(default)]
    pub step: Option<f64>,
    /// Wall time of the epoch in seconds (not stored in the model file).
    #[serde(skip)]
    pub seconds: f64,
    /// Blocks served from memory rather than read and mapped.
    pub resident_blocks: usize,
}

/// Why training stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// The relative duality gap reached the tolerance.
    Gap,
    /// The holdout error stopped improving.
    Holdout,
    /// The epoch limit was reached.
    MaxEpochs,
    /// No step lowers the objective any more: optimal to working precision.
    Precision,
}

/// What the trainer returns: weights in the user's units and the run's figures.
#[derive(Clone, Debug)]
pub struct TrainOutcome {
    /// Weights on the D mapped features, in target units.
    pub weights: Array1<f64>,
    /// Constant term in target units (target mean plus the scaled bias weight).
    pub intercept: f64,
    /// Gap certificate of the returned weights (target units scaled by sd²; relative gap
    /// is unit-free).
    pub objective: Objective,
    /// The solver that ran.
    pub method: Method,
    /// Per-epoch figures.
    pub history: Vec<EpochRecord>,
    /// Why the run stopped.
    pub stop: StopReason,
    /// Rows trained on.
    pub rows_trained: u64,
    /// Rows held out.
    pub rows_holdout: u64,
    /// Final holdout metrics (user units) for the returned weights.
    pub holdout: Option<Metrics>,
    /// Share of training rows that are support vectors (nonzero dual).
    pub support_share: f64,
    /// Total coordinate updates (dual solver).
    pub updates: u64,
    /// Up to 10,000 standardized holdout input rows, evenly spread (None without a
    /// holdout): the rows coverage thresholds are chosen on.
    pub holdout_inputs: Option<ndarray::Array2<f64>>,
}

/// Progress callbacks for a person watching (the CLI draws bars with them).
pub trait TrainObserver: Sync {
    /// A pass over the data starts; `rows` is its expected row count.
    fn pass_started(&self, _epoch: usize, _rows: u64) {}
    /// `rows` more rows were processed in the current pass.
    fn rows_done(&self, _rows: u64) {}
    /// An epoch finished.
    fn epoch_finished(&self, _record: &EpochRecord) {}
    /// Whether the run should stop now (asked before each epoch and after each block
    /// handed to the solver); the run then fails with [`Error::Interrupted`].
    fn should_stop(&self) -> bool {
        false
    }
}

/// An observer that ignores everything.
#[derive(Debug, Default, Clone, Copy)]
pub struct Silent;
impl TrainObserver for Silent {}

/// Everything the trainer needs besides the data.
pub struct Trainer<'a> {
    /// Input standardizer (from the survey or the in-memory data).
    pub scaler: &'a Standardizer,
    /// The fitted feature map.
    pub map: &'a dyn FeatureMap,
    /// Target centring and scaling.
    pub target: TargetScale,
    /// Settings.
    pub settings: &'a TrainSettings,
    /// Size of the dual vector: one more than the largest global row id.
    pub rows_total: u64,
}

/// What one epoch of either solver produced.
struct EpochOut {
    objective: Objective,
    /// The weights `objective` certifies.
    certified: Array1<f64>,
    /// Whether `objective` may stop the run.
    final_ok: bool,
    updates: u64,
    step: Option<f64>,
    stalled: bool,
}

/// The solver-specific part of an epoch (one per run, so the variants' sizes do not
/// matter).
#[allow(clippy::large_enum_variant)]
enum Engine {
    Dual {
        state: DcdState,
        ws: BlockWorkspace,
        rng: ChaCha8Rng,
    },
    Newton {
        state: NewtonState,
        share: f64,
        support_share: f64,
    },
}

impl Engine {
    fn weights(&self) -> &Array1<f64> {
        match self {
            Engine::Dual { state, .. } => &state.w,
            Engine::Newton { state, .. } => &state.w,
        }
    }
}

impl Trainer<'_> {
    /// Runs the chosen solver over `source` until a stopping rule fires.
    pub fn run(
        &self,
        source: &dyn BlockSource,
        observer: &dyn TrainObserver,
    ) -> Result<TrainOutcome> {
        self.settings.validate()?;
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(self.settings.threads)
            .build()
            .map_err(|e| Error::invalid("threads", e.to_string()))?;
        let dcd = self.settings.dcd.in_standard_units(self.target.sd);
        let dim = self.map.output_dim();
        let method = self.settings.method.resolve(dcd.loss);
        let streamer = Streamer {
            scaler: self.scaler,
            map: self.map,
            mean: self.target.mean,
            sd: self.target.sd,
            holdout: self.settings.holdout,
            seed: self.settings.dcd.seed,
            epsilon: self.settings.dcd.epsilon,
            pool: &pool,
            lazy: method == Method::Newton,
        };
        let mut engine = match method {
            Method::Newton => {
                let expected = (self.rows_total as f64 * (1.0 - self.settings.holdout)).max(1.0);
                Engine::Newton {
                    state: NewtonState::new(dim),
                    share: (self.settings.hessian_rows as f64 / expected).min(1.0),
                    support_share: 0.0,
                }
            }
            _ => Engine::Dual {
                state: DcdState::new(dim, self.rows_total as usize),
                ws: BlockWorkspace::new(),
                rng: ChaCha8Rng::seed_from_u64(self.settings.dcd.seed),
            },
        };
        let units = source.units();
        let mut cache = PassCache::new(units, self.settings.memory_bytes);
        let mut history = Vec::new();
        let mut best: Option<(f64, Array1<f64>, Option<Objective>)> = None;
        let mut since_best = 0usize;
        let mut updates_total = 0u64;
        let mut stop = StopReason::MaxEpochs;
        let mut certified: Option<(Array1<f64>, Objective)> = None;
        let mut last: Option<(Array1<f64>, Objective)> = None;

        for epoch in 1..=self.settings.dcd.max_epochs {
            if observer.should_stop() {
                return Err(Error::Interrupted);
            }
            let t0 = std::time::Instant::now();
            observer.pass_started(epoch, if epoch == 1 { 0 } else { cache.rows_read });
            let (out, resident_blocks) = self.epoch(
                &mut engine,
                &streamer,
                source,
                &mut cache,
                observer,
                &dcd,
                &pool,
            )?;
            updates_total += out.updates;
            let current = engine.weights().clone();
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
                    if self.settings.patience > 0 && since_best >= self.settings.patience {
                        stop = StopReason::Holdout;
                        break;
                    }
                }
            }
        }

        let current = engine.weights().clone();
        let (w_solver, objective) = match (stop, certified, best) {
            (StopReason::Gap, Some(c), _) => c,
            (StopReason::Holdout, _, Some((_, w, Some(obj)))) => (w, obj),
            (StopReason::Holdout, _, Some((_, w, None))) => {
                let obj = self.evaluate(&engine, &streamer, source, &mut cache, w.view(), &dcd)?;
                (w, obj)
            }
            _ => match last {
                Some((w, obj)) if w == current => (w, obj),
                _ => {
                    let obj = self.evaluate(
                        &engine,
                        &streamer,
                        source,
                        &mut cache,
                        current.view(),
                        &dcd,
                    )?;
                    (current, obj)
                }
            },
        };
        let holdout = streamer.holdout_metrics(w_solver.view(), &cache);
        let sd = self.target.sd;
        let weights = w_solver.slice(s![..dim]).mapv(|v| v * sd);
        let intercept = self.target.mean + sd * w_solver[dim];
        let rows_trained = cache.rows_trained;
        let support_share = match &engine {
            Engine::Dual { state, .. } => {
                let nonzero = state.beta.iter().filter(|b| **b != 0.0).count() as f64;
                nonzero / rows_trained.max(1) as f64
            }
            Engine::Newton { support_share, .. } => *support_share,
        };
        Ok(TrainOutcome {
            weights,
            intercept,
            objective,
            method,
            history,
            stop,
            rows_trained,
            rows_holdout: cache.holdout_rows(),
            holdout,
            support_share,
            updates: updates_total,
            holdout_inputs: cache.holdout_inputs(10_000),
        })
    }

    /// One epoch of the engine's solver; returns its figures and the blocks served from
    /// memory.
    #[allow(clippy::too_many_arguments)]
    fn epoch(
        &self,
        engine: &mut Engine,
        streamer: &Streamer,
        source: &dyn BlockSource,
        cache: &mut PassCache,
        observer: &dyn TrainObserver,
        dcd: &DcdSettings,
        pool: &rayon::ThreadPool,
    ) -> Result<(EpochOut, usize)> {
        let rows_done = |r: u64| observer.rows_done(r);
        let first = cache.passes() == 0;
        match engine {
            Engine::Dual { state, ws, rng } => {
                let mut order: Vec<usize> = (0..source.units()).collect();
                order.shuffle(rng);
                let w_start = state.w.clone();
                let dual_start = state.dual_value(dcd);
                let mut loss_start = 0.0;
                let mut updates = 0u64;
                // Blocks are gathered into groups of at least `block_rows` rows read
                // before the solver sees them: small files (one site, one month) then
                // mix into one sub-problem instead of pulling the weights towards each
                // file in turn.
                let mut group: Vec<std::sync::Arc<crate::solver::stream::MappedBlock>> = Vec::new();
                let mut group_rows = 0usize;
                let target_rows = self.settings.block_rows.max(1);
                let mut flush = |group: &mut Vec<_>| {
                    updates += solve_group(
                        group,
                        streamer,
                        state,
                        dcd,
                        rng,
                        ws,
                        &mut loss_start,
                        &w_start,
                    );
                };
                let resident = streamer.pass(source, &order, cache, &rows_done, &mut |mb| {
                    group.push(std::sync::Arc::clone(mb));
                    group_rows += mb.read_rows as usize;
                    if group_rows >= target_rows {
                        flush(&mut group);
                        group_rows = 0;
                        if observer.should_stop() {
                            return Err(Error::Interrupted);
                        }
                    }
                    Ok(())
                })?;
                flush(&mut group);
                let primal = 0.5 * w_start.dot(&w_start) + dcd.c * loss_start;
                Ok((
                    EpochOut {
                        objective: objective(primal, dual_start),
                        certified: w_start,
                        final_ok: !first,
                        updates,
                        step: None,
                        stalled: false,
                    },
                    resident,
                ))
            }
            Engine::Newton {
                state,
                share,
                support_share,
            } => {
                let order: Vec<usize> = (0..source.units()).collect();
                let seed = self.settings.dcd.seed ^ SAMPLE_SALT;
                let mut acc = state.accumulator(dcd.c, dcd.epsilon, *share, seed);
                let resident = streamer.pass(source, &order, cache, &rows_done, &mut |mb| {
                    acc.add_block(
                        Some(pool),
                        mb.rows_view(streamer.map),
                        mb.y.view(),
                        &mb.rows,
                    );
                    if observer.should_stop() {
                        return Err(Error::Interrupted);
                    }
                    Ok(())
                })?;
                let out = match state.step(acc)? {
                    Step::Certified {
                        objective,
                        support_share: s,
                        step,
                    } => {
                        *support_share = s;
                        EpochOut {
                            objective,
                            certified: state.w.clone(),
                            final_ok: true,
                            updates: 0,
                            step: Some(step),
                            stalled: false,
                        }
                    }
                    Step::Moved { step, bound } => EpochOut {
                        objective: bound,
                        certified: state.w.clone(),
                        final_ok: false,
                        updates: 0,
                        step: Some(step),
                        stalled: false,
                    },
                    Step::Stalled { objective } => EpochOut {
                        objective,
                        certified: state.w.clone(),
                        final_ok: true,
                        updates: 0,
                        step: Some(0.0),
                        stalled: true,
                    },
                };
                Ok((out, resident))
            }
        }
    }

    /// Exact primal/dual certificate for `w` (one pass; resident blocks are not re-read).
    /// Dual solver: when `w` is not the duals' own weights (holdout stop), the dual value
    /// is that of the current duals, so the gap is an upper bound.
    fn evaluate(
        &self,
        engine: &Engine,
        streamer: &Streamer,
        source: &dyn BlockSource,
        cache: &mut PassCache,
        w: ArrayView1<f64>,
        dcd: &DcdSettings,
    ) -> Result<Objective> {
        let mut loss = 0.0;
        let order: Vec<usize> = (0..source.units()).collect();
        streamer.pass(source, &order, cache, &|_| {}, &mut |mb| {
            loss += loss_sum(w, mb.mapped(streamer).view(), mb.y.view(), dcd);
            Ok(())
        })?;
        let dual = match engine {
            Engine::Dual { state, .. } => state.dual_value(dcd),
            // β = 0 is a feasible dual point of the squared loss, with dual value 0.
            Engine::Newton { .. } => 0.0,
        };
        Ok(objective(0.5 * w.dot(&w) + dcd.c * loss, dual))
    }
}

/// Runs the dual solver's sweeps on one group of mapped blocks, after adding the group's
/// primal loss at the start-of-epoch weights to `loss_start`; returns the updates made.
#[allow(clippy::too_many_arguments)]
fn solve_group(
    group: &mut Vec<std::sync::Arc<crate::solver::stream::MappedBlock>>,
    streamer: &Streamer,
    state: &mut DcdState,
    dcd: &DcdSettings,
    rng: &mut ChaCha8Rng,
    ws: &mut BlockWorkspace,
    loss_start: &mut f64,
    w_start: &Array1<f64>,
) -> u64 {
    if group.is_empty() {
        return 0;
    }
    // The dual solver's stream is not lazy, so these borrow the mapped rows.
    let mapped: Vec<_> = group.iter().map(|mb| mb.mapped(streamer)).collect();
    for (mb, z) in group.iter().zip(&mapped) {
        *loss_start += loss_sum(w_start.view(), z.view(), mb.y.view(), dcd);
    }
    let st = if group.len() == 1 {
        let mb = &group[0];
        solve_block(state, mapped[0].view(), mb.y.view(), &mb.rows, dcd, rng, ws)
    } else {
        let zs: Vec<_> = mapped.iter().map(|z| z.view()).collect();
        let ys: Vec<_> = group.iter().map(|m| m.y.view()).collect();
        let z = ndarray::concatenate(Axis(0), &zs).expect("blocks share D");
        let y = ndarray::concatenate(Axis(0), &ys).expect("vectors");
        let rows: Vec<usize> = group.iter().flat_map(|m| m.rows.iter().copied()).collect();
        solve_block(state, z.view(), y.view(), &rows, dcd, rng, ws)
    };
    drop(mapped);
    group.clear();
    st.updates
}

fn objective(primal: f64, dual: f64) -> Objective {
    Objective {
        primal,
        dual,
        gap: (primal - dual) / primal.abs().max(f64::MIN_POSITIVE),
    }
}

/// Σ ℓ(y_i − wᵀ[z_i, 1]) for one block: the epsilon-insensitive loss (L1) or its square
/// (L2), as in the primal of Ho & Lin (JMLR 2012).
pub fn loss_sum(
    w: ArrayView1<f64>,
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    dcd: &DcdSettings,
) -> f64 {
    let dim = z.ncols();
    let wz = w.slice(s![..dim]);
    let b = w[dim];
    let mut total = 0.0;
    for (zi, &yi) in z.axis_iter(Axis(0)).zip(y) {
        let r = (yi - zi.dot(&wz) - b).abs() - dcd.epsilon;
        if r > 0.0 {
            total += match dcd.loss {
                Loss::L1 => r,
                Loss::L2 => r * r,
            };
        }
    }
    total
}
