//! Object stores: where a path names an object (`s3://bucket/key`) rather than a local
//! file, and the small asynchronous runtime that talks to the store.
//!
//! The rest of the library stays synchronous: every call here blocks on a process-wide
//! tokio runtime of two worker threads that this module owns (`block_on`); Parquet
//! reading spawns its range requests there so that decoding overlaps the network
//! (`parquet`). Object keys travel through the library as `PathBuf`s holding the URL
//! text (`s3://bucket/a=1/x.parquet`), so partition folders, file names and messages
//! work as for local paths; `locate` tells the two apart wherever bytes are read or
//! written.
//!
//! S3 (and S3-compatible stores) are configured from the standard environment variables
//! read by `object_store`'s `AmazonS3Builder::from_env`: `AWS_ACCESS_KEY_ID`,
//! `AWS_SECRET_ACCESS_KEY`, `AWS_SESSION_TOKEN`, `AWS_REGION`, `AWS_ENDPOINT_URL`,
//! `AWS_ALLOW_HTTP`, and `AWS_SKIP_SIGNATURE=true` for anonymous access to a public
//! bucket. Secrets are never part of a message: errors name the URL and the reason.
//! Transient failures (throttling, 5xx, timeouts, dropped connections) are retried with
//! exponential backoff (`retry_config`).

mod errors;
pub(crate) mod io;
pub(crate) mod list;
pub(crate) mod parquet;

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex, OnceLock};
use std::time::Duration;

use object_store::multipart::MultipartStore;
use object_store::path::Path as ObjectPath;
use object_store::{BackoffConfig, ObjectStore, RetryConfig};

use crate::error::{Error, Result};
pub(crate) use errors::store_error;

/// Where a path points: a local file or an object in a store.
pub(crate) enum Location {
    /// A local file (plain paths and `file://` URLs).
    Local(PathBuf),
    /// An object (or prefix) in a store.
    Remote(Remote),
}

/// An object or prefix in a store, with the client that reaches it.
#[derive(Clone)]
pub(crate) struct Remote {
    /// The URL as the user wrote it (for messages).
    pub url: String,
    /// `scheme://bucket`, the prefix of every URL in the same store.
    pub root: String,
    /// The key (or key prefix) inside the bucket.
    pub key: ObjectPath,
    /// The client.
    pub store: Arc<dyn ObjectStore>,
    /// The same client's multipart calls (uploads whose id is recorded, so that a later
    /// run can abort what a killed one left open).
    pub multipart: Arc<dyn MultipartStore>,
}

impl Remote {
    /// The URL of another key in the same bucket.
    pub(crate) fn url_of(&self, key: &ObjectPath) -> String {
        format!("{}/{}", self.root, key)
    }
}

/// Whether `s` is a URL (`scheme://…`) rather than a local path.
pub fn is_url(s: &str) -> bool {
    match s.split_once("://") {
        Some((scheme, _)) => {
            !scheme.is_empty()
                && scheme
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || c == '+' || c == '-' || c == '.')
        }
        None => false,
    }
}

/// Whether `path` holds an object-store URL (not a local file or `file://`).
pub fn is_remote(path: &Path) -> bool {
    path.to_str()
        .is_some_and(|s| is_url(s) && !s.starts_with("file://"))
}

/// Where `path` points; builds (once per bucket) the client of a store.
///
/// Errors: a scheme this build does not read; an `s3://` URL without a bucket; a store
/// whose configuration from the environment is invalid.
pub(crate) fn locate(path: &Path) -> Result<Location> {
    let Some(text) = path.to_str().filter(|s| is_url(s)) else {
        return Ok(Location::Local(path.to_path_buf()));
    };
    let (scheme, rest) = text
        .split_once("://")
        .expect("is_url checked the separator");
    match scheme.to_ascii_lowercase().as_str() {
        "file" => Ok(Location::Local(PathBuf::from(rest))),
        "s3" | "s3a" => {
            let (bucket, key) = rest.split_once('/').unwrap_or((rest, ""));
            if bucket.is_empty() {
                return Err(Error::invalid(
                    "location",
                    format!("'{text}' names no bucket (write s3://bucket/prefix/)"),
                ));
            }
            let key = ObjectPath::parse(key.trim_end_matches('/')).map_err(|e| {
                Error::invalid("location", format!("'{text}' is not a valid object key ({e})"))
            })?;
            let (store, multipart) = s3_client(bucket, text)?;
            Ok(Location::Remote(Remote {
                url: text.to_string(),
                root: format!("{scheme}://{bucket}"),
                key,
                store,
                multipart,
            }))
        }
        other => Err(Error::invalid(
            "location",
            format!(
                "'{text}' uses the {other}:// scheme, which this build does not read (s3:// and file:// URLs and local paths are)"
            ),
        )),
    }
}

/// How requests are retried: exponential backoff from 100 ms up to 15 s, at most 10
/// retries within 3 minutes (transient failures only: throttling, 5xx, timeouts,
/// dropped connections; a refused or missing object fails at once).
pub(crate) fn retry_config() -> RetryConfig {
    let seconds = |name: &str, default: u64| {
        std::env::var(name)
            .ok()
            .and_then(|v| v.parse::<u64>().ok())
            .unwrap_or(default)
    };
    RetryConfig {
        backoff: BackoffConfig {
            init_backoff: Duration::from_millis(100),
            max_backoff: Duration::from_secs(15),
            base: 2.0,
        },
        max_retries: seconds("KERNLAKE_STORE_RETRIES", 10) as usize,
        retry_timeout: Duration::from_secs(seconds("KERNLAKE_STORE_RETRY_SECONDS", 180)),
    }
}

/// A store's client, as its object and its multipart interface.
type Client = (Arc<dyn ObjectStore>, Arc<dyn MultipartStore>);

/// The S3 client of `bucket`, built once per bucket from the environment.
fn s3_client(bucket: &str, url: &str) -> Result<Client> {
    static CLIENTS: OnceLock<Mutex<HashMap<String, Client>>> = OnceLock::new();
    let mut clients = CLIENTS
        .get_or_init(Default::default)
        .lock()
        .unwrap_or_else(|p| p.into_inner());
    if let Some(c) = clients.get(bucket) {
        return Ok(c.clone());
    }
    let client = object_store::aws::AmazonS3Builder::from_env()
        .with_bucket_name(bucket)
        .with_retry(retry_config())
        .build()
        .map_err(|e| store_error(url, e))?;
    let client = Arc::new(client);
    let client: Client = (client.clone(), client);
    clients.insert(bucket.to_string(), client.clone());
    Ok(client)
}

/// The runtime every store request runs on: two worker threads, started on first use.
fn runtime() -> &'static tokio::runtime::Runtime {
    static RUNTIME: OnceLock<tokio::runtime::Runtime> = OnceLock::new();
    RUNTIME.get_or_init(|| {
        tokio::runtime::Builder::new_multi_thread()
            .worker_threads(2)
            .thread_name("kernlake-store")
            .enable_all()
            .build()
            .expect("the object-store runtime starts (two threads)")
    })
}

/// Runs `f` to completion on the store runtime, blocking the calling (non-runtime)
/// thread.
pub(crate) fn block_on<F: std::future::Future>(f: F) -> F::Output {
    runtime().block_on(f)
}

/// A handle to the store runtime, for tasks that run beside the caller.
pub(crate) fn handle() -> tokio::runtime::Handle {
    runtime().handle().clone()
}
