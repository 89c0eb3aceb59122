//! Choosing the feature and target columns from the files' schemas.
//!
//! Parquet schemas come from the footers; CSV column types are inferred from the header
//! and the first 1,000 records (see [`super::csv`]). Every Arrow integer, float and
//! decimal type (also dictionary-encoded) is numeric and read as `f64`; booleans are numeric too and read as 1
//! (true) and 0 (false). A partition folder `key=value` supplies a column `key` only
//! when it is named explicitly (as a feature or the target) and the file has no
//! column of that name; its value must parse as a number.

use std::path::Path;

use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use super::csv;
use super::sources::{CsvOptions, Format, SourceFile};
use crate::error::{Error, Result};

/// Which columns to use; by default every numeric column but the target.
#[derive(Clone, Debug, Default)]
pub struct ColumnSelection {
    /// The column to predict (none when only scoring).
    pub target: Option<String>,
    /// The feature columns, in order; `None` for every numeric column of the first file
    /// (in file order) except the target and the excluded ones.
    pub features: Option<Vec<String>>,
    /// Columns never used as features.
    pub exclude: Vec<String>,
}

/// The columns chosen by [`resolve_columns`]: the input contract of a model.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ResolvedColumns {
    /// Feature columns, in the order of the model's inputs.
    pub features: Vec<String>,
    /// The target column, if any.
    pub target: Option<String>,
}

impl ResolvedColumns {
    /// Features then target: the order of [`super::Block::skipped`].
    pub fn all(&self) -> impl Iterator<Item = &str> {
        self.features
            .iter()
            .map(String::as_str)
            .chain(self.target.as_deref())
    }
}

/// What a column of a file holds, as far as kernlake is concerned.
#[derive(Clone, Debug, PartialEq)]
pub(crate) enum Kind {
    /// Integers, floats, decimals or booleans.
    Numeric,
    /// No value seen (an all-null column, or empty CSV cells in the inferred records).
    Unknown,
    /// Anything else, with a name for messages.
    Other(String),
}

/// Whether an Arrow type is read as `f64`.
pub(crate) fn is_numeric(dt: &DataType) -> bool {
    match dt {
        DataType::Dictionary(_, values) => is_numeric(values),
        dt => dt.is_numeric() || matches!(dt, DataType::Boolean),
    }
}

fn kind_of(dt: &DataType) -> Kind {
    match dt {
        DataType::Null => Kind::Unknown,
        dt if is_numeric(dt) => Kind::Numeric,
        dt => Kind::Other(dt.to_string()),
    }
}

/// Column names and kinds of one file; `None` for an empty CSV file (no header).
pub(crate) fn file_schema(
    file: &SourceFile,
    csv_opts: &CsvOptions,
) -> Result<Option<Vec<(String, Kind)>>> {
    match file.format {
        Format::Csv => csv::infer(&file.path, csv_opts),
        Format::Parquet => {
            let f = std::fs::File::open(&file.path).map_err(|e| Error::io(&file.path, e))?;
            let builder =
                ParquetRecordBatchReaderBuilder::try_new(f).map_err(|e| corrupt(&file.path, e))?;
            Ok(Some(
                builder
                    .schema()
                    .fields()
                    .iter()
                    .map(|f| (f.name().clone(), kind_of(f.data_type())))
                    .collect(),
            ))
        }
    }
}

/// The error for a Parquet file whose footer or pages cannot be read.
pub(crate) fn corrupt(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::File {
        path: path.to_path_buf(),
        message: format!("is not a readable Parquet file ({e})"),
    }
}

/// Where a chosen column's values come from in one file.
enum Found {
    Column(Kind),
    Partition(String),
    Absent,
}

fn find(schema: &[(String, Kind)], file: &SourceFile, name: &str) -> Found {
    if let Some((_, k)) = schema.iter().find(|(n, _)| n == name) {
        Found::Column(k.clone())
    } else if let Some(v) = file.partition(name) {
        Found::Partition(v.to_string())
    } else {
        Found::Absent
    }
}

fn column_error(file: &SourceFile, column: &str, message: String) -> Error {
    Error::Column {
        path: file.path.clone(),
        column: column.to_string(),
        message,
    }
}

/// Chooses the feature and target columns and checks them in every file's schema
/// (Parquet footers; CSV headers with types inferred from the first records).
///
/// Default features are the numeric columns of the first non-empty file, in its order,
/// without the target and the `exclude`d columns; partition columns count only when
/// named. `exclude` also removes names from an explicit feature list.
///
/// Errors: no files; a named column missing from a file (naming the file, and a file
/// that has it); a chosen column that is not numeric (naming the file and column, and a
/// file where it is numeric); a partition value that is not a number; the target listed
/// as a feature; a feature listed twice; no feature left.
pub fn resolve_columns(
    files: &[SourceFile],
    sel: &ColumnSelection,
    csv: &CsvOptions,
) -> Result<ResolvedColumns> {
    if files.is_empty() {
        return Err(Error::invalid("inputs", "there are no data files to read"));
    }
    let mut schemas = Vec::with_capacity(files.len());
    for f in files {
        schemas.push(file_schema(f, csv)?);
    }
    let first = schemas.iter().position(Option::is_some);
    let mut features: Vec<String> = match (&sel.features, first) {
        (Some(list), _) => list.clone(),
        (None, Some(i)) => schemas[i]
            .as_ref()
            .map(|s| {
                s.iter()
                    .filter(|(_, k)| *k == Kind::Numeric)
                    .map(|(n, _)| n.clone())
                    .collect()
            })
            .unwrap_or_default(),
        (None, None) => {
            return Err(Error::File {
                path: files[0].path.clone(),
                message: "is empty, so no feature columns can be listed from it".into(),
            })
        }
    };
    features.retain(|f| !sel.exclude.contains(f) && sel.target.as_ref() != Some(f));
    if let (Some(t), Some(list)) = (&sel.target, &sel.features) {
        if list.contains(t) {
            return Err(Error::invalid(
                "features",
                format!("the target column '{t}' is also listed as a feature"),
            ));
        }
    }
    for (i, f) in features.iter().enumerate() {
        if features[..i].contains(f) {
            return Err(Error::invalid(
                "features",
                format!("the column '{f}' is listed twice"),
            ));
        }
    }
    if features.is_empty() {
        return Err(Error::File {
            path: files[first.unwrap_or(0)].path.clone(),
            message: "has no numeric column left to use as a feature".into(),
        });
    }
    let chosen: Vec<&String> = features.iter().chain(sel.target.as_ref()).collect();
    for name in chosen {
        check_column(files, &schemas, name)?;
    }
    Ok(ResolvedColumns {
        features,
        target: sel.target.clone(),
    })
}

/// Checks that `name` is usable in every file with a schema.
fn check_column(
    files: &[SourceFile],
    schemas: &[Option<Vec<(String, Kind)>>],
    name: &str,
) -> Result<()> {
    let found: Vec<Option<Found>> = files
        .iter()
        .zip(schemas)
        .map(|(f, s)| s.as_ref().map(|s| find(s, f, name)))
        .collect();
    let numeric_in = found.iter().position(|x| {
        matches!(x, Some(Found::Column(Kind::Numeric)))
            || matches!(x, Some(Found::Partition(v)) if v.parse::<f64>().is_ok())
    });
    let present_in = found
        .iter()
        .position(|x| !matches!(x, None | Some(Found::Absent)));
    for (i, x) in found.iter().enumerate() {
        let file = &files[i];
        match x {
            None | Some(Found::Column(Kind::Numeric | Kind::Unknown)) => {}
            Some(Found::Column(Kind::Other(t))) => {
                let also = match numeric_in {
                    Some(j) => format!(", but it is numeric in {}", files[j].path.display()),
                    None => String::new(),
                };
                return Err(column_error(
                    file,
                    name,
                    format!("is not numeric (type {t}){also}"),
                ));
            }
            Some(Found::Partition(v)) => {
                if v.parse::<f64>().is_err() {
                    return Err(column_error(
                        file,
                        name,
                        format!("the partition value '{v}' is not a number"),
                    ));
                }
            }
            Some(Found::Absent) => {
                let also = match present_in {
                    Some(j) => format!(", though {} has it", files[j].path.display()),
                    None => String::new(),
                };
                return Err(column_error(
                    file,
                    name,
                    format!("no such column in this file{also}"),
                ));
            }
        }
    }
    Ok(())
}
