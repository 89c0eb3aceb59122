//! Whole-object and streamed reads, object identity, and uploads that appear under
//! their final key only when complete.

use std::collections::VecDeque;
use std::io::Read;
use std::path::Path;

use bytes::Bytes;
use futures_util::stream::{BoxStream, StreamExt};
use object_store::multipart::PartId;
use object_store::path::Path as ObjectPath;
use object_store::{MultipartId, ObjectMeta, ObjectStoreExt, PutPayload};

use super::{block_on, handle, locate, store_error, Location, Remote};
use crate::error::{Error, Result};

/// Objects larger than this are uploaded in parts of this size (S3's smallest part is
/// 5 MiB); `KERNLAKE_STORE_PART_BYTES` overrides it (the tests use small parts against a
/// server told to accept them).
fn part_bytes() -> usize {
    std::env::var("KERNLAKE_STORE_PART_BYTES")
        .ok()
        .and_then(|v| v.parse::<usize>().ok())
        .filter(|&n| n > 0)
        .unwrap_or(16 << 20)
}

/// Parts uploaded at once.
const PARTS_IN_FLIGHT: usize = 2;

/// Size, entity tag and version of an object.
pub(crate) fn head(remote: &Remote) -> Result<ObjectMeta> {
    block_on(remote.store.head(&remote.key)).map_err(|e| store_error(&remote.url, e))
}

/// Every byte of the file or object at `path`.
pub(crate) fn read_all(path: &Path) -> Result<Vec<u8>> {
    match locate(path)? {
        Location::Local(p) => std::fs::read(&p).map_err(|e| Error::io(&p, e)),
        Location::Remote(r) => block_on(async {
            let got = r.store.get(&r.key).await?;
            got.bytes().await
        })
        .map(|b| b.to_vec())
        .map_err(|e| store_error(&r.url, e)),
    }
}

/// A sequential reader of the file or object at `path`; an object is streamed (memory
/// stays at one network chunk), for CSV.
pub(crate) fn open_read(path: &Path) -> Result<Box<dyn Read + Send>> {
    match locate(path)? {
        Location::Local(p) => {
            let f = std::fs::File::open(&p).map_err(|e| Error::io(&p, e))?;
            Ok(Box::new(f))
        }
        Location::Remote(r) => {
            let got = block_on(r.store.get(&r.key)).map_err(|e| store_error(&r.url, e))?;
            Ok(Box::new(StreamRead {
                stream: got.into_stream(),
                chunk: Bytes::new(),
                url: r.url,
            }))
        }
    }
}

/// A blocking [`Read`] over an object's byte stream.
struct StreamRead {
    stream: BoxStream<'static, object_store::Result<Bytes>>,
    chunk: Bytes,
    url: String,
}

impl Read for StreamRead {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        while self.chunk.is_empty() {
            match block_on(self.stream.next()) {
                None => return Ok(0),
                Some(Ok(b)) => self.chunk = b,
                Some(Err(e)) => {
                    return Err(std::io::Error::other(store_error(&self.url, e)));
                }
            }
        }
        let n = buf.len().min(self.chunk.len());
        buf[..n].copy_from_slice(&self.chunk[..n]);
        let _ = self.chunk.split_to(n);
        Ok(n)
    }
}

/// Writes `bytes` to the file or object at `path` whole: a local file through
/// [`crate::atomic::AtomicFile`], an object by one request (S3 shows an object only
/// when its upload is complete).
pub(crate) fn write_all(path: &Path, bytes: &[u8]) -> Result<()> {
    match locate(path)? {
        Location::Local(p) => {
            use std::io::Write;
            let mut f = crate::atomic::AtomicFile::create(&p)?;
            f.write_all(bytes).map_err(|e| Error::io(&p, e))?;
            f.commit()
        }
        Location::Remote(r) => {
            let payload = PutPayload::from(Bytes::copy_from_slice(bytes));
            block_on(r.store.put(&r.key, payload))
                .map(|_| ())
                .map_err(|e| store_error(&r.url, e))
        }
    }
}

/// Uploads the local file `from` to `to`: one request when small, otherwise a multipart
/// upload (parts of 16 MiB by default, two in flight) that is completed only after every
/// part went up, and aborted on any failure, so the final key never holds a partial
/// object. While a multipart upload is open, a marker object beside the key
/// (`_kernlake-upload.<name>`, hidden from listings) holds its id, so that a run killed
/// mid-upload leaves something the next run can abort ([`abort_left_uploads`]).
pub(crate) fn upload_file(from: &Path, to: &Remote) -> Result<()> {
    let size = std::fs::metadata(from)
        .map_err(|e| Error::io(from, e))?
        .len();
    let part = part_bytes();
    if size <= part as u64 {
        let bytes = std::fs::read(from).map_err(|e| Error::io(from, e))?;
        return block_on(to.store.put(&to.key, PutPayload::from(bytes)))
            .map(|_| ())
            .map_err(|e| store_error(&to.url, e));
    }
    let marker = marker_of(&to.key)
        .ok_or_else(|| Error::invalid("output", format!("'{}' names no object", to.url)))?;
    abort_recorded(to, &marker)?;
    let id =
        block_on(to.multipart.create_multipart(&to.key)).map_err(|e| store_error(&to.url, e))?;
    let recorded = block_on(
        to.store
            .put(&marker, PutPayload::from(id.clone().into_bytes())),
    )
    .map_err(|e| store_error(&to.url_of(&marker), e));
    let sent = recorded
        .and_then(|_| send_parts(from, to, &id, part))
        .and_then(|parts| {
            block_on(to.multipart.complete_multipart(&to.key, &id, parts))
                .map_err(|e| store_error(&to.url, e))
        });
    match sent {
        Ok(_) => {
            // A marker left by a failure here names a completed upload; the next run's
            // sweep finds nothing to abort and removes it.
            let _ = block_on(to.store.delete(&marker));
            Ok(())
        }
        Err(e) => {
            if block_on(to.multipart.abort_multipart(&to.key, &id)).is_ok() {
                let _ = block_on(to.store.delete(&marker));
            }
            Err(e)
        }
    }
}

/// The marker key of an upload to `key`: `_kernlake-upload.<name>` in the same folder.
fn marker_of(key: &ObjectPath) -> Option<ObjectPath> {
    let name = key.filename()?;
    let mut parts: Vec<_> = key.parts().collect();
    parts.pop();
    parts.push(format!("{MARKER_PREFIX}{name}").into());
    Some(ObjectPath::from_iter(parts))
}

/// The start of an upload marker's name.
const MARKER_PREFIX: &str = "_kernlake-upload.";

/// Sends `from` as the parts of upload `id`, at most [`PARTS_IN_FLIGHT`] at once, and
/// returns the parts' receipts in order.
fn send_parts(from: &Path, to: &Remote, id: &MultipartId, part: usize) -> Result<Vec<PartId>> {
    let mut file = std::fs::File::open(from).map_err(|e| Error::io(from, e))?;
    let mut pending: VecDeque<tokio::task::JoinHandle<object_store::Result<PartId>>> =
        VecDeque::new();
    let mut done = Vec::new();
    let joined = |h: tokio::task::JoinHandle<object_store::Result<PartId>>| -> Result<PartId> {
        match block_on(h) {
            Ok(r) => r.map_err(|e| store_error(&to.url, e)),
            Err(e) => Err(store_error(
                &to.url,
                object_store::Error::Generic {
                    store: "S3",
                    source: Box::new(e),
                },
            )),
        }
    };
    let result = (|| {
        for index in 0.. {
            let buf = read_part(&mut file, part).map_err(|e| Error::io(from, e))?;
            if buf.is_empty() {
                break;
            }
            if pending.len() >= PARTS_IN_FLIGHT {
                done.push(joined(pending.pop_front().expect("parts are in flight"))?);
            }
            let (store, key, id) = (to.multipart.clone(), to.key.clone(), id.clone());
            pending.push_back(handle().spawn(async move {
                store
                    .put_part(&key, &id, index, PutPayload::from(buf))
                    .await
            }));
        }
        while let Some(h) = pending.pop_front() {
            done.push(joined(h)?);
        }
        Ok(())
    })();
    for h in pending {
        h.abort();
    }
    result.map(|()| done)
}

/// Up to `len` bytes of `file` (fewer only at its end).
fn read_part(file: &mut std::fs::File, len: usize) -> std::io::Result<Vec<u8>> {
    let mut buf = Vec::with_capacity(len);
    file.take(len as u64).read_to_end(&mut buf)?;
    Ok(buf)
}

/// Aborts the upload a marker records, if any, and removes the marker.
fn abort_recorded(remote: &Remote, marker: &ObjectPath) -> Result<()> {
    let id = match block_on(async { remote.store.get(marker).await?.bytes().await }) {
        Ok(bytes) => String::from_utf8_lossy(&bytes).into_owned(),
        Err(object_store::Error::NotFound { .. }) => return Ok(()),
        Err(e) => return Err(store_error(&remote.url_of(marker), e)),
    };
    let name = marker.filename().expect("a marker has a name");
    let key = ObjectPath::from_iter(
        marker
            .parts()
            .take(marker.parts().count() - 1)
            .chain(std::iter::once(name[MARKER_PREFIX.len()..].into())),
    );
    match block_on(remote.multipart.abort_multipart(&key, &id)) {
        Ok(()) => {}
        // Already completed or aborted: nothing is open.
        Err(object_store::Error::NotFound { .. }) => {}
        Err(e) if format!("{e:?}").contains("NoSuchUpload") => {}
        Err(e) => return Err(store_error(&remote.url_of(&key), e)),
    }
    block_on(remote.store.delete(marker)).map_err(|e| store_error(&remote.url_of(marker), e))
}

/// Aborts every multipart upload that a killed run left open below the output prefix
/// `out` (found through their markers), so that a rerun leaves none behind.
pub(crate) fn abort_left_uploads(out: &Path) -> Result<()> {
    let Location::Remote(remote) = locate(out)? else {
        return Ok(());
    };
    for key in super::list::list_keys(&remote, &remote.key)? {
        if key.filename().is_some_and(|n| n.starts_with(MARKER_PREFIX)) {
            abort_recorded(&remote, &key)?;
        }
    }
    Ok(())
}
