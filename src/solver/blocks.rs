//! Out-of-core training by block minimization (Yu, Hsieh, Chang & Lin, "Large linear
//! classification when data cannot fit in memory", KDD 2010), applied to the linear
//! epsilon-SVR dual of Ho & Lin (JMLR 2012).
//!
//! The data are split into *units* (a file, or a slice of an in-memory array) that are
//! read in a seeded random order each epoch. Each unit yields blocks of rows; a block is
//! standardized, mapped into the feature space, and then swept several times by dual
//! coordinate descent on its own dual variables before the next block arrives. One dual
//! variable per row (8 bytes a row) lives in [`DcdState`] for the whole run.
//!
//! Reading and mapping run ahead of the solver on another thread through a bounded
//! channel; the solver consumes blocks in order on the calling thread, so the result is
//! the same whatever the number of threads. Mapped blocks stay resident in memory while a
//! budget allows: when the whole mapped table fits, later epochs never touch the files.
//!
//! A holdout share of rows, chosen by a hash of the row's stable index (so the same rows
//! every epoch), is never trained on and gives validation metrics after each epoch.
//!
//! # Optimality certificate
//! During epoch k the primal loss of the weights the epoch *started* with is accumulated
//! block by block, and the dual value of the duals it started with is known exactly (it is
//! maintained incrementally). So at the end of epoch k the relative duality gap of the
//! start-of-epoch model is exact, at the cost of one extra dot product per row. When it is
//! within the tolerance, that certified model is returned.

use std::sync::mpsc::sync_channel;
use std::sync::Arc;

use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use crate::data::Block;
use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::metrics::{Metrics, MetricsAccumulator};
use crate::scale::Standardizer;
use crate::solver::dcd::{solve_block, BlockWorkspace, DcdSettings, DcdState, Loss, Objective};

/// Where the trainer's rows come from: a list of units read in any order, each yielding
/// raw blocks (unstandardized inputs and target, stable global row ids).
pub trait BlockSource: Sync {
    /// Number of units (files, or slices of an array).
    fn units(&self) -> usize;

    /// Reads one unit, handing each of its blocks to `sink` in order.
    fn read_unit(&self, unit: usize, sink: &mut dyn FnMut(Block) -> Result<()>) -> Result<()>;
}

/// An in-memory table as a [`BlockSource`]: unit `u` holds rows
/// `u·block_rows .. (u+1)·block_rows`, one block per unit, with row ids equal to row
/// positions.
#[derive(Debug, Clone, Copy)]
pub struct ArraySource<'a> {
    x: ArrayView2<'a, f64>,
    y: ArrayView1<'a, f64>,
    block_rows: usize,
}

impl<'a> ArraySource<'a> {
    /// Wraps `x` (rows × inputs) and `y`.
    ///
    /// # Panics
    /// If `x` and `y` differ in rows or `block_rows` is zero.
    pub fn new(x: ArrayView2<'a, f64>, y: ArrayView1<'a, f64>, block_rows: usize) -> Self {
        assert_eq!(x.nrows(), y.len(), "x and y differ in rows");
        assert!(block_rows > 0, "block_rows must be positive");
        ArraySource { x, y, block_rows }
    }
}

impl BlockSource for ArraySource<'_> {
    fn units(&self) -> usize {
        self.x.nrows().div_ceil(self.block_rows)
    }

    fn read_unit(&self, unit: usize, sink: &mut dyn FnMut(Block) -> Result<()>) -> Result<()> {
        let lo = unit * self.block_rows;
        let hi = (lo + self.block_rows).min(self.x.nrows());
        sink(Block {
            seq: unit as u64,
            file_index: 0,
            first_row: lo as u64,
            rows: hi - lo,
            row_ids: (lo as u64..hi as u64).collect(),
            x: self.x.slice(s![lo..hi, ..]).to_owned(),
            y: Some(self.y.slice(s![lo..hi]).to_owned()),
            skipped: Vec::new(),
        })
    }
}

/// Settings of the streaming trainer (the solver's own settings are in [`DcdSettings`],
/// expressed in the user's target units).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainSettings {
    /// Dual coordinate descent settings in target units (C, epsilon, loss, tolerance, …).
    pub dcd: DcdSettings,
    /// Bytes of mapped blocks kept resident between epochs.
    pub memory_bytes: usize,
    /// Share of rows held out for validation, in [0, 0.5].
    pub holdout: f64,
    /// Epochs without a holdout improvement (relative 1e-4) before stopping; 0 disables.
    pub patience: usize,
    /// Threads for reading and mapping.
    pub threads: usize,
    /// Rows read (before the holdout split) gathered into one DCD sub-problem; blocks and
    /// whole small files are grouped until they reach it.
    pub block_rows: usize,
}

impl Default for TrainSettings {
    fn default() -> Self {
        TrainSettings {
            dcd: DcdSettings::default(),
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
        Ok(())
    }
}

/// Figures of one epoch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EpochRecord {
    /// One-based epoch number.
    pub epoch: usize,
    /// Gap certificate of the weights this epoch started with.
    pub start_objective: Objective,
    /// Holdout metrics after the epoch (user units), if there is a holdout.
    pub holdout: Option<Metrics>,
    /// Coordinate updates made in the epoch.
    pub updates: u64,
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
    /// Total coordinate updates.
    pub updates: u64,
}

/// Progress callbacks for a person watching (the CLI draws bars with them).
pub trait TrainObserver: Sync {
    /// A pass over the data starts; `rows` is its expected row count.
    fn pass_started(&self, _epoch: usize, _rows: u64) {}
    /// `rows` more rows were processed in the current pass.
    fn rows_done(&self, _rows: u64) {}
    /// An epoch finished.
    fn epoch_finished(&self, _record: &EpochRecord) {}
}

/// An observer that ignores everything.
#[derive(Debug, Default, Clone, Copy)]
pub struct Silent;
impl TrainObserver for Silent {}

/// Target centring and scaling used inside the solver.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct TargetScale {
    /// Mean of the training target.
    pub mean: f64,
    /// Population standard deviation (1 when the target is constant).
    pub sd: f64,
}

/// Is global row `row` in the holdout? A hash of the row id, fixed for the whole run
/// (splitmix64 finalizer, Steele, Lea & Flood, OOPSLA 2014).
pub fn is_holdout(row: u64, seed: u64, share: f64) -> bool {
    if share <= 0.0 {
        return false;
    }
    let mut z = row ^ seed.rotate_left(17) ^ 0x9E37_79B9_7F4A_7C15;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^= z >> 31;
    ((z >> 11) as f64 / (1u64 << 53) as f64) < share
}

/// A block after standardization and mapping, split into training and holdout rows.
struct MappedBlock {
    z: Array2<f64>,
    y: Array1<f64>,
    rows: Vec<usize>,
    hold_x: Array2<f64>,
    hold_y: Array1<f64>,
    read_rows: u64,
}

impl MappedBlock {
    fn bytes(&self) -> usize {
        (self.z.len() + self.y.len() + self.rows.len() + self.hold_x.len() + self.hold_y.len()) * 8
    }
}

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

impl Trainer<'_> {
    /// Standardizes, maps and splits one raw block.
    fn prepare(&self, mut b: Block) -> Result<MappedBlock> {
        let y_raw = b
            .y
            .take()
            .ok_or_else(|| Error::NoRows("the training data has no target column".to_string()))?;
        self.scaler.apply(b.x.view_mut());
        let share = self.settings.holdout;
        let seed = self.settings.dcd.seed;
        let hold: Vec<bool> = b
            .row_ids
            .iter()
            .map(|&r| is_holdout(r, seed, share))
            .collect();
        let n_hold = hold.iter().filter(|&&h| h).count();
        let n_train = hold.len() - n_hold;
        let d = b.x.ncols();
        let mut xt = Array2::zeros((n_train, d));
        let mut hold_x = Array2::zeros((n_hold, d));
        let mut y = Array1::zeros(n_train);
        let mut hold_y = Array1::zeros(n_hold);
        let mut rows = Vec::with_capacity(n_train);
        let (mut it, mut ih) = (0, 0);
        for (i, &h) in hold.iter().enumerate() {
            if h {
                hold_x.row_mut(ih).assign(&b.x.row(i));
                hold_y[ih] = y_raw[i];
                ih += 1;
            } else {
                xt.row_mut(it).assign(&b.x.row(i));
                y[it] = (y_raw[i] - self.target.mean) / self.target.sd;
                rows.push(b.row_ids[i] as usize);
                it += 1;
            }
        }
        let mut z = Array2::zeros((n_train, self.map.output_dim()));
        self.map.transform_into(xt.view(), z.view_mut());
        Ok(MappedBlock {
            z,
            y,
            rows,
            hold_x,
            hold_y,
            read_rows: b.rows as u64,
        })
    }

    /// Runs block minimization over `source` until a stopping rule fires.
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
        let mut state = DcdState::new(dim, self.rows_total as usize);
        let mut ws = BlockWorkspace::new();
        let mut rng = ChaCha8Rng::seed_from_u64(self.settings.dcd.seed);
        let units = source.units();
        let mut resident: Vec<Option<Vec<Arc<MappedBlock>>>> = (0..units).map(|_| None).collect();
        let mut resident_bytes = 0usize;
        let mut holdout_x: Vec<Array2<f64>> = Vec::new();
        let mut holdout_y: Vec<f64> = Vec::new();
        let mut history = Vec::new();
        let mut rows_trained = 0u64;
        let mut rows_read_total = 0u64;
        let mut best: Option<(f64, Array1<f64>)> = None;
        let mut since_best = 0usize;
        let mut updates_total = 0u64;
        let mut stop = StopReason::MaxEpochs;
        let mut certified: Option<(Array1<f64>, Objective)> = None;

        for epoch in 1..=self.settings.dcd.max_epochs {
            let t0 = std::time::Instant::now();
            let mut order: Vec<usize> = (0..units).collect();
            order.shuffle(&mut rng);
            let w_start = state.w.clone();
            let dual_start = state.dual_value(&dcd);
            let mut loss_start = 0.0;
            let mut updates = 0u64;
            let mut resident_blocks = 0usize;
            let to_read: Vec<usize> = order
                .iter()
                .copied()
                .filter(|&u| resident[u].is_none())
                .collect();
            observer.pass_started(epoch, if epoch == 1 { 0 } else { rows_read_total });
            let first = epoch == 1;

            // Blocks are gathered into groups of at least `block_rows` rows read before
            // the solver sees them: small files (one site, one month) then mix into one
            // sub-problem instead of pulling the weights towards each file in turn.
            let mut group: Vec<Arc<MappedBlock>> = Vec::new();
            let mut group_rows = 0usize;
            let target_rows = self.settings.block_rows.max(1);
            let mut flush = |group: &mut Vec<Arc<MappedBlock>>,
                             state: &mut DcdState,
                             rng: &mut ChaCha8Rng,
                             ws: &mut BlockWorkspace|
             -> u64 {
                if group.is_empty() {
                    return 0;
                }
                for mb in group.iter() {
                    loss_start += loss_sum(w_start.view(), mb.z.view(), mb.y.view(), &dcd);
                }
                let st = if group.len() == 1 {
                    let mb = &group[0];
                    solve_block(state, mb.z.view(), mb.y.view(), &mb.rows, &dcd, rng, ws)
                } else {
                    let zs: Vec<_> = group.iter().map(|m| m.z.view()).collect();
                    let ys: Vec<_> = group.iter().map(|m| m.y.view()).collect();
                    let z = ndarray::concatenate(Axis(0), &zs).expect("blocks share D");
                    let y = ndarray::concatenate(Axis(0), &ys).expect("vectors");
                    let rows: Vec<usize> =
                        group.iter().flat_map(|m| m.rows.iter().copied()).collect();
                    solve_block(state, z.view(), y.view(), &rows, &dcd, rng, ws)
                };
                group.clear();
                st.updates
            };

            std::thread::scope(|scope| -> Result<()> {
                // One mapped block in the channel, one being mapped, one being solved: memory
                // stays near three blocks of block_rows × D values whatever the data size.
                let (tx, rx) = sync_channel::<Msg>(1);
                let producer = {
                    let pool = &pool;
                    let to_read = &to_read;
                    scope.spawn(move || {
                        for &u in to_read {
                            let mut sink = |b: Block| -> Result<()> {
                                let mb = pool.install(|| self.prepare(b))?;
                                tx.send(Msg::Block(Box::new(mb)))
                                    .map_err(|_| Error::Numerical("training stopped".into()))
                            };
                            match source.read_unit(u, &mut sink) {
                                Ok(()) => {
                                    if tx.send(Msg::UnitEnd).is_err() {
                                        return;
                                    }
                                }
                                Err(e) => {
                                    let _ = tx.send(Msg::Failed(e));
                                    return;
                                }
                            }
                        }
                    })
                };
                let result = (|| -> Result<()> {
                    for &u in &order {
                        if let Some(blocks) = &resident[u] {
                            for mb in blocks {
                                group.push(Arc::clone(mb));
                                group_rows += mb.read_rows as usize;
                                if group_rows >= target_rows {
                                    updates += flush(&mut group, &mut state, &mut rng, &mut ws);
                                    group_rows = 0;
                                }
                                observer.rows_done(mb.read_rows);
                                resident_blocks += 1;
                            }
                            continue;
                        }
                        let mut kept: Vec<Arc<MappedBlock>> = Vec::new();
                        let mut fits = true;
                        loop {
                            let next = match rx.recv() {
                                Ok(Msg::Block(mb)) => Arc::new(*mb),
                                Ok(Msg::UnitEnd) => break,
                                Ok(Msg::Failed(e)) => return Err(e),
                                Err(_) => {
                                    return Err(Error::Numerical(
                                        "the reading thread stopped unexpectedly".into(),
                                    ))
                                }
                            };
                            group.push(Arc::clone(&next));
                            group_rows += next.read_rows as usize;
                            if group_rows >= target_rows {
                                updates += flush(&mut group, &mut state, &mut rng, &mut ws);
                                group_rows = 0;
                            }
                            observer.rows_done(next.read_rows);
                            if first {
                                rows_trained += next.rows.len() as u64;
                                rows_read_total += next.read_rows;
                                holdout_x.push(next.hold_x.clone());
                                holdout_y.extend(next.hold_y.iter());
                            }
                            let b = next.bytes();
                            if fits && resident_bytes + b <= self.settings.memory_bytes {
                                resident_bytes += b;
                                kept.push(next);
                            } else if fits {
                                fits = false;
                                for k in kept.drain(..) {
                                    resident_bytes -= k.bytes();
                                }
                            }
                        }
                        if fits {
                            resident[u] = Some(kept);
                        }
                    }
                    updates += flush(&mut group, &mut state, &mut rng, &mut ws);
                    Ok(())
                })();
                drop(rx);
                producer.join().expect("the reading thread panicked");
                result
            })?;
            updates_total += updates;

            if first && rows_trained == 0 {
                return Err(Error::NoRows(
                    "every usable row fell in the holdout or was skipped".to_string(),
                ));
            }
            let primal_start = 0.5 * w_start.dot(&w_start) + dcd.c * loss_start;
            let start_objective = objective(primal_start, dual_start);
            let holdout = self.holdout_metrics(&pool, state.w.view(), &holdout_x, &holdout_y);
            let record = EpochRecord {
                epoch,
                start_objective,
                holdout,
                updates,
                seconds: t0.elapsed().as_secs_f64(),
                resident_blocks,
            };
            observer.epoch_finished(&record);
            history.push(record);

            if epoch > 1 && dcd.tol > 0.0 && start_objective.gap <= dcd.tol {
                certified = Some((w_start, start_objective));
                stop = StopReason::Gap;
                break;
            }
            if let Some(m) = holdout {
                let improved = best.as_ref().is_none_or(|(b, _)| m.rmse < b * (1.0 - 1e-4));
                if improved {
                    best = Some((m.rmse, state.w.clone()));
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

        let (w_solver, objective) = match (stop, certified) {
            (StopReason::Gap, Some((w, obj))) => (w, obj),
            (StopReason::Holdout, _) => {
                let w = best.map(|(_, w)| w).unwrap_or_else(|| state.w.clone());
                let obj = self.evaluate(&pool, source, &resident, w.view(), &state, &dcd)?;
                (w, obj)
            }
            _ => {
                let w = state.w.clone();
                let obj = self.evaluate(&pool, source, &resident, w.view(), &state, &dcd)?;
                (w, obj)
            }
        };
        let holdout = self.holdout_metrics(&pool, w_solver.view(), &holdout_x, &holdout_y);
        let sd = self.target.sd;
        let weights = w_solver.slice(s![..dim]).mapv(|v| v * sd);
        let intercept = self.target.mean + sd * w_solver[dim];
        let nonzero = state.beta.iter().filter(|b| **b != 0.0).count() as f64;
        Ok(TrainOutcome {
            weights,
            intercept,
            objective,
            history,
            stop,
            rows_trained,
            rows_holdout: holdout_y.len() as u64,
            holdout,
            support_share: if rows_trained > 0 {
                nonzero / rows_trained as f64
            } else {
                0.0
            },
            updates: updates_total,
        })
    }

    /// Exact primal/dual certificate for `w` with the current duals (one pass; resident
    /// blocks are not re-read). When `w` is not the duals' own weights (holdout stop), the
    /// dual value is that of the current duals, so the gap is an upper bound.
    fn evaluate(
        &self,
        pool: &rayon::ThreadPool,
        source: &dyn BlockSource,
        resident: &[Option<Vec<Arc<MappedBlock>>>],
        w: ArrayView1<f64>,
        state: &DcdState,
        dcd: &DcdSettings,
    ) -> Result<Objective> {
        let mut loss = 0.0;
        for (u, r) in resident.iter().enumerate() {
            match r {
                Some(blocks) => {
                    for mb in blocks {
                        loss += loss_sum(w, mb.z.view(), mb.y.view(), dcd);
                    }
                }
                None => source.read_unit(u, &mut |b| {
                    let mb = pool.install(|| self.prepare(b))?;
                    loss += loss_sum(w, mb.z.view(), mb.y.view(), dcd);
                    Ok(())
                })?,
            }
        }
        Ok(objective(
            0.5 * w.dot(&w) + dcd.c * loss,
            state.dual_value(dcd),
        ))
    }

    fn holdout_metrics(
        &self,
        pool: &rayon::ThreadPool,
        w: ArrayView1<f64>,
        xs: &[Array2<f64>],
        ys: &[f64],
    ) -> Option<Metrics> {
        if ys.is_empty() {
            return None;
        }
        let dim = self.map.output_dim();
        let sd = self.target.sd;
        let mut acc = MetricsAccumulator::new(self.settings.dcd.epsilon);
        let mut offset = 0;
        for x in xs {
            if x.nrows() == 0 {
                continue;
            }
            let z = pool.install(|| self.map.transform(x.view()));
            let f = z
                .dot(&w.slice(s![..dim]))
                .mapv(|v| self.target.mean + sd * (v + w[dim]));
            let y = ArrayView1::from(&ys[offset..offset + x.nrows()]);
            acc.add(y, f.view());
            offset += x.nrows();
        }
        Some(acc.finish())
    }
}

/// A message from the reading thread to the solver.
enum Msg {
    Block(Box<MappedBlock>),
    UnitEnd,
    Failed(Error),
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
