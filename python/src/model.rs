//! `kernlake.Model`: a fitted model from Python — load, save, bytes, predict, score.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::RecordBatchReader;
use kernlake::model::Model;
use kernlake::modelfile::ModelFile;
use kernlake::score::TableReport;
use numpy::{IntoPyArray, PyArray1, PyArrayMethods, PyUntypedArrayMethods};
use pyo3::prelude::*;
use pyo3::types::{PyBytes, PyType};

use crate::arrow::{import, ArrowStream};
use crate::errors::{input, IntoPy};
use crate::fit::matrix;
use crate::run::released;
use crate::scoring::{output_schema, rayon_pool, score_all, score_options, BatchScorer};

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
        Ok(BatchScorer::new(model, batches, opts, pool, schema))
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
