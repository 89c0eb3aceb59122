//! Output folders: durable creation, and removal of temporary files left by killed runs.

use std::path::Path;

use super::{is_temp_name, parent_folder, sync_folder, PART_MARKER};
use crate::error::{Error, Result};

/// Creates `dir` and any missing folders above it, fsyncing the parent of each folder it
/// creates (and the folder itself) so that new folders survive a power cut.
///
/// # Errors
/// [`Error::Output`] naming `dir` when a part of it exists as a file, or a folder
/// cannot be created or synced.
pub fn create_dir_durable(dir: &Path) -> Result<()> {
    if dir.is_dir() {
        return Ok(());
    }
    let mut missing = Vec::new();
    let mut cur = dir;
    loop {
        match std::fs::symlink_metadata(cur) {
            Ok(m) if m.is_dir() || cur.is_dir() => break,
            Ok(_) => {
                return Err(Error::Output {
                    path: dir.to_path_buf(),
                    message: format!(
                        "cannot be created as a folder because {} is a file",
                        cur.display()
                    ),
                    source: std::io::Error::from(std::io::ErrorKind::AlreadyExists),
                })
            }
            Err(_) => missing.push(cur),
        }
        match cur.parent() {
            Some(p) if !p.as_os_str().is_empty() => cur = p,
            _ => break,
        }
    }
    for new in missing.into_iter().rev() {
        match std::fs::create_dir(new) {
            Ok(()) => {}
            // another process made it meanwhile
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && new.is_dir() => continue,
            Err(e) => {
                return Err(Error::Output {
                    path: dir.to_path_buf(),
                    message: format!("the folder {} cannot be created", new.display()),
                    source: e,
                })
            }
        }
        let synced = sync_folder(new).and_then(|()| sync_folder(&parent_folder(new)));
        synced.map_err(|e| match e {
            Error::Io { path, source } => Error::Output {
                path: dir.to_path_buf(),
                message: format!("the new folder {} cannot be synced", path.display()),
                source,
            },
            other => other,
        })?;
    }
    Ok(())
}

/// Removes temporary files left under `dir` (recursively) by killed runs: names that
/// [`is_temp_name`] recognises whose process no longer runs. Returns how many were
/// removed.
///
/// # Errors
/// [`Error::Io`] when a folder cannot be listed or a stale file cannot be removed.
pub fn remove_stale_temps(dir: &Path) -> Result<usize> {
    let mut removed = 0;
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Ok(0);
    };
    for entry in entries {
        let entry = entry.map_err(|e| Error::io(dir, e))?;
        let path = entry.path();
        let kind = entry.file_type().map_err(|e| Error::io(&path, e))?;
        if kind.is_dir() {
            removed += remove_stale_temps(&path)?;
            continue;
        }
        let name = entry.file_name();
        let Some(name) = name.to_str() else { continue };
        if is_temp_name(name) && !owner_alive(name) {
            std::fs::remove_file(&path).map_err(|e| Error::io(&path, e))?;
            removed += 1;
        }
    }
    Ok(removed)
}

/// Best effort: removes the stale temporary files of the final name `name` in `folder`
/// (a failure leaves them for the next attempt).
pub(super) fn remove_stale_siblings(folder: &Path, name: &std::ffi::OsStr) {
    let Some(name) = name.to_str() else { return };
    let prefix = format!(".{name}{PART_MARKER}");
    let Ok(entries) = std::fs::read_dir(folder) else {
        return;
    };
    for entry in entries.flatten() {
        let file_name = entry.file_name();
        let Some(n) = file_name.to_str() else {
            continue;
        };
        if n.starts_with(&prefix) && is_temp_name(n) && !owner_alive(n) {
            let _ = std::fs::remove_file(entry.path());
        }
    }
}

/// Whether the process that named a temporary file still runs (Linux `/proc`; elsewhere
/// only our own process counts as alive).
fn owner_alive(temp_name: &str) -> bool {
    let pid = temp_name
        .rsplit_once(PART_MARKER)
        .and_then(|(_, s)| s.split_once('-'))
        .and_then(|(p, _)| p.parse::<u32>().ok());
    match pid {
        Some(p) if p == std::process::id() => true,
        Some(p) => Path::new("/proc/self").exists() && Path::new(&format!("/proc/{p}")).exists(),
        None => false,
    }
}
