//! Scoring from Python: the keyword arguments made into [`ScoreOptions`], tables scored
//! batch by batch on a pool of the asked threads, and the scorer that yields one scored
//! batch at a time.

use std::path::PathBuf;
use std::sync::Arc;

use arrow_array::RecordBatch;
use kernlake::model::Model;
use kernlake::score::{score_batch_at, MissingRows, ScoreOptions, TableReport};
use pyo3::prelude::*;

use crate::arrow::{import, ArrowStream, Batches};
use crate::errors::{input, IntoPy};
use crate::model::PyModel;
use crate::run::released;

/// The band's keyword arguments: level, time column, group column.
pub(crate) type BandArgs = (Option<f64>, Option<String>, Option<String>);

/// Scoring settings from the keyword arguments of `score` and `score_batches`.
#[allow(clippy::too_many_arguments)]
pub(crate) fn score_options(
    py: Python<'_>,
    model: &Model,
    keep: Option<Vec<String>>,
    coverage: bool,
    missing: &str,
    name: String,
    batch_rows: usize,
    threads: usize,
    band: BandArgs,
) -> PyResult<ScoreOptions> {
    let missing = match missing {
        "null" => MissingRows::Null,
        "skip" => MissingRows::Skip,
        "fail" => MissingRows::Fail,
        other => {
            return Err(input(
                py,
                format!("invalid value for missing: '{other}' is not one of null, skip, fail"),
            ))
        }
    };
    let opts = ScoreOptions {
        prediction_name: name,
        keep,
        coverage,
        missing,
        batch_rows,
        threads,
        band: band.0,
        time_column: band.1,
        group_column: band.2,
        ..ScoreOptions::default()
    };
    opts.validate().py_err(py)?;
    kernlake::score::check_band_options(model, &opts).py_err(py)?;
    Ok(opts)
}

/// Scores every batch of `batches` in slices of `opts.batch_rows` rows (row numbers in
/// messages count from the table's first row) on a pool of `opts.threads`.
pub(crate) fn score_all(
    model: &Model,
    batches: Batches,
    opts: &ScoreOptions,
    mut report: Option<&mut TableReport>,
) -> kernlake::Result<Vec<RecordBatch>> {
    let pool = rayon_pool(opts.threads)?;
    let mut out = Vec::new();
    let mut first = 0u64;
    for batch in batches {
        let batch = batch.map_err(|e| kernlake::Error::File {
            path: PathBuf::from("<table>"),
            message: format!("could not be read ({e})"),
        })?;
        let mut offset = 0;
        while offset < batch.num_rows() {
            let len = opts.batch_rows.min(batch.num_rows() - offset);
            let part = batch.slice(offset, len);
            let at = first + offset as u64;
            out.push(pool.install(|| match report.as_deref_mut() {
                Some(r) => r.score(model, &part, opts, at),
                None => score_batch_at(model, &part, opts, at),
            })?);
            offset += len;
        }
        first += batch.num_rows() as u64;
    }
    Ok(out)
}

pub(crate) fn rayon_pool(threads: usize) -> kernlake::Result<rayon::ThreadPool> {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| {
            kernlake::Error::invalid("threads", format!("could not start a thread pool ({e})"))
        })
}

/// The output schema for an input schema (the contract check, on an empty batch).
pub(crate) fn output_schema(
    model: &Model,
    schema: arrow_schema::SchemaRef,
    opts: &ScoreOptions,
) -> kernlake::Result<arrow_schema::SchemaRef> {
    let empty = RecordBatch::new_empty(schema);
    Ok(score_batch_at(model, &empty, opts, 0)?.schema())
}

struct ScorerState {
    model: Arc<Model>,
    batches: Batches,
    opts: ScoreOptions,
    pool: rayon::ThreadPool,
    schema: arrow_schema::SchemaRef,
    first: u64,
}

/// Scored batches, one per input batch, read and scored on demand.
#[pyclass(module = "kernlake._native", frozen)]
pub struct BatchScorer {
    state: std::sync::Mutex<ScorerState>,
}

impl BatchScorer {
    /// A scorer of `batches` whose output has `schema`.
    pub(crate) fn new(
        model: Arc<Model>,
        batches: Batches,
        opts: ScoreOptions,
        pool: rayon::ThreadPool,
        schema: arrow_schema::SchemaRef,
    ) -> Self {
        BatchScorer {
            state: std::sync::Mutex::new(ScorerState {
                model,
                batches,
                opts,
                pool,
                schema,
                first: 0,
            }),
        }
    }
}

#[pymethods]
impl BatchScorer {
    /// The next scored batch as a one-batch stream, or `None` at the end.
    fn next_stream(&self, py: Python<'_>) -> PyResult<Option<ArrowStream>> {
        let state = &self.state;
        let out = released(py, || {
            let mut s = state.lock().expect("the scorer's lock is never poisoned");
            let Some(batch) = s.batches.next() else {
                return Ok(None);
            };
            let batch = batch.map_err(|e| kernlake::Error::File {
                path: PathBuf::from("<table>"),
                message: format!("could not be read ({e})"),
            })?;
            let first = s.first;
            let (model, opts, pool) = (&s.model, &s.opts, &s.pool);
            let scored = pool.install(|| score_batch_at(model, &batch, opts, first))?;
            s.first += batch.num_rows() as u64;
            Ok(Some((s.schema.clone(), scored)))
        })?;
        Ok(out.map(|(schema, b)| ArrowStream::new(schema, vec![b])))
    }
}

/// Benchmark hook: seconds the library takes to score `table` (already imported, so no
/// Python runs between batches), with `score`'s default options.
#[pyfunction]
pub fn _score_in_rust(py: Python<'_>, model: &PyModel, table: &Bound<'_, PyAny>) -> PyResult<f64> {
    let opts = score_options(
        py,
        model.model(),
        None,
        true,
        "null",
        "prediction".into(),
        65_536,
        0,
        (None, None, None),
    )?;
    let batches: Vec<RecordBatch> = import(table)?
        .collect::<Result<_, _>>()
        .map_err(|e| input(py, format!("the table could not be read ({e})")))?;
    let schema = batches
        .first()
        .map(|b| b.schema())
        .unwrap_or_else(|| std::sync::Arc::new(arrow_schema::Schema::empty()));
    let m = model.model();
    released(py, move || {
        let it = arrow_array::RecordBatchIterator::new(batches.into_iter().map(Ok), schema);
        let t0 = std::time::Instant::now();
        let out = score_all(m, Box::new(it), &opts, None)?;
        let secs = t0.elapsed().as_secs_f64();
        drop(out);
        Ok(secs)
    })
}
