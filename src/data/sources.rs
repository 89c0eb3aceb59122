//! Finding the data files of a lake: single files, folders walked recursively and glob
//! patterns, with the `key=value` partition folders of each file.
//!
//! Data files are recognised by their name: `.parquet` and `.parq` are Parquet, `.csv`
//! is comma- (or otherwise-) separated text with a header row. The test is
//! case-insensitive. Compressed CSV is not read. While walking folders and expanding
//! globs, files and folders whose name starts with `.` or `_` are skipped (temporary
//! files, `_SUCCESS` markers, hidden folders); a file named directly is always used.

use std::collections::HashSet;
use std::path::{Component, Path, PathBuf};

use crate::error::{Error, Result};

/// The layout of one data file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Format {
    /// Apache Parquet.
    Parquet,
    /// Delimited text with one header row (see [`CsvOptions`]).
    Csv,
}

impl Format {
    /// The format a file name announces, or `None` for a name that is not a data file.
    pub fn from_path(path: &Path) -> Option<Format> {
        let name = path.file_name()?.to_str()?.to_ascii_lowercase();
        if name.ends_with(".parquet") || name.ends_with(".parq") {
            Some(Format::Parquet)
        } else if name.ends_with(".csv") {
            Some(Format::Csv)
        } else {
            None
        }
    }
}

/// How delimited text files are parsed.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CsvOptions {
    /// The byte separating fields (default `b','`).
    pub delimiter: u8,
}

impl Default for CsvOptions {
    fn default() -> Self {
        CsvOptions { delimiter: b',' }
    }
}

/// One data file found by [`discover`].
#[derive(Clone, Debug, PartialEq)]
pub struct SourceFile {
    /// The file's path as discovered (relative paths stay relative).
    pub path: PathBuf,
    /// Its format, from its name.
    pub format: Format,
    /// `(key, value)` pairs from the `key=value` folders on its path, outermost first.
    pub partitions: Vec<(String, String)>,
    /// Row count from the Parquet footer; `None` for CSV (counted when first read).
    pub rows: Option<u64>,
}

impl SourceFile {
    /// Describes the file at `path`, reading the Parquet footer for its row count.
    ///
    /// Errors: a file whose name is not a data file name, or a Parquet file whose footer
    /// cannot be read (corrupt or truncated).
    pub fn open(path: PathBuf) -> Result<SourceFile> {
        let format = Format::from_path(&path).ok_or_else(|| Error::File {
            path: path.clone(),
            message: "is not a data file (the name must end in .parquet, .parq or .csv)".into(),
        })?;
        let rows = match format {
            Format::Parquet => Some(parquet_rows(&path)?),
            Format::Csv => None,
        };
        let partitions = partitions_of(&path);
        Ok(SourceFile {
            path,
            format,
            partitions,
            rows,
        })
    }

    /// The value of the partition folder `key`, if the file has one (innermost wins).
    pub fn partition(&self, key: &str) -> Option<&str> {
        self.partitions
            .iter()
            .rev()
            .find(|(k, _)| k == key)
            .map(|(_, v)| v.as_str())
    }
}

/// The error for a Parquet file whose footer or pages cannot be read.
pub(crate) fn corrupt(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::File {
        path: path.to_path_buf(),
        message: format!("is not a readable Parquet file ({e})"),
    }
}

/// Row count of a Parquet file or object from its footer.
fn parquet_rows(path: &Path) -> Result<u64> {
    crate::store::parquet::footer(path)?.rows()
}

/// `key=value` components of the folders holding `path`, outermost first.
fn partitions_of(path: &Path) -> Vec<(String, String)> {
    let Some(parent) = path.parent() else {
        return Vec::new();
    };
    parent
        .components()
        .filter_map(|c| match c {
            Component::Normal(s) => s.to_str(),
            _ => None,
        })
        .filter_map(|s| {
            let (k, v) = s.split_once('=')?;
            (!k.is_empty() && !v.contains('=')).then(|| (k.to_string(), v.to_string()))
        })
        .collect()
}

/// Whether a walked or globbed entry is skipped because of its name.
fn is_hidden(path: &Path) -> bool {
    path.file_name()
        .and_then(|n| n.to_str())
        .is_some_and(|n| n.starts_with('.') || n.starts_with('_'))
}

/// Whether an input string is a glob pattern rather than a path.
fn is_pattern(s: &str) -> bool {
    s.contains(['*', '?', '['])
}

/// Data files under `dir`, recursively, skipping hidden entries.
fn walk(dir: &Path, out: &mut Vec<PathBuf>) -> Result<()> {
    let entries = std::fs::read_dir(dir).map_err(|e| Error::io(dir, e))?;
    for entry in entries {
        let entry = entry.map_err(|e| Error::io(dir, e))?;
        let path = entry.path();
        if is_hidden(&path) {
            continue;
        }
        let kind = entry.file_type().map_err(|e| Error::io(&path, e))?;
        let is_dir = kind.is_dir() || (kind.is_symlink() && path.is_dir());
        if is_dir {
            walk(&path, out)?;
        } else if Format::from_path(&path).is_some() {
            out.push(path);
        }
    }
    Ok(())
}

/// Finds the data files named by `inputs`: files, folders (walked recursively) and glob
/// patterns (`*`, `?`, `[...]`; a pattern matching a folder walks it).
///
/// Files are recognised by name (`.parquet`, `.parq`, `.csv`, any case); while walking
/// folders and expanding patterns, names starting with `.` or `_` are skipped. The result
/// is sorted by path and a file reached twice appears once. Parquet footers are read for
/// row counts.
///
/// Errors: no inputs; a path that does not exist; a file named directly whose name is
/// not a data file name; a folder with no data files; a pattern that is malformed or
/// matches no data file; an unreadable Parquet footer.
pub fn discover(inputs: &[String]) -> Result<Vec<SourceFile>> {
    discover_files(inputs, false)
}

/// Like [`discover`], but a Parquet file whose footer cannot be read is listed (with no
/// row count) instead of stopping the discovery, so that a run that goes on past failed
/// files (scoring with `keep_going`) reports it among its failures and does the rest.
///
/// Errors: those of [`discover`] but the unreadable footer.
pub fn discover_lenient(inputs: &[String]) -> Result<Vec<SourceFile>> {
    discover_files(inputs, true)
}

/// The data objects an object-store URL names: the object itself, every data object
/// below it as a folder, or those matching a glob pattern in its key.
fn remote_objects(input: &str, paths: &mut Vec<PathBuf>) -> Result<()> {
    use crate::store::{list, locate, Location};
    let is_data = |name: &str| Format::from_path(Path::new(name)).is_some();
    let pattern = input
        .split_once("://")
        .and_then(|(_, rest)| rest.split_once('/'))
        .map(|(_, key)| key)
        .filter(|key| is_pattern(key));
    let remote = match pattern {
        // The client is built from the pattern's bucket; the key is listed by pattern.
        Some(key) => {
            let bucket_url = &input[..input.len() - key.len()];
            match locate(Path::new(bucket_url))? {
                Location::Remote(r) => (r, Some(key)),
                Location::Local(_) => unreachable!("is_remote checked the scheme"),
            }
        }
        None => match locate(Path::new(input))? {
            Location::Remote(r) => (r, None),
            Location::Local(_) => unreachable!("is_remote checked the scheme"),
        },
    };
    let found = match remote {
        (r, Some(key)) => {
            let r = crate::store::Remote {
                url: input.to_string(),
                ..r
            };
            let found = list::objects_matching(&r, key, is_data)?;
            if found.is_empty() {
                return Err(Error::invalid(
                    "inputs",
                    format!("the pattern '{input}' matches no data object"),
                ));
            }
            found
        }
        (r, None) => {
            let found = list::objects_under(&r, is_data)?;
            if found.is_empty() {
                return Err(Error::File {
                    path: PathBuf::from(input),
                    message: "holds no data objects (.parquet, .parq or .csv)".into(),
                });
            }
            found
        }
    };
    paths.extend(found.into_iter().map(PathBuf::from));
    Ok(())
}

fn discover_files(inputs: &[String], lenient: bool) -> Result<Vec<SourceFile>> {
    if inputs.is_empty() {
        return Err(Error::invalid(
            "inputs",
            "no data file, folder or pattern was given",
        ));
    }
    let mut paths = Vec::new();
    for input in inputs {
        // `file://` URLs are local paths.
        let input = input.strip_prefix("file://").unwrap_or(input);
        let path = Path::new(input);
        if crate::store::is_remote(path) {
            remote_objects(input, &mut paths)?;
        } else if path.exists() {
            if path.is_dir() {
                let before = paths.len();
                walk(path, &mut paths)?;
                if paths.len() == before {
                    return Err(Error::File {
                        path: path.to_path_buf(),
                        message: "is a folder with no data files (.parquet, .parq or .csv)".into(),
                    });
                }
            } else {
                paths.push(path.to_path_buf());
            }
        } else if is_pattern(input) {
            let matches = glob::glob(input).map_err(|e| {
                Error::invalid("inputs", format!("'{input}' is not a valid pattern: {e}"))
            })?;
            let before = paths.len();
            for m in matches {
                let m = m.map_err(|e| Error::io(e.path().to_path_buf(), e.into()))?;
                if is_hidden(&m) {
                    continue;
                }
                if m.is_dir() {
                    walk(&m, &mut paths)?;
                } else if Format::from_path(&m).is_some() {
                    paths.push(m);
                }
            }
            if paths.len() == before {
                return Err(Error::invalid(
                    "inputs",
                    format!("the pattern '{input}' matches no data file"),
                ));
            }
        } else {
            return Err(Error::File {
                path: path.to_path_buf(),
                message: "does not exist".into(),
            });
        }
    }
    paths.sort();
    let mut seen = HashSet::new();
    let mut files = Vec::with_capacity(paths.len());
    for path in paths {
        let key = std::fs::canonicalize(&path).unwrap_or_else(|_| path.clone());
        if seen.insert(key) {
            match SourceFile::open(path.clone()) {
                Ok(f) => files.push(f),
                Err(Error::File { .. }) if lenient && Format::from_path(&path).is_some() => files
                    .push(SourceFile {
                        partitions: partitions_of(&path),
                        format: Format::Parquet,
                        rows: None,
                        path,
                    }),
                Err(e) => return Err(e),
            }
        }
    }
    Ok(files)
}
