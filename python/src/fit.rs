//! `kernlake.fit`: streaming over files (the same discovery, partitions and missing
//! policy as `kernlake fit`), or in memory over numpy arrays or an Arrow table.

use arrow_array::RecordBatchReader;
use kernlake::data::{discover, resolve_columns, ResolvedColumns, TableReader};
use kernlake::fit::Fitter;
use numpy::{PyArray1, PyArray2};
use numpy::{PyArrayMethods, PyUntypedArrayMethods};
use pyo3::prelude::*;
use pyo3::types::PyDict;

use crate::arrow::import;
use crate::errors::input;
use crate::model::PyModel;
use crate::options::{fit_options, source_settings};
use crate::run::{interruptible, FitObserver};
use crate::table;

/// Streams a fit over Parquet/CSV files, folders or glob patterns.
#[pyfunction]
#[pyo3(signature = (sources, target, features, exclude, missing, delimiter, progress, settings))]
#[allow(clippy::too_many_arguments)]
pub fn fit_files(
    py: Python<'_>,
    sources: Vec<String>,
    target: String,
    features: Option<Vec<String>>,
    exclude: Option<Vec<String>>,
    missing: &str,
    delimiter: &str,
    progress: bool,
    settings: &Bound<'_, PyDict>,
) -> PyResult<PyModel> {
    let opts = fit_options(settings)?;
    let src = source_settings(py, Some(target), features, exclude, missing, delimiter)?;
    let model = interruptible(py, move |stop| {
        let files = discover(&sources)?;
        let columns = resolve_columns(&files, &src.selection, &src.csv)?;
        let known_rows: u64 = files.iter().filter_map(|f| f.rows).sum();
        let reader = TableReader::new(files, columns)
            .with_batch_rows(opts.block_rows)
            .with_missing(src.missing)
            .with_csv(src.csv);
        let observer = FitObserver::new(progress, known_rows, stop);
        let survey_bar = observer.rows_bar("survey");
        let model = Fitter::from_options(opts)
            .fit_files(&reader, &observer, &|rows| survey_bar.set_position(rows))?;
        survey_bar.finish_and_clear();
        Ok(model)
    })?;
    Ok(PyModel::new(model))
}

/// A C-contiguous float64 array of `ndim` dimensions, or an input error naming `what`.
fn float_array<'py>(
    obj: &Bound<'py, PyAny>,
    what: &str,
    ndim: usize,
) -> PyResult<Bound<'py, PyAny>> {
    let py = obj.py();
    let np = py.import("numpy")?;
    if !obj.is_instance(&np.getattr("ndarray")?)? {
        return Err(input(
            py,
            format!(
                "{what} must be a numpy array, got {}",
                obj.get_type().name()?
            ),
        ));
    }
    let dtype: String = obj.getattr("dtype")?.str()?.extract()?;
    let dims: usize = obj.getattr("ndim")?.extract()?;
    if dims != ndim {
        return Err(input(
            py,
            format!("{what} must have {ndim} dimension(s), got {dims}"),
        ));
    }
    if dtype != "float64" {
        return Err(input(
            py,
            format!(
                "{what} has dtype {dtype}, but kernlake reads float64 arrays; convert it with {what}.astype('float64')"
            ),
        ));
    }
    let c_contiguous: bool = obj.getattr("flags")?.getattr("c_contiguous")?.extract()?;
    if !c_contiguous {
        return Err(input(
            py,
            format!(
                "{what} is not C-contiguous (Fortran order or a strided view); pass numpy.ascontiguousarray({what})"
            ),
        ));
    }
    Ok(obj.clone())
}

/// Checks and borrows a 2-D float64 C-contiguous array.
pub fn matrix<'py>(obj: &Bound<'py, PyAny>, what: &str) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let a = float_array(obj, what, 2)?;
    a.cast_into::<PyArray2<f64>>()
        .map_err(|_| input(obj.py(), format!("{what} is not a 2-D float64 array")))
}

/// Fits in memory on numpy rows `x` (rows × inputs, float64, C order) and target `y`.
#[pyfunction]
#[pyo3(signature = (x, y, names, progress, settings))]
pub fn fit_arrays(
    py: Python<'_>,
    x: &Bound<'_, PyAny>,
    y: &Bound<'_, PyAny>,
    names: Option<Vec<String>>,
    progress: bool,
    settings: &Bound<'_, PyDict>,
) -> PyResult<PyModel> {
    let opts = fit_options(settings)?;
    let xa = matrix(x, "X")?;
    let ya = float_array(y, "y", 1)?
        .cast_into::<PyArray1<f64>>()
        .map_err(|_| input(py, "y is not a 1-D float64 array"))?;
    if xa.shape()[0] != ya.shape()[0] {
        return Err(input(
            py,
            format!(
                "X has {} rows but y has {}; give one target value per row",
                xa.shape()[0],
                ya.shape()[0]
            ),
        ));
    }
    if let Some(n) = &names {
        if n.len() != xa.shape()[1] {
            return Err(input(
                py,
                format!(
                    "{} input name(s) given for {} column(s) of X",
                    n.len(),
                    xa.shape()[1]
                ),
            ));
        }
    }
    let xr = xa
        .try_readonly()
        .map_err(|e| input(py, format!("X: {e}")))?;
    let yr = ya
        .try_readonly()
        .map_err(|e| input(py, format!("y: {e}")))?;
    let (xv, yv) = (xr.as_array(), yr.as_array());
    let rows = xv.nrows() as u64;
    let mut model = interruptible(py, move |stop| {
        let observer = FitObserver::new(progress, rows, stop);
        Fitter::from_options(opts).fit_observed(xv, yv, &observer)
    })?;
    if let Some(n) = names {
        model.columns.features = n;
    }
    Ok(PyModel::new(model))
}

/// Fits in memory on the rows of an Arrow table (any object with `__arrow_c_stream__` or
/// `__arrow_c_array__`): the chosen columns are read as float64.
#[pyfunction]
#[pyo3(signature = (table, target, features, exclude, missing, progress, settings))]
#[allow(clippy::too_many_arguments)]
pub fn fit_table(
    py: Python<'_>,
    table: &Bound<'_, PyAny>,
    target: String,
    features: Option<Vec<String>>,
    exclude: Option<Vec<String>>,
    missing: &str,
    progress: bool,
    settings: &Bound<'_, PyDict>,
) -> PyResult<PyModel> {
    let opts = fit_options(settings)?;
    let src = source_settings(py, Some(target.clone()), features, exclude, missing, ",")?;
    let batches = import(table)?;
    let model = interruptible(py, move |stop| {
        let names = table::choose(batches.schema().as_ref(), &src.selection)?;
        let (x, y) = table::arrays(batches, &names, &target, src.missing)?;
        let observer = FitObserver::new(progress, x.nrows() as u64, stop);
        let mut model = Fitter::from_options(opts).fit_observed(x.view(), y.view(), &observer)?;
        model.columns = ResolvedColumns {
            features: names,
            target: Some(target),
        };
        Ok(model)
    })?;
    Ok(PyModel::new(model))
}
