//! `kernlake.Model`: a fitted model from Python — load, save, bytes, predict, score.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::{RecordBatch, RecordBatchReader};
use kernlake::model::Model;
use kernlake::modelfile::ModelFile;
use kernlake::score::{score_batch_at, MissingRows, ScoreOptions, TableReport};
use numpy::{IntoPyArray, PyArray1, PyArrayMethods, PyUntypedArrayMethods};
use pyo3::prelude::*;
use pyo3::types::{PyBytes, PyType};

use crate::arrow::{import, ArrowStream, Batches};
use crate::errors::{input, IntoPy};
use crate::fit::matrix;
use crate::run::released;

/// A fitted model (Python class `kernlake.Model`).
#[pyclass(name = "Model", module = "kernlake._native", frozen)]
pub struct PyModel {
    inner: Arc<Model>,
}

impl PyModel {
    /// Wraps a fitted model.
    pub fn new(model: Model) -> Self {
        PyModel {
            inner: Arc::new(model),
        }
    }

    /// The library's model.
    pub fn model(&self) -> &Arc<Model> {
        &self.inner
    }
}

/// Python's `json.loads` of a serializable value: plain dicts, lists, numbers, text.
pub fn to_python<'py>(py: Python<'py>, v: &impl serde::Serialize) -> PyResult<Bound<'py, PyAny>> {
    let text = serde_json::to_string(v)
        .map_err(|e| input(py, format!("could not encode the value ({e})")))?;
    py.import("json")?.call_method1("loads", (text,))
}

/// The band's keyword arguments: level, time column, group column.
type BandArgs = (Option<f64>, Option<String>, Option<String>);

/// Scoring settings from the keyword arguments of `score` and `score_batches`.
#[allow(clippy::too_many_arguments)]
fn score_options(
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
fn score_all(
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

fn rayon_pool(threads: usize) -> kernlake::Result<rayon::ThreadPool> {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| {
            kernlake::Error::invalid("threads", format!("could not start a thread pool ({e})"))
        })
}

/// The output schema for an input schema (the contract check, on an empty batch).
fn output_schema(
    model: &Model,
    schema: arrow_schema::SchemaRef,
    opts: &ScoreOptions,
) -> kernlake::Result<arrow_schema::SchemaRef> {
    let empty = RecordBatch::new_empty(schema);
    Ok(score_batch_at(model, &empty, opts, 0)?.schema())
}

#[pymethods]
impl PyModel {
    /// Loads a model file written by `kernlake fit` or `Model.save`.
    #[classmethod]
    fn load(_cls: &Bound<'_, PyType>, py: Python<'_>, path: PathBuf) -> PyResult<Self> {
        let model = released(py, || Model::load(&path))?;
        Ok(PyModel::new(model))
    }

    /// Reads a model from the bytes of a model file (`Model.to_bytes`).
    #[classmethod]
    fn from_bytes(_cls: &Bound<'_, PyType>, py: Python<'_>, data: &[u8]) -> PyResult<Self> {
        let origin = Path::new("<bytes>");
        let model = released(py, || {
            let file = ModelFile::from_bytes(data, origin)?;
            Model::from_model_file(&file, origin)
        })?;
        Ok(PyModel::new(model))
    }

    /// Writes the model file atomically (a partial file never appears under `path`).
    fn save(&self, py: Python<'_>, path: PathBuf) -> PyResult<()> {
        let model = &self.inner;
        released(py, || model.save(&path))
    }

    /// The model file's bytes (for shipping a model to workers).
    fn to_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let model = &self.inner;
        let bytes = released(py, || model.to_model_file()?.to_bytes())?;
        Ok(PyBytes::new(py, &bytes))
    }

    /// Predictions for numpy rows `x` (rows × inputs, float64, C order, in the order of
    /// `inputs`).
    fn predict_array<'py>(
        &self,
        py: Python<'py>,
        x: &Bound<'py, PyAny>,
        threads: usize,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let xa = matrix(x, "X")?;
        let d = self.inner.input_dim();
        if xa.shape()[1] != d {
            return Err(input(
                py,
                format!(
                    "X has {} column(s), but the model takes {d} input(s): {}",
                    xa.shape()[1],
                    self.inner.columns.features.join(", ")
                ),
            ));
        }
        let xr = xa
            .try_readonly()
            .map_err(|e| input(py, format!("X: {e}")))?;
        let xv = xr.as_array();
        let model = &self.inner;
        let pred = released(py, || {
            let pool = rayon_pool(threads)?;
            Ok(pool.install(|| model.predict(xv)))
        })?;
        Ok(pred.into_pyarray(py))
    }

    /// Scores a table: the output batches as a stream for pyarrow.
    #[pyo3(signature = (table, keep, coverage, missing, name, batch_rows, threads, band=None, time=None, by=None))]
    #[allow(clippy::too_many_arguments)]
    fn score_stream(
        &self,
        py: Python<'_>,
        table: &Bound<'_, PyAny>,
        keep: Option<Vec<String>>,
        coverage: bool,
        missing: &str,
        name: String,
        batch_rows: usize,
        threads: usize,
        band: Option<f64>,
        time: Option<String>,
        by: Option<String>,
    ) -> PyResult<ArrowStream> {
        let model = &self.inner;
        let opts = score_options(
            py,
            model,
            keep,
            coverage,
            missing,
            name,
            batch_rows,
            threads,
            (band, time, by),
        )?;
        let batches = import(table)?;
        let (schema, out) = released(py, move || {
            let schema = output_schema(model, batches.schema(), &opts)?;
            let out = score_all(model, batches, &opts, None)?;
            Ok((schema, out))
        })?;
        Ok(ArrowStream::new(schema, out))
    }

    /// The schema of the scored batches for input tables of `table`'s schema (an empty
    /// table will do), as an empty stream: the same code that builds the scored batches
    /// declares it, so every column `score` writes appears here.
    #[pyo3(signature = (table, keep, coverage, missing, name, band=None))]
    #[allow(clippy::too_many_arguments)]
    fn score_schema(
        &self,
        py: Python<'_>,
        table: &Bound<'_, PyAny>,
        keep: Option<Vec<String>>,
        coverage: bool,
        missing: &str,
        name: String,
        band: Option<f64>,
    ) -> PyResult<ArrowStream> {
        let opts = score_options(
            py,
            &self.inner,
            keep,
            coverage,
            missing,
            name,
            65_536,
            1,
            (band, None, None),
        )?;
        let batches = import(table)?;
        let model = &self.inner;
        let in_schema = batches.schema();
        let schema = released(py, move || output_schema(model, in_schema, &opts))?;
        Ok(ArrowStream::new(schema, Vec::new()))
    }

    /// Scores a table with a band and returns the output stream and the deviation
    /// report as JSON text.
    #[pyo3(signature = (table, keep, coverage, missing, name, batch_rows, threads, band, time=None, by=None))]
    #[allow(clippy::too_many_arguments)]
    fn score_report_stream(
        &self,
        py: Python<'_>,
        table: &Bound<'_, PyAny>,
        keep: Option<Vec<String>>,
        coverage: bool,
        missing: &str,
        name: String,
        batch_rows: usize,
        threads: usize,
        band: f64,
        time: Option<String>,
        by: Option<String>,
    ) -> PyResult<(ArrowStream, String)> {
        let model = &self.inner;
        let opts = score_options(
            py,
            model,
            keep,
            coverage,
            missing,
            name,
            batch_rows,
            threads,
            (Some(band), time, by),
        )?;
        let mut report = TableReport::new(model, &opts, "<table>").py_err(py)?;
        let batches = import(table)?;
        let (schema, out, json) = released(py, move || {
            let schema = output_schema(model, batches.schema(), &opts)?;
            let out = score_all(model, batches, &opts, Some(&mut report))?;
            Ok((schema, out, report.finish(&opts).to_json()))
        })?;
        Ok((ArrowStream::new(schema, out), json))
    }

    /// Scores batches one at a time as they are read from `reader`.
    #[pyo3(signature = (reader, keep, coverage, missing, name, batch_rows, threads, band=None))]
    #[allow(clippy::too_many_arguments)]
    fn batch_scorer(
        &self,
        py: Python<'_>,
        reader: &Bound<'_, PyAny>,
        keep: Option<Vec<String>>,
        coverage: bool,
        missing: &str,
        name: String,
        batch_rows: usize,
        threads: usize,
        band: Option<f64>,
    ) -> PyResult<BatchScorer> {
        let opts = score_options(
            py,
            &self.inner,
            keep,
            coverage,
            missing,
            name,
            batch_rows,
            threads,
            (band, None, None),
        )?;
        let batches = import(reader)?;
        let model = Arc::clone(&self.inner);
        let in_schema = batches.schema();
        let schema = released(py, || output_schema(&model, in_schema, &opts))?;
        let pool = released(py, || rayon_pool(threads))?;
        Ok(BatchScorer {
            state: std::sync::Mutex::new(ScorerState {
                model,
                batches,
                opts,
                pool,
                schema,
                first: 0,
            }),
        })
    }

    /// Input column names, in the model's order.
    #[getter]
    fn inputs(&self) -> Vec<String> {
        self.inner.columns.features.clone()
    }

    /// The target column's name.
    #[getter]
    fn target(&self) -> Option<String> {
        self.inner.columns.target.clone()
    }

    /// Kernel, map, solver settings and intercept as plain values.
    #[getter]
    fn parameters<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        let m = &self.inner;
        let doc = serde_json::json!({
            "kernel": m.kernel,
            "map": m.map_spec,
            "features": m.weights.len(),
            "problem": m.problem,
            "intercept": m.intercept,
            "coverage": m.coverage.is_some(),
            "band": m.band.as_ref().map(|b| serde_json::json!({
                "calibration_rows": b.calibration_rows,
                "spread_rows": b.spread.rows,
                "default_level": kernlake::settings::defaults::BAND_LEVEL,
            })),
        });
        to_python(py, &doc)
    }

    /// The training report as plain values (as `kernlake inspect --json` shows it).
    #[getter]
    fn report<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyAny>> {
        to_python(py, &self.inner.report)
    }

    /// The model as `kernlake inspect` prints it.
    fn describe(&self) -> String {
        kernlake::inspect::render_model(&self.inner)
    }

    fn __repr__(&self) -> String {
        let m = &self.inner;
        format!(
            "kernlake.Model(target={:?}, inputs={}, kernel={}, map={}, dim={}, loss={})",
            m.columns.target.as_deref().unwrap_or("?"),
            m.columns.features.len(),
            json_name(&m.kernel.kind),
            json_name(&m.map_spec.kind),
            m.weights.len(),
            json_name(&m.problem.loss),
        )
    }
}

fn json_name(v: &impl serde::Serialize) -> String {
    match serde_json::to_value(v) {
        Ok(serde_json::Value::String(s)) => s,
        Ok(other) => other.to_string(),
        Err(_) => "?".into(),
    }
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
        &model.inner,
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
    let m = &model.inner;
    released(py, move || {
        let it = arrow_array::RecordBatchIterator::new(batches.into_iter().map(Ok), schema);
        let t0 = std::time::Instant::now();
        let out = score_all(m, Box::new(it), &opts, None)?;
        let secs = t0.elapsed().as_secs_f64();
        drop(out);
        Ok(secs)
    })
}
