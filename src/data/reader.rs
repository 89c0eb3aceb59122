//! Streaming the chosen columns of a list of files as blocks of `f64` rows.
//!
//! Parquet files are read with a column projection (only the chosen columns are
//! decoded) and every numeric Arrow type is cast to `Float64` with `arrow-cast`. CSV
//! files are read as text and parsed (see [`super::csv`]).
//!
//! Rows carry a global index: rows are numbered over all files in order, skipped rows
//! included, starting at 0. For Parquet the offset of each file comes from the footers'
//! row counts; a CSV file's row count is learnt the first time it is read in full (or
//! counted by [`TableReader::row_offsets`] when a later file is read first), then kept
//! for the reader's lifetime. The index therefore does not depend on the batch size and
//! is the same in every epoch.

use std::sync::OnceLock;

use super::block::{build_block, BatchPlace, Block, MissingPolicy};
use super::columns::ResolvedColumns;
use super::csv;
use super::open::{columns_of, open_csv, open_parquet, Batches, Source};
use super::sources::{corrupt, CsvOptions, Format, SourceFile};
use crate::error::{Error, Result};

/// Reads the chosen columns of a list of files as [`Block`]s (builder style).
///
/// ```no_run
/// use kernlake::data::{discover, resolve_columns, ColumnSelection, CsvOptions, TableReader};
/// let files = discover(&["lake/".to_string()])?;
/// let sel = ColumnSelection { target: Some("PE".into()), ..Default::default() };
/// let cols = resolve_columns(&files, &sel, &CsvOptions::default())?;
/// let reader = TableReader::new(files, cols).with_batch_rows(8_192);
/// for block in reader.blocks()? {
///     let block = block?;
///     println!("{} rows kept of {}", block.kept(), block.rows);
/// }
/// # Ok::<(), kernlake::Error>(())
/// ```
#[derive(Clone, Debug)]
pub struct TableReader {
    files: Vec<SourceFile>,
    columns: ResolvedColumns,
    batch_rows: usize,
    missing: MissingPolicy,
    csv: CsvOptions,
    subset: Option<Vec<usize>>,
    counts: Vec<OnceLock<u64>>,
}

impl TableReader {
    /// A reader of `columns` from `files` (batches of 65,536 rows, missing values skipped).
    ///
    /// # Panics
    /// If `columns.features` is empty.
    pub fn new(files: Vec<SourceFile>, columns: ResolvedColumns) -> Self {
        assert!(
            !columns.features.is_empty(),
            "TableReader::new: at least one feature column is needed"
        );
        let counts = files
            .iter()
            .map(|f| {
                let c = OnceLock::new();
                if let (Format::Parquet, Some(r)) = (f.format, f.rows) {
                    let _ = c.set(r);
                }
                c
            })
            .collect();
        TableReader {
            files,
            columns,
            batch_rows: 65_536,
            missing: MissingPolicy::Skip,
            csv: CsvOptions::default(),
            subset: None,
            counts,
        }
    }

    /// Rows per batch read from a file (default 65,536; a file's last batch is shorter).
    ///
    /// # Panics
    /// If `n` is 0.
    pub fn with_batch_rows(mut self, n: usize) -> Self {
        assert!(
            n > 0,
            "TableReader::with_batch_rows: the batch size must be positive"
        );
        self.batch_rows = n;
        self
    }

    /// The missing-value policy (default [`MissingPolicy::Skip`]).
    pub fn with_missing(mut self, p: MissingPolicy) -> Self {
        self.missing = p;
        self
    }

    /// How CSV files are parsed.
    pub fn with_csv(mut self, o: CsvOptions) -> Self {
        self.csv = o;
        self
    }

    /// Reads only the files at these indices of [`Self::files`] (in increasing order,
    /// duplicates removed); rows keep their global index over all files.
    ///
    /// # Panics
    /// If an index is out of range.
    pub fn with_files_subset(mut self, mut idx: Vec<usize>) -> Self {
        idx.sort_unstable();
        idx.dedup();
        if let Some(&last) = idx.last() {
            assert!(
                last < self.files.len(),
                "TableReader::with_files_subset: file index {last} out of range ({} files)",
                self.files.len()
            );
        }
        self.subset = Some(idx);
        self
    }

    /// All files of the reader (block `file_index` values index this list).
    pub fn files(&self) -> &[SourceFile] {
        &self.files
    }

    /// The chosen columns.
    pub fn columns(&self) -> &ResolvedColumns {
        &self.columns
    }

    /// Rows per batch.
    pub fn batch_rows(&self) -> usize {
        self.batch_rows
    }

    /// The missing-value policy.
    pub fn missing(&self) -> MissingPolicy {
        self.missing
    }

    /// How CSV files are parsed.
    pub fn csv(&self) -> &CsvOptions {
        &self.csv
    }

    /// The indices of the files this reader reads, in order.
    pub fn selected_files(&self) -> Vec<usize> {
        match &self.subset {
            Some(s) => s.clone(),
            None => (0..self.files.len()).collect(),
        }
    }

    /// Row count of file `i` (Parquet footer, or a CSV counted once and remembered).
    pub fn file_rows(&self, i: usize) -> Result<u64> {
        if let Some(&n) = self.counts[i].get() {
            return Ok(n);
        }
        let f = &self.files[i];
        let n = match f.format {
            Format::Parquet => SourceFile::open(f.path.clone())?.rows.unwrap_or(0),
            Format::Csv => csv::count_rows(&f.path, &self.csv, self.batch_rows)?,
        };
        Ok(*self.counts[i].get_or_init(|| n))
    }

    /// Global index of the first row of each file, plus the total row count at the end
    /// (`files().len() + 1` values). Counts the rows of CSV files not yet read.
    pub fn row_offsets(&self) -> Result<Vec<u64>> {
        let mut out = Vec::with_capacity(self.files.len() + 1);
        let mut acc = 0u64;
        out.push(0);
        for i in 0..self.files.len() {
            acc += self.file_rows(i)?;
            out.push(acc);
        }
        Ok(out)
    }

    /// Total rows of all files (skipped rows included), see [`Self::row_offsets`].
    pub fn total_rows(&self) -> Result<u64> {
        Ok(*self.row_offsets()?.last().unwrap_or(&0))
    }

    /// Streams the selected files in order as blocks numbered 0, 1, 2, …
    pub fn blocks(&self) -> Result<Blocks<'_>> {
        let order = self.selected_files();
        let offsets = match &self.subset {
            Some(_) => Some(self.row_offsets()?),
            None => None,
        };
        Ok(Blocks::new(self, order, offsets))
    }

    /// Streams one file (blocks numbered from 0), with global row indices; for readers
    /// that process files in parallel. Counts earlier CSV files' rows if needed.
    ///
    /// # Panics
    /// If `i` is out of range.
    pub fn file_blocks(&self, i: usize) -> Result<Blocks<'_>> {
        assert!(
            i < self.files.len(),
            "TableReader::file_blocks: no file {i}"
        );
        let mut first = 0;
        for j in 0..i {
            first += self.file_rows(j)?;
        }
        let mut offsets = vec![0; self.files.len() + 1];
        offsets[i] = first;
        Ok(Blocks::new(self, vec![i], Some(offsets)))
    }
}

struct OpenFile {
    index: usize,
    batches: Batches,
    sources: Vec<Source>,
    local_row: u64,
    first_row: u64,
}

/// Iterator over the [`Block`]s of a [`TableReader`]; stops after the first error.
pub struct Blocks<'a> {
    reader: &'a TableReader,
    order: Vec<usize>,
    pos: usize,
    offsets: Option<Vec<u64>>,
    next_offset: u64,
    current: Option<OpenFile>,
    seq: u64,
    failed: bool,
}

impl<'a> Blocks<'a> {
    fn new(reader: &'a TableReader, order: Vec<usize>, offsets: Option<Vec<u64>>) -> Self {
        Blocks {
            reader,
            order,
            pos: 0,
            offsets,
            next_offset: 0,
            current: None,
            seq: 0,
            failed: false,
        }
    }

    fn open_next(&mut self) -> Result<bool> {
        let Some(&index) = self.order.get(self.pos) else {
            return Ok(false);
        };
        self.pos += 1;
        let first_row = match &self.offsets {
            Some(o) => o[index],
            None => self.next_offset,
        };
        let r = self.reader;
        let file = &r.files[index];
        let names: Vec<&str> = r.columns.all().collect();
        let opened = match file.format {
            Format::Parquet => open_parquet(file, &names, r.batch_rows)?,
            Format::Csv => open_csv(file, &names, &r.csv, r.batch_rows)?,
        };
        self.current = opened.map(|(batches, sources)| OpenFile {
            index,
            batches,
            sources,
            local_row: 0,
            first_row,
        });
        if self.current.is_none() {
            // an empty CSV file without a header row
            let _ = r.counts[index].set(0);
        }
        Ok(true)
    }

    fn next_block(&mut self) -> Result<Option<Block>> {
        loop {
            let Some(cur) = self.current.as_mut() else {
                if !self.open_next()? {
                    return Ok(None);
                }
                continue;
            };
            let r = self.reader;
            let file = &r.files[cur.index];
            let batch = match &mut cur.batches {
                Batches::Parquet(b) => b.next().map(|b| b.map_err(|e| corrupt(&file.path, e))),
                Batches::Csv(b) => b.next().map(|b| {
                    b.map_err(|e| Error::File {
                        path: file.path.clone(),
                        message: format!("could not be parsed as CSV ({e})"),
                    })
                }),
            };
            let Some(batch) = batch else {
                let rows = cur.local_row;
                let known = *r.counts[cur.index].get_or_init(|| rows);
                if known != rows {
                    return Err(Error::File {
                        path: file.path.clone(),
                        message: format!("held {rows} rows, but {known} were expected"),
                    });
                }
                self.next_offset = cur.first_row + rows;
                self.current = None;
                continue;
            };
            let batch = batch?;
            let names: Vec<&str> = r.columns.all().collect();
            let strict = r.missing == MissingPolicy::Fail;
            let cols = columns_of(&batch, &cur.sources, &names, file, cur.local_row, strict)?;
            let place = BatchPlace {
                path: &file.path,
                file_index: cur.index,
                seq: self.seq,
                first_row: cur.first_row + cur.local_row,
                local_row: cur.local_row,
            };
            let block = build_block(
                &place,
                &cols,
                &names,
                r.columns.features.len(),
                r.columns.target.is_some(),
                r.missing,
            )?;
            cur.local_row += batch.num_rows() as u64;
            self.seq += 1;
            return Ok(Some(block));
        }
    }
}

impl Iterator for Blocks<'_> {
    type Item = Result<Block>;

    fn next(&mut self) -> Option<Self::Item> {
        if self.failed {
            return None;
        }
        match self.next_block() {
            Ok(b) => b.map(Ok),
            Err(e) => {
                self.failed = true;
                Some(Err(e))
            }
        }
    }
}

/// `Blocks` can move to a reading thread.
const _: fn() = || {
    fn assert_send<T: Send>() {}
    assert_send::<Blocks<'static>>();
};
