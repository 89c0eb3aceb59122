//! A partition's side of a fit in parts: what the driver broadcasts once (the plan: the
//! survey's columns, which of them the model keeps, the target's scale, the holdout
//! rule and a model holding the scaler and the feature map), and one Newton pass over
//! the partition's batches, returned as bytes.

use std::path::{Path, PathBuf};

use arrow_array::RecordBatch;
use ndarray::{s, Array1, Axis};
use serde::{Deserialize, Serialize};

use crate::data::{block_of_batch, MissingPolicy, ResolvedColumns};
use crate::error::{Error, Result};
use crate::metrics::MetricsAccumulator;
use crate::model::Model;
use crate::modelfile::ModelFile;
use crate::solver::blocks::is_holdout;
use crate::solver::newton::PassStats;

const PLAN_TAG: &[u8; 8] = b"KLPLAN01";
const PART_TAG: &[u8; 8] = b"KLPART01";

/// What every partition must know for the whole fit (the JSON head of the plan bytes).
#[derive(Clone, Debug, Serialize, Deserialize)]
pub(super) struct Head {
    /// The surveyed columns (inputs, then the target): row keys hash all of them.
    pub columns: ResolvedColumns,
    /// Positions in `columns.features` of the inputs the model keeps.
    pub kept: Vec<usize>,
    pub holdout: f64,
    pub seed: u64,
    pub mean: f64,
    pub sd: f64,
    pub missing: MissingPolicy,
    /// Tube half-width in target units (for the holdout's tube share).
    pub epsilon: f64,
}

/// The plan as bytes: tag, head length, head (JSON), model file of the template.
pub(super) fn plan_bytes(head: &Head, template: &Model) -> Result<Vec<u8>> {
    let json = serde_json::to_vec(head).map_err(|source| Error::Encode {
        what: "the plan of a fit in parts",
        source,
    })?;
    let model = template.to_model_file()?.to_bytes()?;
    let mut out = Vec::with_capacity(16 + json.len() + model.len());
    out.extend_from_slice(PLAN_TAG);
    out.extend_from_slice(&(json.len() as u64).to_le_bytes());
    out.extend_from_slice(&json);
    out.extend_from_slice(&model);
    Ok(out)
}

fn bad(what: &'static str) -> Error {
    Error::invalid(
        what,
        "the bytes are not of this version of kernlake (damaged, truncated or from another version)",
    )
}

/// Splits tagged bytes into their length-prefixed head and the rest.
fn split<'a>(bytes: &'a [u8], tag: &[u8; 8], what: &'static str) -> Result<(&'a [u8], &'a [u8])> {
    if bytes.len() < 16 || &bytes[..8] != tag {
        return Err(bad(what));
    }
    let len = u64::from_le_bytes(bytes[8..16].try_into().map_err(|_| bad(what))?);
    let len = usize::try_from(len).map_err(|_| bad(what))?;
    let rest = &bytes[16..];
    if len > rest.len() {
        return Err(bad(what));
    }
    Ok(rest.split_at(len))
}

/// What a partition keeps for a whole fit: the plan, read once per worker process.
pub struct PartWorker {
    head: Head,
    model: Model,
    place: PathBuf,
}

impl PartWorker {
    /// Reads the plan bytes of [`super::PartsFit::plan_bytes`].
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] or [`Error::ModelFile`] if they are not a plan.
    pub fn from_plan(bytes: &[u8]) -> Result<PartWorker> {
        let (json, model) = split(bytes, PLAN_TAG, "plan")?;
        let head: Head = serde_json::from_slice(json).map_err(|_| bad("plan"))?;
        let origin = Path::new("<plan>");
        let model = Model::from_model_file(&ModelFile::from_bytes(model, origin)?, origin)?;
        Ok(PartWorker {
            head,
            model,
            place: PathBuf::from("<partition>"),
        })
    }
}

/// One partition's share of one Newton pass.
pub struct PartPass<'a> {
    worker: &'a PartWorker,
    stats: PassStats,
    /// Holdout errors at each candidate point of the pass.
    holdout: Vec<(Array1<f64>, MetricsAccumulator)>,
    /// Rows read so far (message row numbers count from here).
    read: u64,
}

impl<'a> PartPass<'a> {
    /// Opens the partition's share of the pass whose bytes the driver broadcast
    /// ([`super::PartsFit::open_pass`]).
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if the bytes are not such a pass.
    pub fn new(worker: &'a PartWorker, pass: &[u8]) -> Result<Self> {
        let stats = PassStats::from_bytes(pass)?;
        let holdout = stats
            .candidates()
            .into_iter()
            .map(|(_, w)| (w, MetricsAccumulator::new(worker.head.epsilon)))
            .collect();
        Ok(PartPass {
            worker,
            stats,
            holdout,
            read: 0,
        })
    }

    /// Adds one Arrow batch of the partition: its rows are read as the survey read them
    /// (the same columns, the same missing-value policy), split into training and
    /// holdout rows by their value keys, standardized, and mapped a tile at a time.
    ///
    /// # Errors
    /// [`Error::Column`] for an absent or non-numeric column, [`Error::Cell`] for a
    /// missing value under the `fail` policy.
    pub fn add_batch(&mut self, batch: &RecordBatch) -> Result<()> {
        let h = &self.worker.head;
        let names: Vec<&str> = h.columns.all().collect();
        let b = block_of_batch(
            batch,
            &names,
            true,
            h.missing,
            &self.worker.place,
            self.read,
        )?;
        self.read += b.rows as u64;
        let y_raw = b.y.as_ref().ok_or(Error::NoTarget)?;
        let model = &self.worker.model;
        let mut x = b.x.select(Axis(1), &h.kept);
        model.scaler.apply(x.view_mut());
        let (train, hold): (Vec<usize>, Vec<usize>) =
            (0..b.kept()).partition(|&i| !is_holdout(b.row_ids[i], h.seed, h.holdout));
        if !train.is_empty() {
            let xt = x.select(Axis(0), &train);
            let yt: Array1<f64> = train.iter().map(|&i| (y_raw[i] - h.mean) / h.sd).collect();
            let ids: Vec<usize> = train.iter().map(|&i| b.row_ids[i] as usize).collect();
            self.stats
                .add_inputs(None, xt.view(), model.map(), yt.view(), &ids);
        }
        if !hold.is_empty() {
            let xh = x.select(Axis(0), &hold);
            let yh: Array1<f64> = hold.iter().map(|&i| y_raw[i]).collect();
            let z = model.map().transform(xh.view());
            let dim = z.ncols();
            for (w, acc) in &mut self.holdout {
                let f = z
                    .dot(&w.slice(s![..dim]))
                    .mapv(|v| h.mean + h.sd * (v + w[dim]));
                acc.add(yh.view(), f.view());
            }
        }
        Ok(())
    }

    /// The partition's statistics as bytes for the driver: O(D + sample × inputs).
    ///
    /// # Errors
    /// [`Error::Encode`] if the holdout sums cannot be written (they always can).
    pub fn to_bytes(&self) -> Result<Vec<u8>> {
        let accs: Vec<&MetricsAccumulator> = self.holdout.iter().map(|(_, a)| a).collect();
        let json = serde_json::to_vec(&accs).map_err(|source| Error::Encode {
            what: "a partition's holdout sums",
            source,
        })?;
        let stats = self.stats.to_bytes();
        let mut out = Vec::with_capacity(16 + json.len() + stats.len());
        out.extend_from_slice(PART_TAG);
        out.extend_from_slice(&(json.len() as u64).to_le_bytes());
        out.extend_from_slice(&json);
        out.extend_from_slice(&stats);
        Ok(out)
    }
}

/// A partition's bytes read back: its pass statistics and its holdout sums.
pub(super) fn read_part(bytes: &[u8]) -> Result<(PassStats, Vec<MetricsAccumulator>)> {
    let (json, stats) = split(bytes, PART_TAG, "partition statistics")?;
    let accs: Vec<MetricsAccumulator> =
        serde_json::from_slice(json).map_err(|_| bad("partition statistics"))?;
    Ok((PassStats::from_bytes(stats)?, accs))
}
