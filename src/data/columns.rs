//! Choosing the feature and target columns from the files' schemas.
//!
//! Parquet schemas come from the footers; CSV column types are inferred from the header
//! and the first 1,000 records (see [`super::csv`]). Every Arrow integer, float and
//! decimal type (also dictionary-encoded) is numeric and read as `f64`; booleans are numeric too and read as 1
//! (true) and 0 (false). A partition folder `key=value` supplies a column `key` only
//! when it is named explicitly (as a feature or the target) and the file has no
//! column of that name; its value must parse as a number.

use std::path::PathBuf;

use super::csv;
use super::kind::{kind_of, Kind};
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

/// The columns of one file as far as the column choice needs them.
pub(crate) struct FileSchema {
    /// Column names and kinds, in file order.
    pub columns: Vec<(String, Kind)>,
    /// Whether the file has at least one data row.
    pub has_rows: bool,
    /// Whether every row was seen to infer the kinds (Parquet: always).
    pub complete: bool,
    /// For CSV files: the clause suggesting another delimiter (see
    /// [`csv::delimiter_advice`]), or empty.
    pub advice: String,
}

/// Column names and kinds of one file; `None` for an empty CSV file (no header).
/// A Parquet column whose footer statistics count every value as null is
/// [`Kind::Unknown`].
pub(crate) fn file_schema(file: &SourceFile, csv_opts: &CsvOptions) -> Result<Option<FileSchema>> {
    match file.format {
        Format::Csv => Ok(csv::infer(&file.path, csv_opts)?.map(|inf| {
            let names: Vec<String> = inf.columns.iter().map(|(n, _)| n.clone()).collect();
            FileSchema {
                advice: csv::delimiter_advice(&names, csv_opts),
                columns: inf.columns,
                has_rows: inf.records > 0,
                complete: inf.complete,
            }
        })),
        Format::Parquet => {
            let footer = crate::store::parquet::footer(&file.path)?;
            let meta = footer.meta.metadata();
            let rows = meta.file_metadata().num_rows();
            let fields = footer.meta.schema().fields();
            let flat = footer.meta.parquet_schema().num_columns() == fields.len();
            let all_null = |j: usize| -> bool {
                flat && rows > 0 && {
                    let nulls: Option<i64> = meta.row_groups().iter().try_fold(0i64, |acc, rg| {
                        let n = rg.column(j).statistics()?.null_count_opt()?;
                        Some(acc + i64::try_from(n).ok()?)
                    });
                    nulls == Some(rows)
                }
            };
            Ok(Some(FileSchema {
                columns: fields
                    .iter()
                    .enumerate()
                    .map(|(j, f)| {
                        let kind = match kind_of(f.data_type()) {
                            Kind::Numeric if all_null(j) => Kind::Unknown,
                            k => k,
                        };
                        (f.name().clone(), kind)
                    })
                    .collect(),
                has_rows: rows > 0,
                complete: true,
                advice: String::new(),
            }))
        }
    }
}

/// A column of the first file that the default input set leaves out, and why.
#[derive(Clone, Debug, PartialEq)]
pub struct LeftOut {
    /// The file whose columns gave the default input set.
    pub path: PathBuf,
    /// The column left out.
    pub column: String,
    /// Why, as a clause ("it is not numeric (type Utf8)").
    pub reason: String,
}

impl std::fmt::Display for LeftOut {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "column '{}' of {} is not used as an input: {}",
            self.column,
            self.path.display(),
            self.reason
        )
    }
}

/// The result of [`choose_columns`]: the chosen columns and the columns that the
/// default input set left out.
#[derive(Clone, Debug, PartialEq)]
pub struct ColumnChoice {
    /// The input contract.
    pub columns: ResolvedColumns,
    /// Columns of the first file left out of the default input set (empty when the
    /// features were listed).
    pub left_out: Vec<LeftOut>,
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

/// Why a column of kind `kind` is not a default input, as a clause.
fn reason(kind: &Kind, schema: &FileSchema, file: &SourceFile) -> Option<String> {
    match kind {
        Kind::Numeric => None,
        Kind::Other(t) => Some(format!("it is not numeric ({t})")),
        Kind::Unknown if !schema.has_rows => Some("the file has no data rows".into()),
        Kind::Unknown if file.format == Format::Csv => Some(format!(
            "its cells are empty in the first {} records",
            csv::INFER_RECORDS
        )),
        Kind::Unknown => Some("every value is null".into()),
    }
}

/// Chooses the feature and target columns; see [`choose_columns`].
pub fn resolve_columns(
    files: &[SourceFile],
    sel: &ColumnSelection,
    csv: &CsvOptions,
) -> Result<ResolvedColumns> {
    choose_columns(files, sel, csv).map(|c| c.columns)
}

/// Chooses the feature and target columns and checks them in every file's schema
/// (Parquet footers; CSV headers with types inferred from the first records), and lists
/// the columns of the first file that the default input set leaves out, with why.
///
/// Default features are the numeric columns of the first non-empty file, in its order,
/// without the target and the `exclude`d columns; partition columns count only when
/// named. `exclude` also removes names from an explicit feature list.
///
/// Errors: no files; no data rows in any file; a named column missing from a file
/// (naming the file, and a file that has it; suggesting a delimiter when a CSV header
/// seems split by another one); a chosen column that is not numeric (naming the file and
/// column, a sample cell, and a file where it is numeric) or has no value in any file; a
/// chosen column that appears twice in a file; a partition value that is not a number;
/// the target listed as a feature; a feature listed twice; no feature left.
pub fn choose_columns(
    files: &[SourceFile],
    sel: &ColumnSelection,
    csv: &CsvOptions,
) -> Result<ColumnChoice> {
    if files.is_empty() {
        return Err(Error::invalid("inputs", "there are no data files to read"));
    }
    let mut schemas = Vec::with_capacity(files.len());
    for f in files {
        schemas.push(file_schema(f, csv)?);
    }
    let Some(first) = schemas.iter().position(Option::is_some) else {
        return Err(Error::File {
            path: files[0].path.clone(),
            message: "is empty, so no feature columns can be listed from it".into(),
        });
    };
    let head = schemas[first].as_ref().expect("first has a schema");
    let unused = |n: &String| sel.exclude.contains(n) || sel.target.as_ref() == Some(n);
    let mut left_out = Vec::new();
    let mut features: Vec<String> = match &sel.features {
        Some(list) => list.clone(),
        None => {
            for (n, k) in &head.columns {
                if let Some(why) = reason(k, head, &files[first]).filter(|_| !unused(n)) {
                    left_out.push(LeftOut {
                        path: files[first].path.clone(),
                        column: n.clone(),
                        reason: why,
                    });
                }
            }
            let mut v: Vec<String> = Vec::new();
            for (n, k) in &head.columns {
                if *k == Kind::Numeric && !v.contains(n) {
                    v.push(n.clone());
                }
            }
            v
        }
    };
    features.retain(|f| !unused(f));
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
    if !schemas.iter().flatten().any(|s| s.has_rows) {
        return Err(Error::File {
            path: files[first].path.clone(),
            message: match files.len() {
                1 => "has no data rows (a header or schema only)".to_string(),
                n => format!(
                    "has no data rows, and neither have the other {} files",
                    n - 1
                ),
            },
        });
    }
    if features.is_empty() {
        let why: Vec<String> = left_out
            .iter()
            .take(3)
            .map(|l| format!("'{}': {}", l.column, l.reason))
            .collect();
        let why = if why.is_empty() {
            String::new()
        } else {
            format!(" ({})", why.join("; "))
        };
        return Err(Error::File {
            path: files[first].path.clone(),
            message: format!(
                "has no numeric column left to use as a feature{why}{}",
                head.advice
            ),
        });
    }
    let chosen: Vec<&String> = features.iter().chain(sel.target.as_ref()).collect();
    for name in chosen {
        check_column(files, &schemas, name)?;
    }
    Ok(ColumnChoice {
        columns: ResolvedColumns {
            features,
            target: sel.target.clone(),
        },
        left_out,
    })
}

/// Checks that `name` is usable in every file with a schema.
fn check_column(files: &[SourceFile], schemas: &[Option<FileSchema>], name: &str) -> Result<()> {
    let found: Vec<Option<Found>> = files
        .iter()
        .zip(schemas)
        .map(|(f, s)| s.as_ref().map(|s| find(&s.columns, f, name)))
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
        if let Some(s) = &schemas[i] {
            if s.columns.iter().filter(|(n, _)| n == name).count() > 1 {
                return Err(column_error(
                    file,
                    name,
                    "appears more than once in this file's header or schema, so which one to read is unclear; rename one".into(),
                ));
            }
        }
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
                    format!("is not numeric ({t}){also}"),
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
                let advice = schemas[i].as_ref().map_or("", |s| s.advice.as_str());
                return Err(column_error(
                    file,
                    name,
                    format!("no such column in this file{also}{advice}"),
                ));
            }
        }
    }
    all_null(files, schemas, &found, name)
}

/// An error when `name` holds no value in any file: every file with rows has it as a
/// null-only column (Parquet footer statistics or a `Null` column; CSV cells all empty
/// in a file whose every record was inferred).
fn all_null(
    files: &[SourceFile],
    schemas: &[Option<FileSchema>],
    found: &[Option<Found>],
    name: &str,
) -> Result<()> {
    let mut with_rows = files
        .iter()
        .zip(schemas)
        .zip(found)
        .filter(|((_, s), _)| s.as_ref().is_some_and(|s| s.has_rows));
    let first = with_rows.clone().next();
    let empty = with_rows.all(|((_, s), x)| {
        s.as_ref().is_some_and(|s| s.complete) && matches!(x, Some(Found::Column(Kind::Unknown)))
    });
    match first {
        Some(((f, _), _)) if empty => Err(column_error(
            f,
            name,
            "has no value in any file (every cell is empty or null), so it cannot be used".into(),
        )),
        _ => Ok(()),
    }
}
