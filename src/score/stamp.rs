//! The stamp that proves an output complete: what it was made from (input size, entity
//! tag or modification time, model checksum, settings) and a checksum of its data pages,
//! kept in the output's Parquet key-value metadata; a rerun skips an output whose stamp
//! still matches.

use std::fs::File;
use std::path::Path;

use serde::{Deserialize, Serialize};

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
