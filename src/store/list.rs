//! Listing the data objects under a prefix or matching a glob pattern, with the same
//! rules as walking local folders: names starting with `.` or `_` are skipped at every
//! level below the named prefix, data files are recognised by their name.

use futures_util::stream::TryStreamExt;
use object_store::path::Path as ObjectPath;
use object_store::ObjectStoreExt;

use super::{block_on, store_error, Remote};
use crate::error::{Error, Result};

/// Whether a path component is hidden (temporary files, `_SUCCESS`, hidden folders).
fn hidden(part: &str) -> bool {
    part.starts_with('.') || part.starts_with('_')
}

/// Every object under `prefix` (recursively), as keys in listing order.
pub(crate) fn list_keys(remote: &Remote, prefix: &ObjectPath) -> Result<Vec<ObjectPath>> {
    let prefix = (!prefix.as_ref().is_empty()).then_some(prefix);
    block_on(
        remote
            .store
            .list(prefix)
            .map_ok(|m| m.location)
            .try_collect::<Vec<_>>(),
    )
    .map_err(|e| store_error(&remote.url, e))
}

/// The URLs of the data objects `remote` names, with `is_data` telling data names:
/// the object itself when it exists, otherwise every data object below it as a folder.
/// An empty result means the prefix holds no data object.
pub(crate) fn objects_under(
    remote: &Remote,
    is_data: impl Fn(&str) -> bool,
) -> Result<Vec<String>> {
    // An object named directly (a listing treats the key as a folder).
    if remote.key.filename().is_some_and(&is_data) {
        match block_on(remote.store.head(&remote.key)) {
            Ok(_) => return Ok(vec![remote.url.clone()]),
            Err(object_store::Error::NotFound { .. }) => {}
            Err(e) => return Err(store_error(&remote.url, e)),
        }
    }
    let keys = list_keys(remote, &remote.key)?;
    let depth = remote.key.parts().count();
    Ok(keys
        .iter()
        .filter(|k| {
            let parts: Vec<String> = k
                .parts()
                .skip(depth)
                .map(|p| p.as_ref().to_string())
                .collect();
            !parts.iter().any(|p| hidden(p)) && parts.last().is_some_and(|n| is_data(n))
        })
        .map(|k| remote.url_of(k))
        .collect())
}

/// The URLs of the data objects matching the glob pattern in `remote`'s key (`*`, `?`,
/// `[...]` within one level; a pattern matching a folder takes every data object below
/// it). The listing starts at the pattern's literal leading folders.
pub(crate) fn objects_matching(
    remote: &Remote,
    pattern: &str,
    is_data: impl Fn(&str) -> bool,
) -> Result<Vec<String>> {
    let parts: Vec<&str> = pattern.trim_end_matches('/').split('/').collect();
    let literal = parts
        .iter()
        .take_while(|p| !p.contains(['*', '?', '[']))
        .count();
    let glob = glob::Pattern::new(pattern.trim_end_matches('/')).map_err(|e| {
        Error::invalid(
            "inputs",
            format!("'{}' is not a valid pattern: {e}", remote.url),
        )
    })?;
    let options = glob::MatchOptions {
        case_sensitive: true,
        require_literal_separator: true,
        require_literal_leading_dot: true,
    };
    let prefix = ObjectPath::from_iter(parts[..literal].iter().copied());
    let keys = list_keys(remote, &prefix)?;
    let mut out = Vec::new();
    for k in keys {
        let all: Vec<String> = k.parts().map(|p| p.as_ref().to_string()).collect();
        // The key itself or a folder above it matches the pattern.
        let hit =
            (literal + 1..=all.len()).any(|n| glob.matches_with(&all[..n].join("/"), options));
        if !hit {
            continue;
        }
        let below = &all[literal..];
        if below.iter().any(|p| hidden(p)) || !is_data(&all[all.len() - 1]) {
            continue;
        }
        out.push(remote.url_of(&k));
    }
    Ok(out)
}
