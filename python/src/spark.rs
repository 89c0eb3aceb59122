//! The library's fit in parts (`kernlake::fit::parts`) for `kernlake.spark`: the checks
//! before any job, a partition's survey part and pass share over its Arrow batches, and
//! the driver. Conversion only; the mathematics are the library's.

use std::path::Path;
use std::sync::Mutex;

use arrow_array::RecordBatchReader;
use kernlake::data::{block_of_batch, MissingPolicy, ResolvedColumns, SurveyPart};
use kernlake::fit::parts::{check, PartPass, PartWorker, PartsFit};
use pyo3::prelude::*;
use pyo3::types::{PyBytes, PyDict};

use crate::arrow::import;
use crate::errors::{input, IntoPy};
use crate::model::PyModel;
use crate::options::{fit_options, source_settings};
use crate::run::released;
use crate::table;

fn read_error(e: impl std::fmt::Display) -> kernlake::Error {
    kernlake::Error::File {
        path: Path::new("<partition>").to_path_buf(),
        message: format!("could not be read ({e})"),
    }
}

/// Checks a fit's settings and columns against the table's schema (an empty table of the
/// DataFrame's schema) before any job runs; returns the input columns and the missing
/// policy's name.
#[pyfunction]
#[pyo3(signature = (schema_table, target, features, exclude, missing, settings))]
pub fn spark_fit_check(
    py: Python<'_>,
    schema_table: &Bound<'_, PyAny>,
    target: String,
    features: Option<Vec<String>>,
    exclude: Option<Vec<String>>,
    missing: &str,
    settings: &Bound<'_, PyDict>,
) -> PyResult<Vec<String>> {
    let opts = fit_options(settings)?;
    check(&opts).py_err(py)?;
    let src = source_settings(py, Some(target), features, exclude, missing, ",")?;
    let batches = import(schema_table)?;
    table::choose(batches.schema().as_ref(), &src.selection).py_err(py)
}

fn policy(py: Python<'_>, missing: &str) -> PyResult<MissingPolicy> {
    match missing {
        "skip" => Ok(MissingPolicy::Skip),
        "fail" => Ok(MissingPolicy::Fail),
        other => Err(input(
            py,
            format!("invalid value for missing: '{other}' is not one of skip, fail"),
        )),
    }
}

/// A partition's survey part over the batches of `reader` (a stream of its rows), as
/// bytes.
#[pyfunction]
#[pyo3(signature = (reader, features, target, missing, sample, seed))]
pub fn spark_survey_part<'py>(
    py: Python<'py>,
    reader: &Bound<'py, PyAny>,
    features: Vec<String>,
    target: String,
    missing: &str,
    sample: usize,
    seed: u64,
) -> PyResult<Bound<'py, PyBytes>> {
    let policy = policy(py, missing)?;
    let batches = import(reader)?;
    let bytes = released(py, move || {
        let columns = ResolvedColumns {
            features,
            target: Some(target),
        };
        let names: Vec<String> = columns.all().map(str::to_string).collect();
        let names: Vec<&str> = names.iter().map(String::as_str).collect();
        let mut part = SurveyPart::new(columns.clone(), sample, seed);
        let place = Path::new("<partition>");
        for batch in batches {
            let batch = batch.map_err(read_error)?;
            let block = block_of_batch(&batch, &names, true, policy, place, part.rows())?;
            part.add(&block);
        }
        Ok(part.to_bytes())
    })?;
    Ok(PyBytes::new(py, &bytes))
}

/// What a Python worker keeps for a whole fit: the plan, read once.
#[pyclass(module = "kernlake._native", frozen)]
pub struct SparkWorker {
    inner: PartWorker,
}

#[pymethods]
impl SparkWorker {
    /// Reads the plan bytes the driver broadcast.
    #[new]
    fn new(py: Python<'_>, plan: &[u8]) -> PyResult<Self> {
        let inner = released(py, || PartWorker::from_plan(plan))?;
        Ok(SparkWorker { inner })
    }

    /// The partition's share of the pass `pass_bytes` over the batches of `reader`, as
    /// bytes.
    fn pass_part<'py>(
        &self,
        py: Python<'py>,
        pass_bytes: &[u8],
        reader: &Bound<'py, PyAny>,
    ) -> PyResult<Bound<'py, PyBytes>> {
        let batches = import(reader)?;
        let worker = &self.inner;
        let bytes = released(py, move || {
            let mut part = PartPass::new(worker, pass_bytes)?;
            for batch in batches {
                part.add_batch(&batch.map_err(read_error)?)?;
            }
            part.to_bytes()
        })?;
        Ok(PyBytes::new(py, &bytes))
    }
}

/// The driver of a fit on Spark, between passes.
#[pyclass(module = "kernlake._native", frozen)]
pub struct SparkDriver {
    inner: Mutex<Option<PartsFit>>,
}

impl SparkDriver {
    fn with<T>(
        &self,
        py: Python<'_>,
        f: impl FnOnce(&mut PartsFit) -> kernlake::Result<T> + Send,
    ) -> PyResult<T>
    where
        T: Send,
    {
        let inner = &self.inner;
        released(py, move || {
            let mut guard = inner.lock().expect("the driver's lock is never poisoned");
            let fit = guard.as_mut().ok_or_else(|| {
                kernlake::Error::invalid("fit in parts", "the fit has finished already")
            })?;
            f(fit)
        })
    }
}

#[pymethods]
impl SparkDriver {
    /// Plans the fit from the partitions' survey parts (bytes, in partition order).
    #[new]
    #[pyo3(signature = (parts, missing, settings))]
    fn new(
        py: Python<'_>,
        parts: Vec<Vec<u8>>,
        missing: &str,
        settings: &Bound<'_, PyDict>,
    ) -> PyResult<Self> {
        let opts = fit_options(settings)?;
        let policy = policy(py, missing)?;
        let fit = released(py, move || {
            let mut it = parts.iter();
            let first = it.next().ok_or_else(|| {
                kernlake::Error::NoRows("the DataFrame has no rows (nor any partition)".into())
            })?;
            let mut total = SurveyPart::from_bytes(first)?;
            for p in it {
                total.merge(SurveyPart::from_bytes(p)?)?;
            }
            PartsFit::plan(total, opts, policy)
        })?;
        Ok(SparkDriver {
            inner: Mutex::new(Some(fit)),
        })
    }

    /// The plan bytes to broadcast once.
    fn plan_bytes<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self.with(py, |f| Ok(f.plan_bytes().to_vec()))?;
        Ok(PyBytes::new(py, &bytes))
    }

    /// Opens the next pass: the bytes to broadcast.
    fn open_pass<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self.with(py, |f| Ok(f.open_pass()))?;
        Ok(PyBytes::new(py, &bytes))
    }

    /// Closes the pass with the partitions' bytes in partition order; True when done.
    fn close_pass(&self, py: Python<'_>, parts: Vec<Vec<u8>>) -> PyResult<bool> {
        self.with(py, move |f| {
            let refs: Vec<&[u8]> = parts.iter().map(Vec::as_slice).collect();
            f.close_pass(&refs)
        })
    }

    /// Passes closed so far.
    fn passes(&self, py: Python<'_>) -> PyResult<usize> {
        self.with(py, |f| Ok(f.passes()))
    }

    /// The fitted model (the driver is spent afterwards).
    fn finish(&self, py: Python<'_>) -> PyResult<PyModel> {
        let inner = &self.inner;
        let model = released(py, move || {
            let fit = inner
                .lock()
                .expect("the driver's lock is never poisoned")
                .take()
                .ok_or_else(|| {
                    kernlake::Error::invalid("fit in parts", "the fit has finished already")
                })?;
            fit.finish()
        })?;
        Ok(PyModel::new(model))
    }
}
