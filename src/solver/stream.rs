//! The streaming pass shared by the out-of-core solvers: units of rows are read and
//! mapped on another thread, handed to the solver in a fixed order through a bounded
//! channel, and kept resident in memory while a budget allows.
//!
//! A block is standardized, split into training and holdout rows by a hash of each row's
//! stable id (the same rows every pass), and its training rows are mapped into the
//! feature space in pieces of at most 32 MiB, each handed on before the next is mapped.
//! A lazy stream (the Newton solver's) maps only the pieces the memory budget will keep;
//! the others travel as standardized inputs and the solver maps them a few rows at a
//! time just before it reads them, so mapped rows never make a round trip through main
//! memory. The solver visits the blocks on the calling thread in the order it asks for,
//! so whatever it accumulates is the same whatever the number of threads.

use std::borrow::Cow;
use std::sync::mpsc::sync_channel;
use std::sync::Arc;

use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2};

use crate::data::Block;
use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::metrics::{Metrics, MetricsAccumulator};
use crate::scale::Standardizer;

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

/// Target centring and scaling used inside the solver.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct TargetScale {
    /// Mean of the training target.
    pub mean: f64,
    /// Population standard deviation (1 when the target is constant).
    pub sd: f64,
}

/// Upper bound on the bytes of one mapped piece of a block.
const PIECE_BYTES: usize = 32 << 20;

/// Rows of a mapped piece for `dim` features: as many as fit in `PIECE_BYTES`, rounded
/// down to a multiple of 1,024 (the Newton solver's chunk, so that splitting a block into
/// pieces keeps its chunk boundaries), at least 1,024. Training maps its blocks in pieces
/// of this size, so that the mapped rows in flight stay small whatever the files' batches.
pub fn piece_rows(dim: usize) -> usize {
    (PIECE_BYTES / (8 * dim.max(1)) / 1024).max(1) * 1024
}

/// Is global row `row` in the holdout? A hash of the row id, fixed for the whole run.
pub fn is_holdout(row: u64, seed: u64, share: f64) -> bool {
    share > 0.0 && row_unit(row, seed) < share
}

/// A number in [0, 1) fixed by the row id and the seed, uniform over rows (splitmix64
/// finalizer, Steele, Lea & Flood, OOPSLA 2014): row subsets drawn from it are the same
/// whatever the block layout or the number of threads.
pub(crate) fn row_unit(row: u64, seed: u64) -> f64 {
    let mut z = row ^ seed.rotate_left(17) ^ 0x9E37_79B9_7F4A_7C15;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^= z >> 31;
    (z >> 11) as f64 / (1u64 << 53) as f64
}

/// The training rows of a streamed block: mapped, or standardized inputs that the visitor
/// maps itself, a few rows at a time while they are in cache (see [`Streamer::lazy`]).
pub(crate) enum TrainRows {
    /// Mapped rows (rows × D).
    Mapped(Array2<f64>),
    /// Standardized inputs (rows × inputs), not yet mapped.
    Inputs(Array2<f64>),
}

/// A block's training rows as a visitor reads them: mapped, or inputs with the map that
/// maps them.
#[derive(Clone, Copy)]
pub(crate) enum BlockRows<'a> {
    /// Mapped rows (rows × D).
    Mapped(ArrayView2<'a, f64>),
    /// Standardized inputs and the feature map.
    Inputs {
        /// Standardized inputs (rows × inputs).
        x: ArrayView2<'a, f64>,
        /// The map into the feature space.
        map: &'a dyn FeatureMap,
    },
}

impl<'a> BlockRows<'a> {
    /// Rows held.
    pub fn nrows(&self) -> usize {
        match self {
            BlockRows::Mapped(z) => z.nrows(),
            BlockRows::Inputs { x, .. } => x.nrows(),
        }
    }

    /// Features D of the mapped rows.
    pub fn dim(&self) -> usize {
        match self {
            BlockRows::Mapped(z) => z.ncols(),
            BlockRows::Inputs { map, .. } => map.output_dim(),
        }
    }

    /// Rows `lo..hi`.
    pub fn slice(&self, lo: usize, hi: usize) -> BlockRows<'a> {
        match *self {
            BlockRows::Mapped(z) => BlockRows::Mapped(z.slice_move(s![lo..hi, ..])),
            BlockRows::Inputs { x, map } => BlockRows::Inputs {
                x: x.slice_move(s![lo..hi, ..]),
                map,
            },
        }
    }
}

/// A block after standardization (and mapping, unless left to the visitor), split into
/// training and holdout rows.
pub(crate) struct MappedBlock {
    /// Training rows.
    pub z: TrainRows,
    /// Standardized targets of the training rows.
    pub y: Array1<f64>,
    /// Global row ids of the training rows.
    pub rows: Vec<usize>,
    hold_x: Array2<f64>,
    hold_y: Array1<f64>,
    /// Rows read (training and holdout).
    pub read_rows: u64,
}

impl MappedBlock {
    fn bytes(&self) -> usize {
        let z = match &self.z {
            TrainRows::Mapped(z) | TrainRows::Inputs(z) => z.len(),
        };
        (z + self.y.len() + self.rows.len() + self.hold_x.len() + self.hold_y.len()) * 8
    }

    /// Whether the training rows are mapped (only mapped blocks stay resident).
    fn is_mapped(&self) -> bool {
        matches!(self.z, TrainRows::Mapped(_))
    }

    /// The mapped training rows, mapped now on `streamer`'s pool if the stream left that
    /// to the visitor.
    pub fn mapped(&self, streamer: &Streamer) -> Cow<'_, Array2<f64>> {
        match &self.z {
            TrainRows::Mapped(z) => Cow::Borrowed(z),
            TrainRows::Inputs(x) => {
                Cow::Owned(streamer.pool.install(|| streamer.map.transform(x.view())))
            }
        }
    }

    /// The training rows as a visitor reads them.
    pub fn rows_view<'a>(&'a self, map: &'a dyn FeatureMap) -> BlockRows<'a> {
        match &self.z {
            TrainRows::Mapped(z) => BlockRows::Mapped(z.view()),
            TrainRows::Inputs(x) => BlockRows::Inputs { x: x.view(), map },
        }
    }
}

/// What the passes keep between epochs: the resident mapped blocks, the holdout rows and
/// the row counts seen on the first pass.
pub(crate) struct PassCache {
    resident: Vec<Option<Vec<Arc<MappedBlock>>>>,
    resident_bytes: usize,
    budget: usize,
    holdout_x: Vec<Array2<f64>>,
    holdout_y: Vec<f64>,
    /// Training rows (first pass).
    pub rows_trained: u64,
    /// Rows read, training and holdout (first pass).
    pub rows_read: u64,
    passes: usize,
}

impl PassCache {
    /// An empty cache for `units` units and a budget of `budget` bytes.
    pub fn new(units: usize, budget: usize) -> Self {
        PassCache {
            resident: (0..units).map(|_| None).collect(),
            resident_bytes: 0,
            budget,
            holdout_x: Vec::new(),
            holdout_y: Vec::new(),
            rows_trained: 0,
            rows_read: 0,
            passes: 0,
        }
    }

    /// Up to `max` standardized holdout input rows, spread evenly over the holdout (for
    /// choosing thresholds on rows the solver never saw); `None` without a holdout.
    pub fn holdout_inputs(&self, max: usize) -> Option<Array2<f64>> {
        let total: usize = self.holdout_x.iter().map(|x| x.nrows()).sum();
        if total == 0 || max == 0 {
            return None;
        }
        let d = self.holdout_x.iter().map(|x| x.ncols()).max().unwrap_or(0);
        let step = total.div_ceil(max);
        let mut out = Array2::zeros((total.div_ceil(step), d));
        let mut k = 0;
        let mut i = 0;
        for x in &self.holdout_x {
            for row in x.rows() {
                if i % step == 0 {
                    out.row_mut(k).assign(&row);
                    k += 1;
                }
                i += 1;
            }
        }
        Some(out.slice(ndarray::s![..k, ..]).to_owned())
    }

    /// Passes run so far.
    pub fn passes(&self) -> usize {
        self.passes
    }

    /// Rows held out (known after the first pass).
    pub fn holdout_rows(&self) -> u64 {
        self.holdout_y.len() as u64
    }
}

/// A message from the reading thread to the solver.
enum Msg {
    Block(Box<MappedBlock>),
    UnitEnd,
    Failed(Error),
}

/// What the solver needs to stream over the data.
pub(crate) struct Streamer<'a> {
    pub scaler: &'a Standardizer,
    pub map: &'a dyn FeatureMap,
    pub mean: f64,
    pub sd: f64,
    pub holdout: f64,
    pub seed: u64,
    pub epsilon: f64,
    pub pool: &'a rayon::ThreadPool,
    /// Leave the mapping of blocks that will not stay resident to the visitor, which
    /// maps a few rows at a time just before it reads them (the Newton pass): mapped rows
    /// then never travel through main memory, and nothing the size of a mapped block is
    /// in flight.
    pub lazy: bool,
}

impl Streamer<'_> {
    /// Standardizes and splits one raw block, then maps its training rows piece by piece,
    /// handing each mapped piece to `emit` as soon as it is ready.
    /// `map_now(bytes)` says whether a piece whose mapped rows take `bytes` is mapped here
    /// (always, unless the stream is lazy).
    fn prepare(
        &self,
        mut b: Block,
        map_now: &mut dyn FnMut(usize) -> bool,
        emit: &mut dyn FnMut(MappedBlock) -> Result<()>,
    ) -> Result<()> {
        let y_raw = b
            .y
            .take()
            .ok_or_else(|| Error::NoRows("the training data has no target column".to_string()))?;
        self.scaler.apply(b.x.view_mut());
        let hold: Vec<bool> = b
            .row_ids
            .iter()
            .map(|&r| is_holdout(r, self.seed, self.holdout))
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
                y[it] = (y_raw[i] - self.mean) / self.sd;
                rows.push(b.row_ids[i] as usize);
                it += 1;
            }
        }
        // Map in pieces of at most `piece_rows(D)` rows, each handed on before the next is
        // mapped, so the mapped rows in flight (one piece being mapped, one in the channel,
        // one being visited) stay small whatever the batch size of the files.
        let dim = self.map.output_dim();
        let piece = piece_rows(dim);
        let pieces = n_train.div_ceil(piece).max(1);
        let (mut hold_x, mut hold_y) = (Some(hold_x), Some(hold_y));
        for k in 0..pieces {
            let lo = k * piece;
            let hi = (lo + piece).min(n_train);
            let z = if map_now((hi - lo) * dim * 8) {
                let mut z = Array2::zeros((hi - lo, dim));
                self.pool.install(|| {
                    self.map
                        .transform_into(xt.slice(s![lo..hi, ..]), z.view_mut())
                });
                TrainRows::Mapped(z)
            } else {
                TrainRows::Inputs(xt.slice(s![lo..hi, ..]).to_owned())
            };
            let last = k + 1 == pieces;
            emit(MappedBlock {
                z,
                y: y.slice(s![lo..hi]).to_owned(),
                rows: rows[lo..hi].to_vec(),
                hold_x: hold_x.take().unwrap_or_else(|| Array2::zeros((0, d))),
                hold_y: hold_y.take().unwrap_or_else(|| Array1::zeros(0)),
                // Rows read: each piece its training rows; the last also the holdout and
                // skipped rows, so the pieces add up to the batch.
                read_rows: if last {
                    (b.rows - lo) as u64
                } else {
                    (hi - lo) as u64
                },
            })?;
        }
        Ok(())
    }

    /// One pass: visits every block of the units in `order`, resident ones from memory
    /// and the others read and mapped ahead on another thread (one mapped block in the
    /// channel, one being mapped, one being visited: memory stays near three blocks
    /// whatever the data size). Returns how many blocks came from memory.
    pub fn pass(
        &self,
        source: &dyn BlockSource,
        order: &[usize],
        cache: &mut PassCache,
        rows_done: &(dyn Fn(u64) + Sync),
        visit: &mut dyn FnMut(&Arc<MappedBlock>) -> Result<()>,
    ) -> Result<usize> {
        let first = cache.passes == 0;
        cache.passes += 1;
        let to_read: Vec<usize> = order
            .iter()
            .copied()
            .filter(|&u| cache.resident[u].is_none())
            .collect();
        let mut resident_blocks = 0;
        std::thread::scope(|scope| -> Result<()> {
            let (tx, rx) = sync_channel::<Msg>(1);
            // Mapped here: every piece of an eager stream; of a lazy one, on the first pass,
            // the pieces that the budget will keep resident (the visitor's rule below, as
            // far as it can be told ahead).
            let budget = cache.budget.saturating_sub(cache.resident_bytes);
            let producer = {
                let to_read = &to_read;
                scope.spawn(move || {
                    let mut planned = 0usize;
                    let mut map_now = |bytes: usize| {
                        if !self.lazy {
                            return true;
                        }
                        let keep = first && planned + bytes <= budget;
                        if keep {
                            planned += bytes;
                        }
                        keep
                    };
                    for &u in to_read {
                        let mut sink = |b: Block| -> Result<()> {
                            self.prepare(b, &mut map_now, &mut |mb| {
                                tx.send(Msg::Block(Box::new(mb)))
                                    .map_err(|_| Error::Numerical("training stopped".into()))
                            })
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
                for &u in order {
                    if let Some(blocks) = &cache.resident[u] {
                        for mb in blocks {
                            visit(mb)?;
                            rows_done(mb.read_rows);
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
                        visit(&next)?;
                        rows_done(next.read_rows);
                        if first {
                            cache.rows_trained += next.rows.len() as u64;
                            cache.rows_read += next.read_rows;
                            cache.holdout_x.push(next.hold_x.clone());
                            cache.holdout_y.extend(next.hold_y.iter());
                        }
                        let b = next.bytes();
                        if fits && next.is_mapped() && cache.resident_bytes + b <= cache.budget {
                            cache.resident_bytes += b;
                            kept.push(next);
                        } else if fits {
                            fits = false;
                            for k in kept.drain(..) {
                                cache.resident_bytes -= k.bytes();
                            }
                        }
                    }
                    if fits {
                        cache.resident[u] = Some(kept);
                    }
                }
                Ok(())
            })();
            drop(rx);
            producer.join().expect("the reading thread panicked");
            result
        })?;
        if first && cache.rows_trained == 0 {
            return Err(Error::NoRows(
                "every usable row fell in the holdout or was skipped".to_string(),
            ));
        }
        Ok(resident_blocks)
    }

    /// Holdout metrics (user units) of the solver-unit weights `w` (D + 1 entries, the
    /// last the bias).
    pub fn holdout_metrics(&self, w: ArrayView1<f64>, cache: &PassCache) -> Option<Metrics> {
        if cache.holdout_y.is_empty() {
            return None;
        }
        let dim = self.map.output_dim();
        let mut acc = MetricsAccumulator::new(self.epsilon);
        let mut offset = 0;
        for x in &cache.holdout_x {
            if x.nrows() == 0 {
                continue;
            }
            let z = self.pool.install(|| self.map.transform(x.view()));
            let f = z
                .dot(&w.slice(s![..dim]))
                .mapv(|v| self.mean + self.sd * (v + w[dim]));
            let y = ArrayView1::from(&cache.holdout_y[offset..offset + x.nrows()]);
            acc.add(y, f.view());
            offset += x.nrows();
        }
        Some(acc.finish())
    }
}
