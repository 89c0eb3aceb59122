//! Parquet by ranges: the footer first, then only the column chunks a projection needs,
//! from a local file or an object. For an object the decoding runs as a task on the
//! store runtime, two batches ahead of the caller, so that fetching and decoding the
//! next row group overlap the caller's work on the current one; memory stays at one
//! row group's chosen column chunks plus two batches.

use std::fs::File;
use std::path::{Path, PathBuf};

use arrow_array::RecordBatch;
use arrow_schema::ArrowError;
use std::ops::Range;
use std::sync::Arc;

use futures_util::future::{BoxFuture, FutureExt};
use futures_util::stream::StreamExt;
use object_store::{ObjectMeta, ObjectStore, ObjectStoreExt};
use parquet::arrow::arrow_reader::{
    ArrowReaderMetadata, ArrowReaderOptions, ParquetRecordBatchReader,
    ParquetRecordBatchReaderBuilder,
};
use parquet::arrow::async_reader::{AsyncFileReader, ParquetRecordBatchStreamBuilder};
use parquet::arrow::ProjectionMask;
use parquet::errors::ParquetError;
use parquet::file::metadata::{ParquetMetaData, ParquetMetaDataReader};

use super::{block_on, handle, io, locate, Location, Remote};
use crate::error::{Error, Result};

/// Batches decoded ahead of the caller for an object.
const AHEAD: usize = 2;

/// Where the bytes of an open Parquet source come from.
enum Bytes {
    Local(File),
    Remote(Remote, ObjectMeta),
}

/// A Parquet file or object whose footer has been read.
pub(crate) struct Footer {
    /// Schema, row groups and statistics.
    pub meta: ArrowReaderMetadata,
    bytes: Bytes,
    path: PathBuf,
}

/// The error for a Parquet source whose footer or pages cannot be read.
fn corrupt(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::File {
        path: path.to_path_buf(),
        message: format!("is not a readable Parquet file ({e})"),
    }
}

/// Reads the footer of the Parquet file or object at `path` (for an object: its size,
/// then the footer's byte range).
///
/// Errors: a missing or unreadable file or object; a footer that does not parse.
pub(crate) fn footer(path: &Path) -> Result<Footer> {
    let options = ArrowReaderOptions::new();
    match locate(path)? {
        Location::Local(p) => {
            let file = File::open(&p).map_err(|e| Error::io(&p, e))?;
            let meta = ArrowReaderMetadata::load(&file, options).map_err(|e| corrupt(path, e))?;
            Ok(Footer {
                meta,
                bytes: Bytes::Local(file),
                path: path.to_path_buf(),
            })
        }
        Location::Remote(r) => {
            let head = io::head(&r)?;
            let mut reader = ObjectReader::new(&r, head.size);
            let meta = block_on(ArrowReaderMetadata::load_async(&mut reader, options))
                .map_err(|e| corrupt(path, e))?;
            Ok(Footer {
                meta,
                bytes: Bytes::Remote(r, head),
                path: path.to_path_buf(),
            })
        }
    }
}

impl Footer {
    /// Rows announced by the footer.
    pub(crate) fn rows(&self) -> Result<u64> {
        let rows = self.meta.metadata().file_metadata().num_rows();
        u64::try_from(rows).map_err(|_| Error::File {
            path: self.path.clone(),
            message: format!("has a negative row count ({rows}) in its footer"),
        })
    }

    /// Batches of `batch_rows` rows of the columns in `mask`.
    pub(crate) fn batches(self, mask: ProjectionMask, batch_rows: usize) -> Result<Batches> {
        let path = self.path;
        match self.bytes {
            Bytes::Local(file) => {
                let reader = ParquetRecordBatchReaderBuilder::new_with_metadata(file, self.meta)
                    .with_projection(mask)
                    .with_batch_size(batch_rows)
                    .build()
                    .map_err(|e| corrupt(&path, e))?;
                Ok(Batches::Local(reader))
            }
            Bytes::Remote(r, head) => {
                let reader = ObjectReader::new(&r, head.size);
                let mut stream =
                    ParquetRecordBatchStreamBuilder::new_with_metadata(reader, self.meta)
                        .with_projection(mask)
                        .with_batch_size(batch_rows)
                        .build()
                        .map_err(|e| corrupt(&path, e))?;
                let (tx, rx) = tokio::sync::mpsc::channel(AHEAD);
                handle().spawn(async move {
                    // The asynchronous reader ends a batch at every row group; the local
                    // reader's batches run across them. Regrouping into batches of
                    // exactly `batch_rows` gives the same blocks, hence the same model,
                    // whichever way a file is read.
                    let mut regroup = Regroup::new(batch_rows);
                    while let Some(item) = stream.next().await {
                        let out = item.map_err(ArrowError::from).and_then(|b| regroup.push(b));
                        let failed = out.is_err();
                        for batch in transpose(out) {
                            if tx.send(batch).await.is_err() {
                                return;
                            }
                        }
                        if failed {
                            return;
                        }
                    }
                    if let Some(last) = regroup.finish().transpose() {
                        let _ = tx.send(last).await;
                    }
                });
                Ok(Batches::Remote(rx))
            }
        }
    }
}

/// Batches of exactly `rows` rows (the last one shorter) from batches of any sizes, as
/// the synchronous Parquet reader cuts them.
struct Regroup {
    rows: usize,
    held: Vec<RecordBatch>,
    held_rows: usize,
}

impl Regroup {
    fn new(rows: usize) -> Self {
        Regroup {
            rows: rows.max(1),
            held: Vec::new(),
            held_rows: 0,
        }
    }

    /// Takes `batch`; returns the whole batches now complete.
    fn push(&mut self, batch: RecordBatch) -> std::result::Result<Vec<RecordBatch>, ArrowError> {
        self.held_rows += batch.num_rows();
        self.held.push(batch);
        let mut out = Vec::new();
        while self.held_rows >= self.rows {
            let all = self.joined()?;
            out.push(all.slice(0, self.rows));
            self.held_rows -= self.rows;
            self.held = vec![all.slice(self.rows, self.held_rows)];
        }
        Ok(out)
    }

    /// The rows still held, as one batch.
    fn finish(mut self) -> std::result::Result<Option<RecordBatch>, ArrowError> {
        if self.held_rows == 0 {
            return Ok(None);
        }
        self.joined().map(Some)
    }

    /// The held batches as one (without a copy when there is only one).
    fn joined(&mut self) -> std::result::Result<RecordBatch, ArrowError> {
        if self.held.len() == 1 {
            return Ok(self.held[0].clone());
        }
        let schema = self.held[0].schema();
        arrow_select::concat::concat_batches(&schema, &self.held)
    }
}

/// A result of many batches as many results (an error as one).
fn transpose(
    r: std::result::Result<Vec<RecordBatch>, ArrowError>,
) -> Vec<std::result::Result<RecordBatch, ArrowError>> {
    match r {
        Ok(v) => v.into_iter().map(Ok).collect(),
        Err(e) => vec![Err(e)],
    }
}

/// The decoded batches of a Parquet source.
pub(crate) enum Batches {
    /// Read from a local file on the caller's thread.
    Local(ParquetRecordBatchReader),
    /// Decoded ahead on the store runtime.
    Remote(tokio::sync::mpsc::Receiver<std::result::Result<RecordBatch, ArrowError>>),
}

impl Iterator for Batches {
    type Item = std::result::Result<RecordBatch, ArrowError>;

    fn next(&mut self) -> Option<Self::Item> {
        match self {
            Batches::Local(r) => r.next(),
            Batches::Remote(rx) => rx.blocking_recv(),
        }
    }
}

/// Range reads of one object for parquet's asynchronous reader: the footer by its
/// known offset, then the column chunks the projection needs (several ranges of one
/// row group fetched together).
struct ObjectReader {
    store: Arc<dyn ObjectStore>,
    key: object_store::path::Path,
    size: u64,
}

impl ObjectReader {
    fn new(r: &Remote, size: u64) -> Self {
        ObjectReader {
            store: r.store.clone(),
            key: r.key.clone(),
            size,
        }
    }
}

fn external(e: object_store::Error) -> ParquetError {
    ParquetError::External(Box::new(e))
}

impl AsyncFileReader for ObjectReader {
    fn get_bytes(
        &mut self,
        range: Range<u64>,
    ) -> BoxFuture<'_, parquet::errors::Result<bytes::Bytes>> {
        async move {
            self.store
                .get_range(&self.key, range)
                .await
                .map_err(external)
        }
        .boxed()
    }

    fn get_byte_ranges(
        &mut self,
        ranges: Vec<Range<u64>>,
    ) -> BoxFuture<'_, parquet::errors::Result<Vec<bytes::Bytes>>> {
        async move {
            self.store
                .get_ranges(&self.key, &ranges)
                .await
                .map_err(external)
        }
        .boxed()
    }

    fn get_metadata<'a>(
        &'a mut self,
        options: Option<&'a ArrowReaderOptions>,
    ) -> BoxFuture<'a, parquet::errors::Result<Arc<ParquetMetaData>>> {
        async move {
            let size = self.size;
            let meta = ParquetMetaDataReader::new()
                .with_arrow_reader_options(options)
                .load_and_finish(self, size)
                .await?;
            Ok(Arc::new(meta))
        }
        .boxed()
    }
}
