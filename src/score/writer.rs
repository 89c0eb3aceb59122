//! Output files: where each goes (mirroring the inputs' folders), the atomic Parquet
//! write that ends with its stamp (see `stamp.rs`), and removal of stale temporary files.

use std::collections::HashMap;
use std::path::{Component, Path, PathBuf};

use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;

use crate::atomic::{create_dir_durable, AtomicFile};
use crate::data::Format;
use crate::error::{Error, Result};

use super::stamp::{Stamp, STAMP_KEY};

/// A writer that counts and checksums the bytes passing through it.
pub(crate) struct Summing {
    inner: AtomicFile,
    hasher: crc32fast::Hasher,
    bytes: u64,
}

impl Summing {
    fn new(inner: AtomicFile) -> Self {
        Summing {
            inner,
            hasher: crc32fast::Hasher::new(),
            bytes: 0,
        }
    }
}

impl std::io::Write for Summing {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.hasher.update(&buf[..n]);
        self.bytes += n as u64;
        Ok(n)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// An output Parquet file being written under a temporary name.
pub(crate) struct OutputFile {
    writer: ArrowWriter<Summing>,
    rows: u64,
    /// For an object output: the object, and the local staging file uploaded whole
    /// once complete.
    upload: Option<(crate::store::Remote, PathBuf)>,
}

/// A local staging path for an object output (in the system's temporary folder).
fn staging_path() -> Result<PathBuf> {
    use std::sync::atomic::{AtomicU64, Ordering};
    static NEXT: AtomicU64 = AtomicU64::new(0);
    let dir = std::env::temp_dir().join("kernlake-upload");
    std::fs::create_dir_all(&dir).map_err(|e| Error::io(&dir, e))?;
    crate::atomic::remove_stale_temps(&dir)?;
    let n = NEXT.fetch_add(1, Ordering::SeqCst);
    Ok(dir.join(format!("{}-{n}.parquet", std::process::id())))
}

impl OutputFile {
    /// Starts `path` (creating its folder) with `schema`; row groups hold at most
    /// `row_group_rows` rows so memory stays bounded.
    pub(crate) fn create(
        path: &Path,
        schema: arrow_schema::SchemaRef,
        row_group_rows: usize,
    ) -> Result<OutputFile> {
        let upload = match crate::store::locate(path)? {
            crate::store::Location::Remote(r) => Some((r, staging_path()?)),
            crate::store::Location::Local(_) => None,
        };
        let local = match &upload {
            Some((_, staging)) => staging.as_path(),
            None => path,
        };
        if let Some(dir) = local.parent().filter(|d| !d.as_os_str().is_empty()) {
            create_dir_durable(dir)?;
        }
        let atomic = Summing::new(AtomicFile::create(local)?);
        let props = WriterProperties::builder()
            .set_compression(Compression::SNAPPY)
            .set_max_row_group_row_count(Some(row_group_rows.max(1)))
            .build();
        let writer =
            ArrowWriter::try_new(atomic, schema, Some(props)).map_err(|e| write_error(path, e))?;
        Ok(OutputFile {
            writer,
            rows: 0,
            upload,
        })
    }

    /// Appends one batch.
    pub(crate) fn write(&mut self, batch: &arrow_array::RecordBatch, path: &Path) -> Result<()> {
        self.writer.write(batch).map_err(|e| write_error(path, e))?;
        self.rows += batch.num_rows() as u64;
        Ok(())
    }

    /// Writes the stamp (with the row count) and the footer, then renames the file onto
    /// its final name. Returns the rows written.
    pub(crate) fn commit(mut self, mut stamp: Stamp, path: &Path) -> Result<u64> {
        stamp.output_rows = self.rows;
        // Every row group goes out first, so the bytes so far are all but the footer.
        self.writer.flush().map_err(|e| write_error(path, e))?;
        let sum = self.writer.inner();
        stamp.data_bytes = sum.bytes;
        stamp.data_crc32 = format!("{:08x}", sum.hasher.clone().finalize());
        let json = serde_json::to_string(&stamp).expect("a stamp encodes as JSON");
        self.writer
            .append_key_value_metadata(KeyValue::new(STAMP_KEY.to_string(), json));
        let sum = self.writer.into_inner().map_err(|e| write_error(path, e))?;
        sum.inner.commit()?;
        if let Some((remote, staging)) = &self.upload {
            let sent = crate::store::io::upload_file(staging, remote);
            let _ = std::fs::remove_file(staging);
            sent?;
        }
        Ok(self.rows)
    }
}

fn write_error(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::File {
        path: path.to_path_buf(),
        message: format!("could not be written as Parquet ({e})"),
    }
}

/// An absolute, normalised form of `path` that need not exist yet: the nearest existing
/// ancestor is canonicalised (symbolic links resolved) and the rest appended.
pub(crate) fn absolute(path: &Path) -> Result<PathBuf> {
    let abs = std::path::absolute(path).map_err(|e| Error::io(path, e))?;
    let mut rest = Vec::new();
    let mut cur = abs.as_path();
    loop {
        if let Ok(c) = cur.canonicalize() {
            let mut out = c;
            for part in rest.iter().rev() {
                out.push(part);
            }
            return Ok(out);
        }
        match (cur.parent(), cur.file_name()) {
            (Some(p), Some(name)) => {
                rest.push(name.to_os_string());
                cur = p;
            }
            _ => return Ok(abs),
        }
    }
}

/// The deepest folder holding every one of `files` (absolute paths).
pub(crate) fn common_root(files: &[PathBuf]) -> PathBuf {
    let mut root: Vec<Component> = match files.first().and_then(|f| f.parent()) {
        Some(p) => p.components().collect(),
        None => return PathBuf::from("/"),
    };
    for f in &files[1..] {
        let parent: Vec<Component> = f
            .parent()
            .map(|p| p.components().collect())
            .unwrap_or_default();
        let same = root.iter().zip(&parent).take_while(|(a, b)| a == b).count();
        root.truncate(same);
    }
    root.iter().collect()
}

/// Output paths for `inputs` under `out_dir`: each input's path relative to the inputs'
/// common folder, below `out_dir`, with the extension of CSV inputs changed to
/// `.parquet` (outputs are always Parquet). Creates `out_dir`.
///
/// Errors: `out_dir` inside that common folder (one sentence naming both); two inputs
/// that would share one output (`a.csv` beside `a.parquet`); `out_dir` not creatable or
/// not writable (naming it).
pub(crate) fn plan_outputs(inputs: &[PathBuf], out_dir: &Path) -> Result<Vec<PathBuf>> {
    let mut abs = Vec::with_capacity(inputs.len());
    for p in inputs {
        if crate::store::is_remote(p) {
            abs.push(p.clone());
        } else {
            abs.push(p.canonicalize().map_err(|e| Error::io(p, e))?);
        }
    }
    let root = common_root(&abs);
    let remote_out = crate::store::is_remote(out_dir);
    let out = if remote_out {
        // Multipart uploads a killed run left open under the output prefix.
        crate::store::io::abort_left_uploads(out_dir)?;
        out_dir.to_path_buf()
    } else {
        absolute(out_dir)?
    };
    if out.starts_with(&root) {
        return Err(Error::invalid(
            "output folder",
            format!(
                "{} lies inside the input folder {}; choose a folder outside it",
                out_dir.display(),
                root.display()
            ),
        ));
    }
    let outputs: Vec<PathBuf> = abs
        .iter()
        .map(|p| {
            let rel = p.strip_prefix(&root).expect("root holds every input");
            let target = out_dir.join(rel);
            if Format::from_path(p) == Some(Format::Csv) {
                target.with_extension("parquet")
            } else {
                target
            }
        })
        .collect();
    let mut seen: HashMap<&Path, usize> = HashMap::with_capacity(outputs.len());
    for (i, o) in outputs.iter().enumerate() {
        if let Some(&first) = seen.get(o.as_path()) {
            return Err(Error::File {
                path: inputs[i].clone(),
                message: format!(
                    "would be scored into {}, the output of {} too; score them into different folders",
                    o.display(),
                    inputs[first].display()
                ),
            });
        }
        seen.insert(o, i);
    }
    if remote_out {
        // Reach the bucket before any data is read: a missing bucket or refused
        // credentials fail here with one sentence naming the output URL.
        if let crate::store::Location::Remote(r) = crate::store::locate(out_dir)? {
            crate::store::list::objects_under(&r, |_| false)?;
        }
        return Ok(outputs);
    }
    create_dir_durable(out_dir)?;
    // Probe that the folder takes files (create then drop a temporary file).
    drop(AtomicFile::create(&out_dir.join("write-probe"))?);
    Ok(outputs)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn common_root_of_paths() {
        // common practice: the deepest shared folder
        let v = vec![
            PathBuf::from("/a/b/site=1/x.parquet"),
            PathBuf::from("/a/b/site=2/m=3/y.parquet"),
        ];
        assert_eq!(common_root(&v), PathBuf::from("/a/b"));
        assert_eq!(common_root(&v[..1]), PathBuf::from("/a/b/site=1"));
    }
}
