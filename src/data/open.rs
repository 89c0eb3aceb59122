//! Opening one data file for reading: placing the chosen columns (file columns or
//! partition values), projecting Parquet columns, and converting decoded columns to
//! `Float64`.

use std::path::Path;

use arrow_array::cast::AsArray;
use arrow_array::types::Float64Type;
use arrow_array::{Array, Float64Array, RecordBatch};
use arrow_schema::DataType;
use parquet::arrow::ProjectionMask;

use super::csv::{self, CsvBatches};
use super::kind::is_numeric;
use super::sources::{CsvOptions, Format, SourceFile};
use crate::error::{Error, Result};

/// Where a chosen column's values come from in one open file.
pub(crate) enum Source {
    /// Column `usize` of the decoded batches.
    Column(usize),
    /// A partition folder's value, the same on every row.
    Constant(f64),
}

/// The batches of one open file.
pub(crate) enum Batches {
    Parquet(crate::store::parquet::Batches),
    Csv(Box<CsvBatches>),
}

/// The values of each chosen column of a decoded batch, as `Float64`. A CSV cell that is
/// not a number is a missing value (null) unless `strict`, when it is an error naming
/// file, row and column (the missing-value policy `fail`).
pub(crate) fn columns_of(
    batch: &RecordBatch,
    sources: &[Source],
    names: &[&str],
    file: &SourceFile,
    local_row: u64,
    strict: bool,
) -> Result<Vec<Float64Array>> {
    let n = batch.num_rows();
    sources
        .iter()
        .zip(names)
        .map(|(s, name)| match s {
            Source::Constant(v) => Ok(Float64Array::from(vec![*v; n])),
            Source::Column(c) => {
                let a = batch.column(*c);
                match (file.format, a.data_type()) {
                    (Format::Csv, _) => {
                        csv::to_f64(a.as_ref(), &file.path, name, local_row + 1, strict)
                    }
                    (Format::Parquet, DataType::Float64) => {
                        Ok(a.as_primitive::<Float64Type>().clone())
                    }
                    (Format::Parquet, _) => arrow_cast::cast(a.as_ref(), &DataType::Float64)
                        .map(|c| c.as_primitive::<Float64Type>().clone())
                        .map_err(|e| Error::Column {
                            path: file.path.clone(),
                            column: name.to_string(),
                            message: format!("could not be read as numbers ({e})"),
                        }),
                }
            }
        })
        .collect()
}

/// Places the chosen columns given the file's column names: `Some(index)` into the
/// projection of `present` (sorted file column indices) or a partition constant.
fn place_columns(
    file: &SourceFile,
    file_columns: &[String],
    names: &[&str],
    check_type: impl Fn(usize) -> Result<()>,
) -> Result<(Vec<usize>, Vec<Source>)> {
    let mut present: Vec<usize> = Vec::new();
    let mut plan: Vec<Result<usize, f64>> = Vec::with_capacity(names.len());
    for name in names {
        if let Some(i) = file_columns.iter().position(|c| c == name) {
            check_type(i)?;
            present.push(i);
            plan.push(Ok(i));
        } else if let Some(v) = file.partition(name) {
            let v = v.parse::<f64>().map_err(|_| Error::Column {
                path: file.path.clone(),
                column: name.to_string(),
                message: format!("the partition value '{v}' is not a number"),
            })?;
            plan.push(Err(v));
        } else {
            return Err(Error::Column {
                path: file.path.clone(),
                column: name.to_string(),
                message: "no such column in this file".into(),
            });
        }
    }
    present.sort_unstable();
    present.dedup();
    let sources = plan
        .into_iter()
        .map(|p| match p {
            Ok(i) => Source::Column(present.binary_search(&i).unwrap_or(0)),
            Err(v) => Source::Constant(v),
        })
        .collect();
    Ok((present, sources))
}

pub(crate) fn open_parquet(
    file: &SourceFile,
    names: &[&str],
    batch_rows: usize,
) -> Result<Option<(Batches, Vec<Source>)>> {
    let path: &Path = &file.path;
    let footer = crate::store::parquet::footer(path)?;
    let schema = footer.meta.schema().clone();
    let file_columns: Vec<String> = schema.fields().iter().map(|f| f.name().clone()).collect();
    let (present, sources) = place_columns(file, &file_columns, names, |i| {
        let dt = schema.field(i).data_type();
        if is_numeric(dt) || *dt == DataType::Null {
            Ok(())
        } else {
            Err(Error::Column {
                path: path.to_path_buf(),
                column: schema.field(i).name().clone(),
                message: format!("is not numeric (type {dt})"),
            })
        }
    })?;
    let mask = ProjectionMask::roots(footer.meta.parquet_schema(), present);
    let reader = footer.batches(mask, batch_rows)?;
    Ok(Some((Batches::Parquet(reader), sources)))
}

pub(crate) fn open_csv(
    file: &SourceFile,
    names: &[&str],
    opts: &CsvOptions,
    batch_rows: usize,
) -> Result<Option<(Batches, Vec<Source>)>> {
    let header = csv::header(&file.path, opts)?;
    if header.is_empty() {
        return Ok(None);
    }
    let (present, sources) = place_columns(file, &header, names, |_| Ok(()))?;
    let reader = csv::open(&file.path, &header, present, opts, batch_rows)?;
    Ok(Some((Batches::Csv(Box::new(reader)), sources)))
}
