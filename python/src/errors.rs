//! The library's typed errors as Python exceptions: one base class `kernlake.Error` and
//! one subclass per kind (defined in `kernlake/_errors.py`), carrying the library's
//! one-sentence message unchanged.

use kernlake::Error;
use pyo3::exceptions::{PyKeyboardInterrupt, PyRuntimeError};
use pyo3::prelude::*;

/// The Python exception class that stands for an error's kind.
fn class_name(e: &Error) -> &'static str {
    match e {
        Error::ModelFile { .. } => "ModelFileError",
        Error::Numerical(_) | Error::TuneFailed(_) => "NumericalError",
        Error::Io { .. } | Error::Output { .. } | Error::Store { .. } => "IOError",
        _ => "InputError",
    }
}

/// Raises `class` (a name in `kernlake._errors`) with `message`.
pub fn raise(py: Python<'_>, class: &str, message: String) -> PyErr {
    let made = py
        .import("kernlake._errors")
        .and_then(|m| m.getattr(class))
        .and_then(|c| c.call1((message.clone(),)));
    match made {
        Ok(exc) => PyErr::from_value(exc),
        Err(_) => PyRuntimeError::new_err(message),
    }
}

/// The exception for a library error (a stopped run becomes `KeyboardInterrupt`).
pub fn to_py(py: Python<'_>, e: Error) -> PyErr {
    if matches!(e, Error::Interrupted) {
        return PyKeyboardInterrupt::new_err(e.to_string());
    }
    raise(py, class_name(&e), e.to_string())
}

/// An input error raised by the binding itself (a value Python handed over that the
/// library cannot take).
pub fn input(py: Python<'_>, message: impl Into<String>) -> PyErr {
    raise(py, "InputError", message.into())
}

/// Shorthand: library result to Python result.
pub trait IntoPy<T> {
    /// Converts the error, if any.
    fn py_err(self, py: Python<'_>) -> PyResult<T>;
}

impl<T> IntoPy<T> for kernlake::Result<T> {
    fn py_err(self, py: Python<'_>) -> PyResult<T> {
        self.map_err(|e| to_py(py, e))
    }
}
