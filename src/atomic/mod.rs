//! Atomic file output: a file is written under a temporary name in its destination's
//! folder and renamed onto its final name only once it is complete, so a crash, a full
//! disk or an error part-way never leaves a partial file under the final name.
//!
//! The temporary name is `.<final name>.part-<pid>-<random>`: hidden on Unix, in the same
//! folder (so the rename stays on one file system and is atomic there), and recognisable
//! by [`is_temp_name`] so that folder scanners skip such files.
//!
//! One cleanup rule for every output: creating a temporary file for a final name first
//! removes the temporary files of that same name left by processes that no longer run
//! (a killed `fit`, `tune`, `audit`, `demo` or `score`); `score` also sweeps its whole
//! output folder with [`remove_stale_temps`]. Folders made for outputs are created by
//! [`create_dir_durable`], which fsyncs each new folder's parent so that the folder
//! survives a power cut together with the files committed into it (common practice in
//! databases: a new directory entry is durable only once its parent is synced).

use std::ffi::OsString;
use std::fs::{File, OpenOptions};
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{Error, Result};

mod folders;
use folders::remove_stale_siblings;
pub use folders::{create_dir_durable, remove_stale_temps};

/// The marker between the final name and the process id in a temporary name.
pub(crate) const PART_MARKER: &str = ".part-";

/// How many distinct temporary names to try before giving up.
const CREATE_ATTEMPTS: u32 = 16;

/// A file being written under a temporary name in the destination's folder
/// (`.<final name>.part-<pid>-<random>`); [`commit`](AtomicFile::commit) flushes, fsyncs
/// and renames it onto the final name (then fsyncs the folder); dropping it without
/// commit removes the temporary file and leaves the final name untouched.
#[derive(Debug)]
pub struct AtomicFile {
    /// The open temporary file; `None` once committed.
    file: Option<File>,
    /// Where the temporary file lives.
    temp_path: PathBuf,
    /// The name the file gets on commit.
    final_path: PathBuf,
}

impl AtomicFile {
    /// Creates a new temporary file beside `final_path`, ready for writing.
    ///
    /// # Errors
    /// [`Error::Io`] naming the temporary path if the folder does not exist or is not
    /// writable, and [`Error::File`] if `final_path` has no file name.
    pub fn create(final_path: &Path) -> Result<AtomicFile> {
        let name = final_path.file_name().ok_or_else(|| Error::File {
            path: final_path.to_path_buf(),
            message: "an output path must end in a file name".to_string(),
        })?;
        if final_path.is_dir() {
            return Err(Error::File {
                path: final_path.to_path_buf(),
                message: "is a folder; give the output a file name".to_string(),
            });
        }
        let folder = parent_folder(final_path);
        remove_stale_siblings(&folder, name);
        let mut last_err = None;
        for _ in 0..CREATE_ATTEMPTS {
            let temp_path = folder.join(temp_name(name));
            match OpenOptions::new()
                .write(true)
                .create_new(true)
                .open(&temp_path)
            {
                Ok(file) => {
                    return Ok(AtomicFile {
                        file: Some(file),
                        temp_path,
                        final_path: final_path.to_path_buf(),
                    })
                }
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => last_err = Some(e),
                Err(e) => return Err(output_error(final_path, &folder, e)),
            }
        }
        let e = last_err.expect("at least one attempt was made");
        Err(output_error(final_path, &folder, e))
    }

    /// The open temporary file, for writing.
    pub fn file(&mut self) -> &mut File {
        self.file
            .as_mut()
            .expect("an AtomicFile is usable until it is committed")
    }

    /// The temporary path being written (useful in messages and tests).
    pub fn temp_path(&self) -> &Path {
        &self.temp_path
    }

    /// The final path the file will have after [`commit`](AtomicFile::commit).
    pub fn final_path(&self) -> &Path {
        &self.final_path
    }

    /// Flushes and fsyncs the temporary file, renames it onto the final name (replacing
    /// any file there) and fsyncs the folder so the rename itself is durable.
    ///
    /// # Errors
    /// [`Error::Io`] naming the path concerned; the temporary file is removed on failure.
    pub fn commit(mut self) -> Result<()> {
        let mut file = self.file.take().expect("commit is called once");
        let folder = parent_folder(&self.final_path);
        file.flush()
            .and_then(|()| file.sync_all())
            .map_err(|e| output_error(&self.final_path, &folder, e))?;
        drop(file);
        std::fs::rename(&self.temp_path, &self.final_path)
            .map_err(|e| output_error(&self.final_path, &folder, e))?;
        // The temporary name no longer exists: nothing for Drop to remove.
        self.temp_path = PathBuf::new();
        sync_folder(&parent_folder(&self.final_path))
    }
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.file().write(buf)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        self.file().flush()
    }
}

impl Drop for AtomicFile {
    fn drop(&mut self) {
        self.file.take();
        if !self.temp_path.as_os_str().is_empty() {
            // Best effort: a failure here leaves a temporary file that is_temp_name
            // recognises, which a later cleanup can remove.
            let _ = std::fs::remove_file(&self.temp_path);
        }
    }
}

/// Writes `final_path` atomically: creates an [`AtomicFile`], lets `f` write into it and
/// commits it if `f` succeeds. If `f` fails, the temporary file is removed, the final name
/// is left as it was, and `f`'s error is returned.
///
/// # Errors
/// Those of [`AtomicFile::create`], of `f`, and of [`AtomicFile::commit`].
pub fn write_atomic(final_path: &Path, f: impl FnOnce(&mut File) -> Result<()>) -> Result<()> {
    let mut out = AtomicFile::create(final_path)?;
    f(out.file())?;
    out.commit()
}

/// True for names of our temporary files, `.<name>.part-<pid>-<hex>` (so scanners skip
/// them and a cleanup can remove stale ones).
pub fn is_temp_name(name: &str) -> bool {
    let Some(rest) = name.strip_prefix('.') else {
        return false;
    };
    let Some(at) = rest.rfind(PART_MARKER) else {
        return false;
    };
    if at == 0 {
        return false;
    }
    let suffix = &rest[at + PART_MARKER.len()..];
    let Some((pid, random)) = suffix.split_once('-') else {
        return false;
    };
    !pid.is_empty()
        && pid.bytes().all(|b| b.is_ascii_digit())
        && !random.is_empty()
        && random.bytes().all(|b| b.is_ascii_hexdigit())
}

/// The error for an output that cannot be written, naming the user's path and the real
/// problem (never the temporary name).
pub(crate) fn output_error(final_path: &Path, folder: &Path, e: std::io::Error) -> Error {
    use std::io::ErrorKind as K;
    let message = match e.kind() {
        K::NotFound => format!(
            "cannot be written because the folder {} does not exist",
            folder.display()
        ),
        K::PermissionDenied | K::ReadOnlyFilesystem => format!(
            "cannot be written: no permission to create files in {}",
            folder.display()
        ),
        K::NotADirectory => format!(
            "cannot be written because {} (or a folder above it) is a file, not a folder",
            folder.display()
        ),
        K::IsADirectory => "is a folder; give the output a file name".to_string(),
        K::StorageFull => "cannot be written: the disk is full".to_string(),
        K::AlreadyExists => format!(
            "cannot be written: no fresh temporary name was free in {}",
            folder.display()
        ),
        _ => "cannot be written".to_string(),
    };
    Error::Output {
        path: final_path.to_path_buf(),
        message,
        source: e,
    }
}

/// Checks before any work that `final_path` can be written: its folder exists and takes
/// files, and it is not a folder itself (a temporary file is created and removed).
///
/// # Errors
/// Those of [`AtomicFile::create`], naming `final_path`.
#[cfg_attr(not(feature = "cli"), allow(dead_code))] // only the CLI checks its outputs early
pub fn check_writable(final_path: &Path) -> Result<()> {
    AtomicFile::create(final_path).map(drop)
}

/// The folder that holds `path` (the current folder for a bare file name).
pub(crate) fn parent_folder(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// A fresh temporary name for the final file name `name`.
fn temp_name(name: &std::ffi::OsStr) -> OsString {
    static COUNTER: AtomicU64 = AtomicU64::new(0);
    let count = COUNTER.fetch_add(1, Ordering::Relaxed);
    let nanos = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_nanos() as u64)
        .unwrap_or(0);
    // SplitMix64 finaliser (Steele, Lea & Flood, OOPSLA 2014) to spread the bits.
    let mut z = nanos ^ count.wrapping_mul(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^= z >> 31;
    let mut out = OsString::from(".");
    out.push(name);
    out.push(format!("{PART_MARKER}{}-{z:016x}", std::process::id()));
    out
}

/// Fsyncs a folder so that a rename inside it survives a power cut (Unix only; other
/// systems do not allow opening a folder as a file and make renames durable themselves).
pub(crate) fn sync_folder(folder: &Path) -> Result<()> {
    #[cfg(unix)]
    {
        let dir = File::open(folder).map_err(|e| Error::io(folder, e))?;
        dir.sync_all().map_err(|e| Error::io(folder, e))?;
    }
    #[cfg(not(unix))]
    let _ = folder;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn temp_names_are_recognised() {
        // common practice: hidden, same folder, unique suffix
        let n = temp_name(std::ffi::OsStr::new("model.klm"));
        let n = n.to_str().unwrap();
        assert!(n.starts_with(".model.klm.part-"), "{n}");
        assert!(is_temp_name(n), "{n}");
        for plain in [
            "model.klm",
            ".hidden",
            ".part-1-ab",
            ".x.part-",
            ".x.part-12",
            ".x.part-12-",
            ".x.part-1a-ff",
            ".x.part-12-zz",
            "x.part-12-ff",
        ] {
            assert!(!is_temp_name(plain), "{plain}");
        }
    }

    #[test]
    fn commit_and_drop() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("out.bin");
        std::fs::write(&target, b"old").unwrap();
        {
            let mut f = AtomicFile::create(&target).unwrap();
            f.write_all(b"half").unwrap();
            assert!(f.temp_path().exists());
        }
        assert_eq!(std::fs::read(&target).unwrap(), b"old");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
        write_atomic(&target, |f| {
            f.write_all(b"new").map_err(|e| Error::io("x", e))
        })
        .unwrap();
        assert_eq!(std::fs::read(&target).unwrap(), b"new");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
        let err = write_atomic(&target, |_| Err(Error::NoRows("stop".into())));
        assert!(matches!(err, Err(Error::NoRows(_))));
        assert_eq!(std::fs::read(&target).unwrap(), b"new");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn missing_folder_is_an_io_error() {
        let dir = tempfile::tempdir().unwrap();
        let target = dir.path().join("absent").join("out.bin");
        match AtomicFile::create(&target) {
            Err(e @ Error::Output { .. }) => {
                let msg = e.to_string();
                assert!(msg.starts_with(&target.display().to_string()), "{msg}");
                assert!(
                    msg.contains("does not exist") && !msg.contains(".part-"),
                    "{msg}"
                );
            }
            other => panic!("expected an Output error, got {other:?}"),
        }
    }
}
