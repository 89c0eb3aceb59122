//! Arrow tables across the language boundary through the Arrow PyCapsule interface:
//! objects with `__arrow_c_stream__` (pyarrow Table and RecordBatchReader, polars,
//! DuckDB, ...) or `__arrow_c_array__` (a pyarrow RecordBatch) come in without a copy;
//! scored batches go out as a stream capsule that pyarrow imports without a copy.

use std::ffi::CStr;

use arrow_array::ffi::{from_ffi, FFI_ArrowArray, FFI_ArrowSchema};
use arrow_array::ffi_stream::{FFI_ArrowArrayStream, RecordBatchStreamReader};
use arrow_array::{Array, RecordBatch, RecordBatchIterator, RecordBatchReader, StructArray};
use arrow_schema::{ArrowError, SchemaRef};
use pyo3::prelude::*;
use pyo3::types::{PyCapsule, PyTuple};

use crate::errors::input;

const STREAM: &CStr = c"arrow_array_stream";
const SCHEMA: &CStr = c"arrow_schema";
const ARRAY: &CStr = c"arrow_array";

/// Record batches read from a Python object, in order.
pub type Batches = Box<dyn RecordBatchReader + Send>;

/// The message for an object that speaks no Arrow interface.
fn not_a_table(obj: &Bound<'_, PyAny>) -> String {
    let kind = obj
        .get_type()
        .name()
        .map(|n| n.to_string())
        .unwrap_or_else(|_| "?".into());
    format!(
        "an object of type {kind} is not a table: pass a pyarrow Table, RecordBatch or \
RecordBatchReader, a polars or pandas DataFrame, a DuckDB result, or any object with \
__arrow_c_stream__"
    )
}

fn arrow_error(py: Python<'_>, e: ArrowError) -> PyErr {
    input(
        py,
        format!("the table could not be read through the Arrow C interface ({e})"),
    )
}

/// Reads the record batches of any object with `__arrow_c_stream__` or
/// `__arrow_c_array__` (a struct array: one record batch).
pub fn import(obj: &Bound<'_, PyAny>) -> PyResult<Batches> {
    let py = obj.py();
    if obj.hasattr("__arrow_c_stream__")? {
        let capsule = obj.call_method0("__arrow_c_stream__")?;
        let capsule = capsule
            .cast::<PyCapsule>()
            .map_err(|_| input(py, "__arrow_c_stream__ did not return a capsule"))?;
        let ptr = capsule.pointer_checked(Some(STREAM))?;
        // SAFETY: the capsule is named "arrow_array_stream", so by the Arrow PyCapsule
        // interface it points to a live ArrowArrayStream; `from_raw` moves the stream out
        // and leaves a released one behind, which the capsule's destructor ignores.
        let reader = unsafe { RecordBatchStreamReader::from_raw(ptr.as_ptr().cast()) }
            .map_err(|e| arrow_error(py, e))?;
        return Ok(Box::new(reader));
    }
    if obj.hasattr("__arrow_c_array__")? {
        let pair = obj.call_method0("__arrow_c_array__")?;
        let pair = pair
            .cast::<PyTuple>()
            .map_err(|_| input(py, "__arrow_c_array__ did not return a pair of capsules"))?;
        let schema_capsule = pair.get_item(0)?;
        let schema_capsule = schema_capsule
            .cast::<PyCapsule>()
            .map_err(|_| input(py, "__arrow_c_array__ did not return a schema capsule"))?;
        let array_capsule = pair.get_item(1)?;
        let array_capsule = array_capsule
            .cast::<PyCapsule>()
            .map_err(|_| input(py, "__arrow_c_array__ did not return an array capsule"))?;
        let schema_ptr = schema_capsule.pointer_checked(Some(SCHEMA))?;
        let array_ptr = array_capsule.pointer_checked(Some(ARRAY))?;
        // SAFETY: capsules named "arrow_schema" / "arrow_array" point to a live
        // ArrowSchema / ArrowArray (Arrow PyCapsule interface). The schema is borrowed
        // while the capsule lives (it is kept alive by `pair` for this whole block); the
        // array is moved out, leaving a released one for the capsule's destructor.
        let data = unsafe {
            let schema = &*(schema_ptr.as_ptr() as *const FFI_ArrowSchema);
            let array = FFI_ArrowArray::from_raw(array_ptr.as_ptr().cast());
            from_ffi(array, schema)
        }
        .map_err(|e| arrow_error(py, e))?;
        let array = StructArray::from(data);
        if array.null_count() > 0 {
            return Err(input(py, "the record batch has null rows at its top level"));
        }
        let batch = RecordBatch::from(array);
        let schema = batch.schema();
        return Ok(Box::new(RecordBatchIterator::new(vec![Ok(batch)], schema)));
    }
    Err(input(py, not_a_table(obj)))
}

/// A stream of record batches handed to Python: its one method, `__arrow_c_stream__`,
/// gives the stream to pyarrow (or any other consumer) once.
#[pyclass(module = "kernlake._native", frozen)]
pub struct ArrowStream {
    stream: std::sync::Mutex<Option<FFI_ArrowArrayStream>>,
}

impl ArrowStream {
    /// A stream over `batches` with `schema`.
    pub fn new(schema: SchemaRef, batches: Vec<RecordBatch>) -> Self {
        let it = RecordBatchIterator::new(batches.into_iter().map(Ok), schema);
        ArrowStream {
            stream: std::sync::Mutex::new(Some(FFI_ArrowArrayStream::new(Box::new(it)))),
        }
    }
}

#[pymethods]
impl ArrowStream {
    /// The stream as an "arrow_array_stream" capsule (Arrow PyCapsule interface).
    #[pyo3(signature = (requested_schema=None))]
    fn __arrow_c_stream__<'py>(
        &self,
        py: Python<'py>,
        requested_schema: Option<Bound<'py, PyAny>>,
    ) -> PyResult<Bound<'py, PyCapsule>> {
        let _ = requested_schema;
        let stream = self
            .stream
            .lock()
            .expect("the stream's lock is never poisoned")
            .take()
            .ok_or_else(|| input(py, "this stream of scored batches was already read"))?;
        // The capsule owns the stream; a consumer moves it out (leaving it released), and
        // dropping an unconsumed one releases it (FFI_ArrowArrayStream's Drop).
        PyCapsule::new_with_value(py, stream, STREAM)
    }
}
