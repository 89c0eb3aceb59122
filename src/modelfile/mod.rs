//! The model-file container: a versioned, checksummed Arrow IPC file that any Arrow
//! reader can open.
//!
//! Layout (Arrow IPC *file* format, one record batch, one row per named array):
//!
//! | column | type | content |
//! |---|---|---|
//! | `name` | Utf8 | the array's name |
//! | `rows` | UInt64 | number of rows |
//! | `cols` | UInt64 | number of columns |
//! | `values` | `List<Float64>` | the values, row-major |
//!
//! The schema's metadata holds three keys:
//! - `kernlake.format`: the format version as a decimal integer ([`FORMAT_VERSION`]);
//! - `kernlake.meta`: a JSON document with every scalar setting (contract, settings,
//!   training report…);
//! - `kernlake.checksum`: CRC-32 (ISO-HDLC polynomial, as computed by `crc32fast`) as
//!   eight lower-case hex digits, over the meta JSON bytes and then, for every array in
//!   order, its name's byte length (u64), name bytes, rows (u64), cols (u64) and values
//!   (f64), all integers and floats little-endian.
//!
//! Loading never panics on any input bytes: every failure is an [`Error::ModelFile`]
//! naming the file with one sentence saying what is wrong.

use std::collections::HashMap;
use std::io::Cursor;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::{
    Array, ArrayRef, Float64Array, ListArray, RecordBatch, StringArray, UInt64Array,
};
use arrow_buffer::{OffsetBuffer, ScalarBuffer};
use arrow_schema::{DataType, Field, Schema};
use ndarray::Array2;

use crate::atomic::write_atomic;
use crate::error::{Error, Result};

mod framing;
use framing::check_framing;

/// The format version this build writes and the newest it reads.
pub const FORMAT_VERSION: u32 = 1;

/// Schema metadata key of the format version.
pub const KEY_FORMAT: &str = "kernlake.format";
/// Schema metadata key of the JSON meta document.
pub const KEY_META: &str = "kernlake.meta";
/// Schema metadata key of the CRC-32 checksum.
pub const KEY_CHECKSUM: &str = "kernlake.checksum";

/// The magic bytes that open and close an Arrow IPC file.
pub(crate) const ARROW_MAGIC: &[u8] = b"ARROW1";

/// A fitted model as stored on disk: a JSON document of scalars and a list of named
/// two-dimensional arrays.
#[derive(Clone, Debug, PartialEq)]
pub struct ModelFile {
    /// Everything scalar: input contract, settings, training report.
    pub meta: serde_json::Value,
    /// The model's arrays, in the order they are stored, each with its name.
    pub arrays: Vec<(String, Array2<f64>)>,
}

impl ModelFile {
    /// Encodes the model as the bytes of an Arrow IPC file.
    ///
    /// # Errors
    /// [`Error::ModelFile`] if the arrays hold more values than one Arrow list column
    /// can (2^31 − 1 in all) or the Arrow writer fails.
    pub fn to_bytes(&self) -> Result<Vec<u8>> {
        let in_memory = Path::new("(in memory)");
        let fail = |message: String| model_error(in_memory, message);
        let meta_json = serde_json::to_string(&self.meta)
            .map_err(|e| fail(format!("its metadata cannot be written as JSON ({e})")))?;
        let checksum = self.checksum(meta_json.as_bytes());

        let mut names = Vec::with_capacity(self.arrays.len());
        let mut rows = Vec::with_capacity(self.arrays.len());
        let mut cols = Vec::with_capacity(self.arrays.len());
        let mut offsets: Vec<i32> = Vec::with_capacity(self.arrays.len() + 1);
        let total: usize = self.arrays.iter().map(|(_, a)| a.len()).sum();
        let mut values = Vec::with_capacity(total);
        offsets.push(0);
        for (name, array) in &self.arrays {
            names.push(name.as_str());
            rows.push(array.nrows() as u64);
            cols.push(array.ncols() as u64);
            values.extend(array.iter().copied()); // logical order = row-major
            let end = i32::try_from(values.len()).map_err(|_| {
                fail("its arrays hold more than 2^31 - 1 values, too many for one file".into())
            })?;
            offsets.push(end);
        }

        let schema = Arc::new(schema_with_metadata(&meta_json, checksum));
        let item = Arc::new(Field::new_list_field(DataType::Float64, false));
        let list = ListArray::try_new(
            item,
            OffsetBuffer::new(ScalarBuffer::from(offsets)),
            Arc::new(Float64Array::from(values)),
            None,
        )
        .map_err(|e| fail(format!("the values column cannot be built ({e})")))?;
        let columns: Vec<ArrayRef> = vec![
            Arc::new(StringArray::from(names)),
            Arc::new(UInt64Array::from(rows)),
            Arc::new(UInt64Array::from(cols)),
            Arc::new(list),
        ];
        let batch = RecordBatch::try_new(schema.clone(), columns)
            .map_err(|e| fail(format!("the record batch cannot be built ({e})")))?;
        let mut writer = arrow_ipc::writer::FileWriter::try_new(Vec::new(), &schema)
            .map_err(|e| fail(format!("the Arrow writer failed ({e})")))?;
        writer
            .write(&batch)
            .and_then(|()| writer.finish())
            .map_err(|e| fail(format!("the Arrow writer failed ({e})")))?;
        writer
            .into_inner()
            .map_err(|e| fail(format!("the Arrow writer failed ({e})")))
    }

    /// Decodes a model from the bytes of a model file; `origin` is used only in messages.
    ///
    /// # Errors
    /// [`Error::ModelFile`] naming `origin` when the bytes are empty, not an Arrow file,
    /// truncated, not a kernlake model, written by a newer format version, or fail their
    /// checksum.
    pub fn from_bytes(bytes: &[u8], origin: &Path) -> Result<ModelFile> {
        let fail = |message: &str| model_error(origin, message.to_string());
        if bytes.is_empty() {
            return Err(fail("is empty, so it holds no kernlake model"));
        }
        if !bytes.starts_with(ARROW_MAGIC) {
            return Err(fail(
                "is not a kernlake model file: it is not an Arrow IPC file",
            ));
        }
        if !bytes.ends_with(ARROW_MAGIC) || bytes.len() < 2 * ARROW_MAGIC.len() + 4 {
            return Err(fail(
                "is truncated: it ends before its Arrow footer (an interrupted write or copy)",
            ));
        }
        // `decode` checks the framing so that the Arrow reader stays within the file's
        // bounds; should the reader still panic on some malformed input, report a
        // damaged file rather than abort the caller.
        std::panic::catch_unwind(|| decode(bytes, origin))
            .unwrap_or_else(|_| Err(fail("is damaged: its Arrow structure cannot be decoded")))
    }

    /// Writes the model to `path` atomically: the file appears complete under its name or
    /// not at all. An object-store URL (`s3://bucket/key`) is written by one request, so
    /// the object too appears only complete.
    ///
    /// # Errors
    /// [`Error::Io`] naming the path when the folder is missing or not writable,
    /// [`Error::Store`] for a refused upload, and those of [`ModelFile::to_bytes`].
    pub fn save(&self, path: &Path) -> Result<()> {
        let bytes = self.to_bytes()?;
        if crate::store::is_remote(path) {
            return crate::store::io::write_all(path, &bytes);
        }
        write_atomic(path, |file| {
            use std::io::Write;
            file.write_all(&bytes).map_err(|e| Error::io(path, e))
        })
    }

    /// Reads a model from `path` (a file, or an object-store URL).
    ///
    /// # Errors
    /// [`Error::Io`] if the file cannot be read, [`Error::Store`] if the object cannot,
    /// and those of [`ModelFile::from_bytes`].
    pub fn load(path: &Path) -> Result<ModelFile> {
        let bytes = crate::store::io::read_all(path)?;
        ModelFile::from_bytes(&bytes, path)
    }

    /// The array stored under `name`, if any (the first one if several share the name).
    pub fn array(&self, name: &str) -> Option<&Array2<f64>> {
        self.arrays.iter().find(|(n, _)| n == name).map(|(_, a)| a)
    }

    /// The CRC-32 of the meta JSON bytes and every array, as documented in the module.
    fn checksum(&self, meta_json: &[u8]) -> u32 {
        checksum_of(meta_json, self.arrays.iter().map(|(n, a)| (n.as_str(), a)))
    }
}

/// CRC-32 over the meta JSON bytes and the arrays' names, shapes and values.
fn checksum_of<'a>(
    meta_json: &[u8],
    arrays: impl Iterator<Item = (&'a str, &'a Array2<f64>)>,
) -> u32 {
    let mut hasher = crc32fast::Hasher::new();
    hasher.update(meta_json);
    for (name, array) in arrays {
        hasher.update(&(name.len() as u64).to_le_bytes());
        hasher.update(name.as_bytes());
        hasher.update(&(array.nrows() as u64).to_le_bytes());
        hasher.update(&(array.ncols() as u64).to_le_bytes());
        for v in array.iter() {
            hasher.update(&v.to_le_bytes());
        }
    }
    hasher.finalize()
}

/// The file's schema: four columns and the three metadata keys.
fn schema_with_metadata(meta_json: &str, checksum: u32) -> Schema {
    let fields = vec![
        Field::new("name", DataType::Utf8, false),
        Field::new("rows", DataType::UInt64, false),
        Field::new("cols", DataType::UInt64, false),
        Field::new(
            "values",
            DataType::List(Arc::new(Field::new_list_field(DataType::Float64, false))),
            false,
        ),
    ];
    let metadata = HashMap::from([
        (KEY_FORMAT.to_string(), FORMAT_VERSION.to_string()),
        (KEY_META.to_string(), meta_json.to_string()),
        (KEY_CHECKSUM.to_string(), format!("{checksum:08x}")),
    ]);
    Schema::new_with_metadata(fields, metadata)
}

/// Shorthand for [`Error::ModelFile`].
fn model_error(path: &Path, message: String) -> Error {
    Error::ModelFile {
        path: PathBuf::from(path),
        message,
    }
}

/// Decodes a file whose first and last bytes are the Arrow magic.
fn decode(bytes: &[u8], origin: &Path) -> Result<ModelFile> {
    let fail = |message: String| model_error(origin, message);
    let damaged = |e: arrow_schema::ArrowError| {
        fail(format!(
            "is damaged: its Arrow structure cannot be decoded ({})",
            brief(&e)
        ))
    };
    let mut reader =
        arrow_ipc::reader::FileReader::try_new(Cursor::new(bytes), None).map_err(damaged)?;
    let schema = reader.schema();
    let metadata = schema.metadata();
    let not_ours = |what: &str| {
        fail(format!(
            "is an Arrow file but not a kernlake model file ({what})"
        ))
    };
    let format = metadata
        .get(KEY_FORMAT)
        .ok_or_else(|| not_ours("no kernlake.format entry in its metadata"))?;
    let format: u32 = format
        .parse()
        .map_err(|_| not_ours("its kernlake.format entry is not a version number"))?;
    if format > FORMAT_VERSION {
        return Err(fail(format!(
            "was written by a newer kernlake (format {format}); this build reads format \
             {FORMAT_VERSION} — upgrade kernlake"
        )));
    }
    if format == 0 {
        return Err(not_ours("its kernlake.format entry is 0"));
    }
    let expected = schema_with_metadata("", 0);
    if schema.fields() != expected.fields() {
        return Err(not_ours("its columns are not name, rows, cols, values"));
    }
    if let Err(what) = check_framing(bytes) {
        return Err(fail(format!(
            "is damaged: its Arrow structure is inconsistent ({what})"
        )));
    }
    let corrupted = || fail("fails its checksum: the file is corrupted".to_string());
    let meta_json = metadata.get(KEY_META).ok_or_else(corrupted)?;
    let stored_sum = metadata
        .get(KEY_CHECKSUM)
        .filter(|s| s.len() == 8)
        .and_then(|s| u32::from_str_radix(s, 16).ok())
        .ok_or_else(corrupted)?;

    if reader.num_batches() != 1 {
        return Err(corrupted());
    }
    let batch = reader.next().ok_or_else(corrupted)?.map_err(damaged)?;
    let arrays = arrays_from_batch(&batch).ok_or_else(corrupted)?;
    let sum = checksum_of(
        meta_json.as_bytes(),
        arrays.iter().map(|(n, a)| (n.as_str(), a)),
    );
    if sum != stored_sum {
        return Err(corrupted());
    }
    let meta: serde_json::Value = serde_json::from_str(meta_json).map_err(|e| {
        fail(format!(
            "has metadata that is not valid JSON ({})",
            brief(&e)
        ))
    })?;
    Ok(ModelFile { meta, arrays })
}

/// The named arrays of the record batch, or `None` if its layout is not ours.
fn arrays_from_batch(batch: &RecordBatch) -> Option<Vec<(String, Array2<f64>)>> {
    let names = batch
        .column_by_name("name")?
        .as_any()
        .downcast_ref::<StringArray>()?;
    let rows = batch
        .column_by_name("rows")?
        .as_any()
        .downcast_ref::<UInt64Array>()?;
    let cols = batch
        .column_by_name("cols")?
        .as_any()
        .downcast_ref::<UInt64Array>()?;
    let values = batch
        .column_by_name("values")?
        .as_any()
        .downcast_ref::<ListArray>()?;
    if names.null_count() + rows.null_count() + cols.null_count() + values.null_count() > 0 {
        return None;
    }
    let mut out = Vec::with_capacity(batch.num_rows());
    for i in 0..batch.num_rows() {
        let r = usize::try_from(rows.value(i)).ok()?;
        let c = usize::try_from(cols.value(i)).ok()?;
        let list = values.value(i);
        let list = list.as_any().downcast_ref::<Float64Array>()?;
        if list.null_count() > 0 || r.checked_mul(c)? != list.len() {
            return None;
        }
        let array = Array2::from_shape_vec((r, c), list.values().to_vec()).ok()?;
        out.push((names.value(i).to_string(), array));
    }
    Some(out)
}

/// The first line of an error's text, at most 80 characters: a cause for a one-sentence
/// message, never a decoder trace.
pub(crate) fn brief(e: &dyn std::fmt::Display) -> String {
    let text = e.to_string();
    let line = text.lines().next().unwrap_or("").trim();
    if line.chars().count() <= 80 {
        line.to_string()
    } else {
        format!("{}…", line.chars().take(80).collect::<String>())
    }
}
