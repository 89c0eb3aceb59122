//! An Arrow table as the in-memory fit's arrays: the chosen columns read as `f64`, rows
//! with a missing value left out or refused by the missing policy. Conversion only.

use std::path::PathBuf;

use arrow_array::cast::AsArray;
use arrow_array::types::Float64Type;
use arrow_array::{Array, RecordBatch};
use arrow_schema::{DataType, Schema};
use kernlake::data::{ColumnSelection, MissingPolicy};
use kernlake::{Error, Result};
use ndarray::{Array1, Array2};

use crate::arrow::Batches;

/// How a table is named in messages.
pub const TABLE: &str = "<table>";

fn column_error(column: &str, message: impl Into<String>) -> Error {
    Error::Column {
        path: PathBuf::from(TABLE),
        column: column.to_string(),
        message: message.into(),
    }
}

/// Whether a column type is read as a number (as for files: numbers and booleans).
fn numeric(dt: &DataType) -> bool {
    dt.is_numeric() || matches!(dt, DataType::Boolean)
}

/// The input columns a selection asks for in `schema` (default: every numeric column
/// but the target and the excluded ones, in table order), checked to be numeric.
pub fn choose(schema: &Schema, sel: &ColumnSelection) -> Result<Vec<String>> {
    let target = sel.target.as_deref();
    let check = |name: &str, role: &str| -> Result<()> {
        let f = schema.field_with_name(name).map_err(|_| {
            column_error(
                name,
                format!("no such column, but it was given as the {role}"),
            )
        })?;
        if !numeric(f.data_type()) {
            return Err(column_error(
                name,
                format!("has type {}, but the {role} must be numeric", f.data_type()),
            ));
        }
        Ok(())
    };
    if let Some(t) = target {
        check(t, "target")?;
    }
    let features: Vec<String> = match &sel.features {
        Some(list) => {
            for name in list {
                check(name, "input")?;
            }
            list.clone()
        }
        None => schema
            .fields()
            .iter()
            .filter(|f| Some(f.name().as_str()) != target)
            .filter(|f| !sel.exclude.contains(f.name()))
            .filter(|f| numeric(f.data_type()))
            .map(|f| f.name().clone())
            .collect(),
    };
    if features.is_empty() {
        return Err(Error::NoRows(
            "the table has no numeric input column besides the target".into(),
        ));
    }
    if let Some(t) = target {
        if features.iter().any(|f| f == t) {
            return Err(column_error(t, "is both the target and an input"));
        }
    }
    Ok(features)
}

/// Rows of the table as (inputs, target); `features` in order, rows with a null, NaN
/// or infinity in a chosen column skipped or refused (naming row and column).
pub fn arrays(
    batches: Batches,
    features: &[String],
    target: &str,
    missing: MissingPolicy,
) -> Result<(Array2<f64>, Array1<f64>)> {
    let mut names: Vec<&str> = features.iter().map(String::as_str).collect();
    names.push(target);
    let width = names.len();
    let mut flat: Vec<f64> = Vec::new();
    let mut row_no: u64 = 0;
    for batch in batches {
        let batch = batch.map_err(|e| Error::File {
            path: PathBuf::from(TABLE),
            message: format!("could not be read ({e})"),
        })?;
        let cols = float_columns(&batch, &names)?;
        for r in 0..batch.num_rows() {
            row_no += 1;
            let bad = cols
                .iter()
                .position(|c| c.is_null(r) || !c.value(r).is_finite());
            match (bad, missing) {
                (None, _) => flat.extend(cols.iter().map(|c| c.value(r))),
                (Some(_), MissingPolicy::Skip) => {}
                (Some(j), _) => {
                    return Err(Error::Cell {
                        path: PathBuf::from(TABLE),
                        row: row_no,
                        column: names[j].to_string(),
                        message: "missing value (null, NaN or infinity) under the 'fail' policy"
                            .into(),
                    })
                }
            }
        }
    }
    let rows = flat.len() / width;
    if rows == 0 {
        return Err(Error::NoRows(
            "every row of the table has a missing value in a chosen column".into(),
        ));
    }
    let all = Array2::from_shape_vec((rows, width), flat).expect("rows × width values");
    let x = all.slice(ndarray::s![.., ..width - 1]).to_owned();
    let y = all.column(width - 1).to_owned();
    Ok((x, y))
}

/// The named columns of `batch` as `Float64` arrays.
fn float_columns(batch: &RecordBatch, names: &[&str]) -> Result<Vec<arrow_array::Float64Array>> {
    names
        .iter()
        .map(|name| {
            let col = batch
                .column_by_name(name)
                .ok_or_else(|| column_error(name, "no such column in a later batch"))?;
            let f = arrow_cast::cast(col, &DataType::Float64)
                .map_err(|e| column_error(name, format!("could not be read as numbers ({e})")))?;
            Ok(f.as_primitive::<Float64Type>().clone())
        })
        .collect()
}
