//! Delimited text files with a header row: header, type inference on the first records,
//! cell parsing and batch reading through `arrow-csv`.
//!
//! kernlake parses CSV cells itself so that the rules are the same for inference and for
//! reading: an empty field is a missing value (null); `true` and `false` (any case) are
//! 1 and 0; anything else must parse as a Rust `f64` after trimming spaces, which accepts
//! `NaN`, `inf` and `infinity` (they then count as missing values under the policy).
//!
//! A column is numeric when most of its non-empty cells among the inferred records are
//! numbers; a cell of such a column that is not a number is a missing value and follows
//! the missing-value policy (skipped and counted, or an error naming file, row and
//! column), so that one stray cell never drops a whole column.

use std::path::Path;
use std::sync::Arc;

use arrow_array::cast::AsArray;
use arrow_array::{Array, Float64Array};
use arrow_csv::reader::Format as CsvFormat;
use arrow_schema::{DataType, Field, Schema};

use super::kind::Kind;
use super::sources::CsvOptions;
use crate::error::{Error, Result};

/// Records read to infer the type of each column.
pub(crate) const INFER_RECORDS: usize = 1_000;

/// A CSV reader yielding Arrow batches of text columns.
pub(crate) type CsvBatches = arrow_csv::Reader<Box<dyn std::io::Read + Send>>;

/// Column names from the header row (empty for an empty file).
pub(crate) fn header(path: &Path, opts: &CsvOptions) -> Result<Vec<String>> {
    let file = crate::store::io::open_read(path)?;
    let (schema, _) = CsvFormat::default()
        .with_header(true)
        .with_delimiter(opts.delimiter)
        .infer_schema(file, Some(0))
        .map_err(|e| Error::File {
            path: path.to_path_buf(),
            message: format!("has an unreadable header row ({e})"),
        })?;
    Ok(schema.fields().iter().map(|f| f.name().clone()).collect())
}

/// Opens `path` reading the columns at `projection` (indices into `names`) as text.
pub(crate) fn open(
    path: &Path,
    names: &[String],
    projection: Vec<usize>,
    opts: &CsvOptions,
    batch_rows: usize,
) -> Result<CsvBatches> {
    let schema = Schema::new(
        names
            .iter()
            .map(|n| Field::new(n, DataType::Utf8, true))
            .collect::<Vec<_>>(),
    );
    let file = crate::store::io::open_read(path)?;
    arrow_csv::ReaderBuilder::new(Arc::new(schema))
        .with_header(true)
        .with_delimiter(opts.delimiter)
        .with_batch_size(batch_rows)
        .with_projection(projection)
        .build(file)
        .map_err(|e| Error::File {
            path: path.to_path_buf(),
            message: format!("could not be opened as CSV ({e})"),
        })
}

/// Parses one non-empty cell; `None` when it is not a number or boolean.
pub(crate) fn parse_cell(s: &str) -> Option<f64> {
    let t = s.trim();
    if t.eq_ignore_ascii_case("true") {
        Some(1.0)
    } else if t.eq_ignore_ascii_case("false") {
        Some(0.0)
    } else {
        t.parse::<f64>().ok()
    }
}

/// Converts a text column of a batch to `Float64` (nulls kept). `first_row` is the
/// 1-based row within the file of the batch's first row, for the error message. A cell
/// that is not a number is an error naming file, row and column when `strict`, and a
/// missing value (null) otherwise.
pub(crate) fn to_f64(
    array: &dyn Array,
    path: &Path,
    column: &str,
    first_row: u64,
    strict: bool,
) -> Result<Float64Array> {
    let text = array.as_string::<i32>();
    let mut out = Vec::with_capacity(text.len());
    for (i, cell) in text.iter().enumerate() {
        match cell {
            None => out.push(None),
            Some(s) if s.trim().is_empty() => out.push(None),
            Some(s) => match parse_cell(s) {
                Some(v) => out.push(Some(v)),
                None if !strict => out.push(None),
                None => {
                    return Err(Error::Cell {
                        path: path.to_path_buf(),
                        row: first_row + i as u64,
                        column: column.to_string(),
                        message: format!("'{}' is not a number", clip(s)),
                    })
                }
            },
        }
    }
    Ok(Float64Array::from(out))
}

/// A cell's text for a message: at most 40 characters.
pub(crate) fn clip(s: &str) -> String {
    let t = s.trim();
    if t.chars().count() <= 40 {
        t.to_string()
    } else {
        format!("{}…", t.chars().take(40).collect::<String>())
    }
}

/// What the header and the first [`INFER_RECORDS`] records of a CSV file say.
#[derive(Clone, Debug)]
pub(crate) struct Inferred {
    /// Column names and inferred kinds, in file order.
    pub columns: Vec<(String, Kind)>,
    /// Data records read for the inference (at most [`INFER_RECORDS`]).
    pub records: usize,
    /// Whether those were all the file's records (the kinds are then certain).
    pub complete: bool,
}

/// A separator other than `opts.delimiter` that a one-column header row seems to use.
pub(crate) fn delimiter_hint(header: &[String], opts: &CsvOptions) -> Option<char> {
    let [only] = header else { return None };
    [';', '\t', '|', ',']
        .into_iter()
        .find(|&c| c as u32 != u32::from(opts.delimiter) && only.contains(c))
}

/// The clause suggesting a delimiter (starting with "; "), or an empty string.
pub(crate) fn delimiter_advice(header: &[String], opts: &CsvOptions) -> String {
    match delimiter_hint(header, opts) {
        Some(c) => format!(
            "; its header row '{}' looks separated by {:?}, not {:?}: give --delimiter {:?}",
            clip(&header[0]),
            c,
            opts.delimiter as char,
            c
        ),
        None => String::new(),
    }
}

/// Column names and inferred kinds from the header and the first [`INFER_RECORDS`]
/// records; `None` for a file without a header row (empty file).
pub(crate) fn infer(path: &Path, opts: &CsvOptions) -> Result<Option<Inferred>> {
    let names = header(path, opts)?;
    if names.is_empty() {
        return Ok(None);
    }
    let projection: Vec<usize> = (0..names.len()).collect();
    let mut reader = open(path, &names, projection, opts, INFER_RECORDS)?;
    let mut numbers = vec![0usize; names.len()];
    let mut texts = vec![0usize; names.len()];
    let mut example: Vec<Option<(String, usize)>> = vec![None; names.len()];
    let mut records = 0;
    let first = reader.next();
    let complete = first.is_none() || reader.next().is_none();
    if let Some(batch) = first {
        let batch = batch.map_err(|e| Error::File {
            path: path.to_path_buf(),
            message: format!("could not be parsed as CSV ({e})"),
        })?;
        records = batch.num_rows();
        for (c, col) in batch.columns().iter().enumerate() {
            for (r, s) in col.as_string::<i32>().iter().enumerate() {
                let Some(s) = s.filter(|s| !s.trim().is_empty()) else {
                    continue;
                };
                if parse_cell(s).is_some() {
                    numbers[c] += 1;
                } else {
                    texts[c] += 1;
                    example[c].get_or_insert_with(|| (clip(s), r + 1));
                }
            }
        }
    }
    let columns = names
        .into_iter()
        .enumerate()
        .map(|(c, n)| {
            let kind = if numbers[c] + texts[c] == 0 {
                Kind::Unknown
            } else if numbers[c] > texts[c] {
                Kind::Numeric
            } else {
                let (cell, row) = example[c].clone().unwrap_or_default();
                Kind::Other(format!("text such as '{cell}' in row {row}"))
            };
            (n, kind)
        })
        .collect();
    Ok(Some(Inferred {
        columns,
        records,
        complete,
    }))
}

/// Number of data rows of a CSV file (a full parse of its first column).
pub(crate) fn count_rows(path: &Path, opts: &CsvOptions, batch_rows: usize) -> Result<u64> {
    let names = header(path, opts)?;
    if names.is_empty() {
        return Ok(0);
    }
    let reader = open(path, &names, vec![0], opts, batch_rows)?;
    let mut rows = 0u64;
    for batch in reader {
        let batch = batch.map_err(|e| Error::File {
            path: path.to_path_buf(),
            message: format!("could not be parsed as CSV ({e})"),
        })?;
        rows += batch.num_rows() as u64;
    }
    Ok(rows)
}
