//! Whole-object and streamed reads, object identity, and uploads that appear under
//! their final key only when complete.

use std::io::Read;
use std::path::Path;

use bytes::Bytes;
use futures_util::stream::{BoxStream, StreamExt};
use object_store::{ObjectMeta, ObjectStoreExt, PutPayload, WriteMultipart};

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
/// upload (parts of 16 MiB by default, two in flight) that is completed only after every part
/// went up, and aborted on any failure, so the final key never holds a partial object.
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
    let mut file = std::fs::File::open(from).map_err(|e| Error::io(from, e))?;
    let upload = block_on(to.store.put_multipart(&to.key)).map_err(|e| store_error(&to.url, e))?;
    let mut writer = WriteMultipart::new_with_chunk_size(upload, part);
    let mut buf = vec![0u8; 1 << 20];
    let step = loop {
        let n = match file.read(&mut buf) {
            Ok(n) => n,
            Err(e) => break Err(Error::io(from, e)),
        };
        if n == 0 {
            break Ok(());
        }
        if let Err(e) = block_on(writer.wait_for_capacity(PARTS_IN_FLIGHT)) {
            break Err(store_error(&to.url, e));
        }
        // `write` spawns part uploads on the current runtime: enter it.
        let _guard = handle().enter();
        writer.write(&buf[..n]);
    };
    match step {
        Ok(()) => block_on(writer.finish())
            .map(|_| ())
            .map_err(|e| store_error(&to.url, e)),
        Err(e) => {
            let _ = block_on(writer.abort());
            Err(e)
        }
    }
}
