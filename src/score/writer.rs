//! Output files: where each goes (mirroring the inputs' folders), the stamp that proves
//! an output complete, the atomic Parquet write, and removal of stale temporary files.

use std::collections::HashMap;
use std::fs::File;
use std::path::{Component, Path, PathBuf};

use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::metadata::KeyValue;
use parquet::file::properties::WriterProperties;
use serde::{Deserialize, Serialize};

use crate::atomic::{create_dir_durable, AtomicFile};
use crate::data::Format;
use crate::error::{Error, Result};

/// Key of the stamp in an output file's Parquet key-value metadata.
pub const STAMP_KEY: &str = "kernlake.score";

/// Version of the stamp's layout (2: with the checksum of the data pages).
const STAMP_VERSION: u32 = 2;

/// What an output file records about how it was made; a rerun skips an output whose
/// stamp matches the input file, model and settings at hand and whose row count matches.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub(crate) struct Stamp {
    /// Layout version of the stamp.
    pub version: u32,
    /// Input file size in bytes.
    pub input_bytes: u64,
    /// Input modification time, nanoseconds since the Unix epoch.
    pub input_modified_ns: u64,
    /// An object input's entity tag and version (`etag/version`); empty for a file.
    #[serde(default)]
    pub input_tag: String,
    /// Rows in the input file (from its footer).
    pub input_rows: u64,
    /// CRC-32 of the model's encoded bytes, 8 hex digits.
    pub model_crc32: String,
    /// The output-shaping settings (prediction name, kept columns, policies).
    pub settings: String,
    /// Rows written; filled in when the output is complete.
    pub output_rows: u64,
    /// Bytes of the output before its footer (the magic and every row group); filled
    /// in when the output is complete.
    #[serde(default)]
    pub data_bytes: u64,
    /// CRC-32 of those bytes, 8 hex digits: a rerun reads them back and compares, so
    /// damaged data pages under an intact footer are rewritten, not trusted.
    #[serde(default)]
    pub data_crc32: String,
}

impl Stamp {
    /// The stamp expected for `input` (output rows not yet known, 0).
    pub(crate) fn for_input(
        input: &Path,
        rows: u64,
        model_crc32: &str,
        settings: &str,
    ) -> Result<Stamp> {
        let (bytes, modified, tag) = match crate::store::locate(input)? {
            crate::store::Location::Local(p) => {
                let meta = std::fs::metadata(&p).map_err(|e| Error::io(&p, e))?;
                let modified = meta
                    .modified()
                    .ok()
                    .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
                    .map(|d| d.as_nanos() as u64)
                    .unwrap_or(0);
                (meta.len(), modified, String::new())
            }
            crate::store::Location::Remote(r) => {
                let meta = crate::store::io::head(&r)?;
                let modified = meta.last_modified.timestamp_nanos_opt().unwrap_or(0) as u64;
                let tag = format!(
                    "{}/{}",
                    meta.e_tag.as_deref().unwrap_or(""),
                    meta.version.as_deref().unwrap_or("")
                );
                (meta.size, modified, tag)
            }
        };
        Ok(Stamp {
            version: STAMP_VERSION,
            input_bytes: bytes,
            input_modified_ns: modified,
            input_tag: tag,
            input_rows: rows,
            model_crc32: model_crc32.to_string(),
            settings: settings.to_string(),
            output_rows: 0,
            data_bytes: 0,
            data_crc32: String::new(),
        })
    }
}

/// The stamp of `output` when the output is complete: it exists, its Parquet footer
/// reads, its stamp matches `expected` (every field but the output row count and data
/// checksum, and the input row count only when `check_input_rows`: CSV inputs have no
/// row count before they are read, their size and modification time identify them), its
/// row count equals the stamped one, and the CRC-32 of its bytes before the footer
/// equals the stamped one (one sequential read of the output; the footer alone says
/// nothing about the pages it points to).
pub(crate) fn complete_stamp(
    output: &Path,
    expected: &Stamp,
    check_input_rows: bool,
) -> Option<Stamp> {
    let remote = crate::store::is_remote(output);
    let footer = crate::store::parquet::footer(output).ok()?;
    let meta = footer.meta.metadata().file_metadata();
    let stamp = meta
        .key_value_metadata()
        .and_then(|kv| kv.iter().find(|k| k.key == STAMP_KEY))
        .and_then(|k| k.value.as_deref())
        .and_then(|v| serde_json::from_str::<Stamp>(v).ok())?;
    let rows = u64::try_from(meta.num_rows()).unwrap_or(u64::MAX);
    let comparable = Stamp {
        output_rows: 0,
        data_bytes: 0,
        data_crc32: String::new(),
        input_rows: if check_input_rows {
            stamp.input_rows
        } else {
            expected.input_rows
        },
        ..stamp.clone()
    };
    if stamp.output_rows != rows || comparable != *expected {
        return None;
    }
    if remote {
        // An object appears only once its upload is complete (whole put or completed
        // multipart upload), so its footer stands for its pages.
        return Some(stamp);
    }
    (data_crc32(output, stamp.data_bytes).ok()? == stamp.data_crc32).then_some(stamp)
}

/// CRC-32 of the first `len` bytes of `path`, 8 hex digits.
fn data_crc32(path: &Path, len: u64) -> std::io::Result<String> {
    use std::io::Read;
    let mut hasher = crc32fast::Hasher::new();
    let mut file = File::open(path)?.take(len);
    let mut buf = vec![0u8; 1 << 16];
    let mut seen = 0u64;
    loop {
        let n = file.read(&mut buf)?;
        if n == 0 {
            break;
        }
        hasher.update(&buf[..n]);
        seen += n as u64;
    }
    if seen != len {
        return Err(std::io::ErrorKind::UnexpectedEof.into());
    }
    Ok(format!("{:08x}", hasher.finalize()))
}

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
