//! kernlake's Python binding (`kernlake._native`): converts Python values, calls the
//! library, converts the results back. No mathematics here; the pure-Python package
//! `kernlake` (python/kernlake) is the public face.

mod arrow;
mod errors;
mod fit;
mod model;
mod options;
mod run;
mod scoring;
mod spark;
mod table;
mod tools;

use pyo3::prelude::*;

/// The extension module.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<model::PyModel>()?;
    m.add_class::<scoring::BatchScorer>()?;
    m.add_class::<arrow::ArrowStream>()?;
    m.add_function(wrap_pyfunction!(fit::fit_files, m)?)?;
    m.add_function(wrap_pyfunction!(fit::fit_arrays, m)?)?;
    m.add_function(wrap_pyfunction!(fit::fit_table, m)?)?;
    m.add_function(wrap_pyfunction!(tools::audit_files, m)?)?;
    m.add_function(wrap_pyfunction!(tools::tune_files, m)?)?;
    m.add_function(wrap_pyfunction!(options::fit_defaults, m)?)?;
    m.add_function(wrap_pyfunction!(scoring::_score_in_rust, m)?)?;
    m.add_class::<spark::SparkWorker>()?;
    m.add_class::<spark::SparkDriver>()?;
    m.add_function(wrap_pyfunction!(spark::spark_fit_check, m)?)?;
    m.add_function(wrap_pyfunction!(spark::spark_survey_part, m)?)?;
    m.add("SAFETY", kernlake::settings::SAFETY)?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    Ok(())
}
