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

use std::ops::ControlFlow;
use std::sync::mpsc::sync_channel;
use std::sync::Arc;

use ndarray::{s, Array1, Array2, ArrayView1};

use crate::data::Block;
use crate::error::{Error, Result};
use crate::features::FeatureMap;
use crate::metrics::{Metrics, MetricsAccumulator};
use crate::scale::Standardizer;

use super::cache::{HoldoutRows, PassCache};
pub(crate) use super::rows::BlockRows;
use super::rows::{piece_rows, MappedBlock, TrainRows};
pub(crate) use super::source::row_unit;
use super::source::{is_holdout, BlockSource, Flow};

/// Salt of the hash that chooses which holdout rows are kept (independent of the hash
/// that chooses the holdout itself).
const KEEP_SALT: u64 = 0x6b65_6570_686f_6c64;

/// A message from the reading thread to the solver.
enum Msg {
    Block(Box<MappedBlock>),
    Holdout(HoldoutRows),
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
    /// Share of the holdout rows kept for metrics (a seeded sample by row hash).
    pub holdout_keep: f64,
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
    /// Standardizes and splits one raw block, sends its kept holdout rows, then maps its
    /// training rows piece by piece, sending each mapped piece as soon as it is ready;
    /// stops when `send` says so. `map_now(bytes)` says whether a piece whose mapped rows
    /// take `bytes` is mapped here (always, unless the stream is lazy).
    fn prepare(
        &self,
        mut b: Block,
        map_now: &mut dyn FnMut(usize) -> bool,
        send: &mut dyn FnMut(Msg) -> Flow,
    ) -> Result<Flow> {
        let y_raw = b.y.take().ok_or(Error::NoTarget)?;
        self.scaler.apply(b.x.view_mut());
        // 0: training row, 1: holdout row not kept, 2: holdout row kept.
        let hold: Vec<u8> = b
            .row_ids
            .iter()
            .map(|&r| match is_holdout(r, self.seed, self.holdout) {
                false => 0,
                true if row_unit(r, self.seed ^ KEEP_SALT) < self.holdout_keep => 2,
                true => 1,
            })
            .collect();
        let n_seen = hold.iter().filter(|&&h| h > 0).count();
        let n_hold = hold.iter().filter(|&&h| h == 2).count();
        let n_train = hold.len() - n_seen;
        let d = b.x.ncols();
        let mut xt = Array2::zeros((n_train, d));
        let mut hold_x = Array2::zeros((n_hold, d));
        let mut y = Array1::zeros(n_train);
        let mut hold_y = Array1::zeros(n_hold);
        let mut rows = Vec::with_capacity(n_train);
        let (mut it, mut ih) = (0, 0);
        for (i, &h) in hold.iter().enumerate() {
            if h == 2 {
                hold_x.row_mut(ih).assign(&b.x.row(i));
                hold_y[ih] = y_raw[i];
                ih += 1;
            } else if h == 0 {
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
        let held = HoldoutRows {
            x: hold_x,
            y: hold_y,
            seen: n_seen as u64,
        };
        if send(Msg::Holdout(held)).is_break() {
            return Ok(ControlFlow::Break(()));
        }
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
            let block = MappedBlock {
                z,
                y: y.slice(s![lo..hi]).to_owned(),
                rows: rows[lo..hi].to_vec(),
                // Rows read: each piece its training rows; the last also the holdout and
                // skipped rows, so the pieces add up to the batch.
                read_rows: if last {
                    (b.rows - lo) as u64
                } else {
                    (hi - lo) as u64
                },
            };
            if send(Msg::Block(Box::new(block))).is_break() {
                return Ok(ControlFlow::Break(()));
            }
        }
        Ok(ControlFlow::Continue(()))
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
                    // A failed send means the solver has stopped listening (it finished
                    // early or failed): the signal to stop reading, not an error here.
                    let mut send = |m: Msg| match tx.send(m) {
                        Ok(()) => ControlFlow::Continue(()),
                        Err(_) => ControlFlow::Break(()),
                    };
                    for &u in to_read {
                        let mut stopped = false;
                        let mut sink = |b: Block| -> Result<Flow> {
                            let flow = self.prepare(b, &mut map_now, &mut send)?;
                            stopped |= flow.is_break();
                            Ok(flow)
                        };
                        match source.read_unit(u, &mut sink) {
                            Ok(()) => {
                                if stopped || send(Msg::UnitEnd).is_break() {
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
                            Ok(Msg::Holdout(h)) => {
                                if first {
                                    cache.keep_holdout(h);
                                }
                                continue;
                            }
                            Ok(Msg::UnitEnd) => break,
                            Ok(Msg::Failed(e)) => return Err(e),
                            // The reader ends every unit it starts unless it panicked;
                            // its panic is resumed below.
                            Err(_) => return Ok(()),
                        };
                        visit(&next)?;
                        rows_done(next.read_rows);
                        if first {
                            cache.rows_trained += next.rows.len() as u64;
                            cache.rows_read += next.read_rows;
                        }
                        let b = next.bytes();
                        if fits && next.is_mapped() && cache.room_for(b) {
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
            if let Err(panic) = producer.join() {
                std::panic::resume_unwind(panic);
            }
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
