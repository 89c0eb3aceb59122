//! Object-store sources, models and outputs against a real S3-compatible server on
//! 127.0.0.1 (moto's server from PyPI, installed into `.venv` by `scripts/setup`; its
//! path can be given in `KERNLAKE_S3_SERVER`). The bytes cross HTTP with signed
//! requests; the same jobs on the same files from a local folder are the reference
//! (common practice: an S3 listing and range reads must give the same data as the
//! files themselves).
//!
//! Without the server binary the tests print why and pass locally; under `CI=true` they
//! fail, since CI runs `scripts/setup` first.

use crate::common;

mod credentials;
mod uploads;

use std::io::{Read, Write};
use std::net::TcpStream;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, OnceLock};
use std::time::{Duration, Instant};

use kernlake::data::discover;
use kernlake::model::Model;

/// The running server: its port (the process lives as long as the test binary).
struct Server {
    port: u16,
    _stdin: Option<std::process::ChildStdin>,
    _child: Child,
}

/// The server's program, or `None` (then the tests say so and stop).
fn server_program() -> Option<PathBuf> {
    if let Ok(p) = std::env::var("KERNLAKE_S3_SERVER") {
        return Some(PathBuf::from(p));
    }
    let venv = Path::new(env!("CARGO_MANIFEST_DIR")).join(".venv/bin/moto_server");
    venv.exists().then_some(venv)
}

/// Starts the server once for the whole binary and points the library's S3 client at
/// it through the standard environment variables; `None` when the program is absent.
fn server() -> Option<&'static Server> {
    static SERVER: OnceLock<Option<Server>> = OnceLock::new();
    SERVER
        .get_or_init(|| {
            let Some(program) = server_program() else {
                assert!(
                    std::env::var("CI").as_deref() != Ok("true"),
                    "the S3-compatible test server (.venv/bin/moto_server) is missing under CI: scripts/setup installs it"
                );
                eprintln!(
                    "SKIPPED object-store tests: no S3-compatible server; run scripts/setup (installs moto[server] into .venv)"
                );
                return None;
            };
            let server = spawn_server(&program, &[]);
            for (k, v) in env(server.port) {
                std::env::set_var(k, v);
            }
            Some(server)
        })
        .as_ref()
}

/// Starts `program` on a free port of 127.0.0.1 with the extra environment `extra` and
/// waits until it answers.
fn spawn_server(program: &Path, extra: &[(&str, &str)]) -> Server {
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    // The server runs under a shell that stops it when this process's end of
    // its standard input closes (when the test binary exits, however it exits).
    let mut child = Command::new("sh")
        .args([
            "-c",
            "\"$0\" -H 127.0.0.1 -p \"$1\" & pid=$!; cat >/dev/null; kill $pid",
        ])
        .arg(program)
        .arg(port.to_string())
        .stdin(Stdio::piped())
        // Small multipart parts accepted, so that tests exercise multipart uploads.
        .env("S3_UPLOAD_PART_MIN_SIZE", "16384")
        .envs(extra.iter().copied())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap_or_else(|e| panic!("cannot start {}: {e}", program.display()));
    let t0 = Instant::now();
    while TcpStream::connect(("127.0.0.1", port)).is_err() {
        assert!(
            t0.elapsed() < Duration::from_secs(60),
            "the S3 server did not start"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
    let stdin = child.stdin.take();
    Server {
        port,
        _stdin: stdin,
        _child: child,
    }
}

/// The environment a client needs to reach the server (test credentials, not secrets).
fn env(port: u16) -> Vec<(&'static str, String)> {
    vec![
        ("AWS_ENDPOINT_URL", format!("http://127.0.0.1:{port}")),
        ("AWS_ALLOW_HTTP", "true".into()),
        ("AWS_ACCESS_KEY_ID", "testing".into()),
        ("AWS_SECRET_ACCESS_KEY", "testing".into()),
        ("AWS_REGION", "us-east-1".into()),
        ("KERNLAKE_STORE_RETRIES", "2".into()),
        // Outputs above 16 KiB go up as multipart uploads.
        ("KERNLAKE_STORE_PART_BYTES", "16384".into()),
    ]
}

/// One plain HTTP/1.1 request to the server (bucket creation and uploads by the test
/// itself, independent of the code under test); returns status and body.
fn http(port: u16, method: &str, path: &str, body: &[u8]) -> (u16, Vec<u8>) {
    let mut s = TcpStream::connect(("127.0.0.1", port)).unwrap();
    write!(
        s,
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nContent-Length: {}\r\nConnection: close\r\n\r\n",
        body.len()
    )
    .unwrap();
    s.write_all(body).unwrap();
    let mut out = Vec::new();
    s.read_to_end(&mut out).unwrap();
    let head_end = out.windows(4).position(|w| w == b"\r\n\r\n").unwrap() + 4;
    let status: u16 = std::str::from_utf8(&out[9..12]).unwrap().parse().unwrap();
    (status, out[head_end..].to_vec())
}

/// An object's bytes, read through a signed request of the test's own S3 client (the
/// objects kernlake wrote are private to its credentials).
fn fetch(bucket: &str, key: &str) -> Option<Vec<u8>> {
    use object_store::ObjectStoreExt;
    let store = object_store::aws::AmazonS3Builder::from_env()
        .with_bucket_name(bucket)
        .build()
        .unwrap();
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap();
    let key = object_store::path::Path::parse(key).unwrap();
    rt.block_on(async {
        let got = store.get(&key).await.ok()?;
        got.bytes().await.ok().map(|b| b.to_vec())
    })
}

/// Creates `bucket` and uploads every file below `dir` under `prefix/`.
fn upload_tree(port: u16, bucket: &str, dir: &Path, prefix: &str) {
    let (st, _) = http(port, "PUT", &format!("/{bucket}"), b"");
    assert!(st == 200 || st == 409, "bucket creation answered {st}");
    for f in walk(dir) {
        let rel = f.strip_prefix(dir).unwrap().to_str().unwrap().to_string();
        let bytes = std::fs::read(&f).unwrap();
        let (st, _) = http(port, "PUT", &format!("/{bucket}/{prefix}/{rel}"), &bytes);
        assert_eq!(st, 200, "upload of {rel}");
    }
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let Ok(entries) = std::fs::read_dir(dir) else {
        return out;
    };
    for e in entries {
        let p = e.unwrap().path();
        if p.is_dir() {
            out.extend(walk(&p));
        } else {
            out.push(p);
        }
    }
    out.sort();
    out
}

/// A partitioned CCPP lake (dataset: Tüfekci 2014): `site=S/day=D/part.parquet`, plus
/// a hidden temporary file and a `_SUCCESS` marker that listing must skip.
fn ccpp_lake(dir: &Path) {
    let (names, x, y) = common::ccpp();
    let n = x.nrows();
    let per = n.div_ceil(6);
    for p in 0..6 {
        let (lo, hi) = (p * per, ((p + 1) * per).min(n));
        let mut cols: Vec<Vec<f64>> = (0..4)
            .map(|j| x.column(j).slice(ndarray::s![lo..hi]).to_vec())
            .collect();
        cols.push(y.slice(ndarray::s![lo..hi]).to_vec());
        let path = dir.join(format!("site={}/day={}/part.parquet", p % 2, p / 2));
        common::write_parquet(&path, &names, &cols);
    }
    std::fs::write(dir.join("site=0/.part.parquet.tmp"), b"partial").unwrap();
    std::fs::write(dir.join("_SUCCESS"), b"").unwrap();
}

fn cli(port: u16, args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(args)
        .envs(env(port))
        .output()
        .unwrap()
}

#[test]
fn listing_finds_the_same_files_and_partitions_as_a_local_folder() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    upload_tree(s.port, "listing", &lake, "lake");
    let base = lake.to_str().unwrap();
    for (local, remote) in [
        (format!("{base}/"), "s3://listing/lake/".to_string()),
        (
            format!("{base}/site=1"),
            "s3://listing/lake/site=1".to_string(),
        ),
        (
            format!("{base}/site=*/day=1"),
            "s3://listing/lake/site=*/day=1".to_string(),
        ),
        (
            format!("{base}/*/day=[02]/*.parquet"),
            "s3://listing/lake/*/day=[02]/*.parquet".to_string(),
        ),
        (
            format!("{base}/site=0/day=2/part.parquet"),
            "s3://listing/lake/site=0/day=2/part.parquet".to_string(),
        ),
    ] {
        let a = discover(std::slice::from_ref(&local)).unwrap();
        let b = discover(std::slice::from_ref(&remote)).unwrap();
        let tail =
            |p: &Path, root: &str| p.to_str().unwrap().strip_prefix(root).unwrap().to_string();
        let la: Vec<_> = a
            .iter()
            .map(|f| (tail(&f.path, base), f.partitions.clone(), f.rows))
            .collect();
        let lb: Vec<_> = b
            .iter()
            .map(|f| {
                (
                    tail(&f.path, "s3://listing/lake"),
                    f.partitions.clone(),
                    f.rows,
                )
            })
            .collect();
        assert!(!la.is_empty());
        assert_eq!(la, lb, "{local} vs {remote}");
    }
}

#[test]
fn fit_from_s3_gives_the_same_model_bytes_as_from_local_files() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    upload_tree(s.port, "fitting", &lake, "ccpp");
    // The CSV source too (dataset: Tüfekci 2014).
    let csv_dir = tmp.path().join("csv");
    std::fs::create_dir_all(&csv_dir).unwrap();
    std::fs::copy(common::ccpp_path(), csv_dir.join("ccpp.csv")).unwrap();
    upload_tree(s.port, "fitting", &csv_dir, "csv");
    let args = ["--target", "PE", "--dim", "128", "--seed", "7", "-q"];
    for (local, remote) in [
        (lake.to_str().unwrap().to_string(), "s3://fitting/ccpp/"),
        (
            csv_dir.join("ccpp.csv").to_str().unwrap().to_string(),
            "s3://fitting/csv/ccpp.csv",
        ),
    ] {
        let m_local = tmp.path().join("local.klm");
        let o = cli(
            s.port,
            &[&["fit", &local, "-o", m_local.to_str().unwrap()], &args[..]].concat(),
        );
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        // The model goes to the store too, and comes back the same.
        let m_url = "s3://fitting/models/remote.klm";
        let o = cli(s.port, &[&["fit", remote, "-o", m_url], &args[..]].concat());
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let remote_bytes = fetch("fitting", "models/remote.klm").unwrap();
        assert_eq!(std::fs::read(&m_local).unwrap(), remote_bytes, "{remote}");
        let loaded = Model::load(Path::new(m_url)).unwrap();
        let bytes = |m: Model| m.to_model_file().unwrap().to_bytes().unwrap();
        assert_eq!(bytes(loaded), bytes(Model::load(&m_local).unwrap()));
    }
}

/// Every row of every Parquet file below `dir`, by relative path (stamps left out).
fn scored_rows(dir: &Path) -> Vec<(String, Vec<arrow_array::RecordBatch>)> {
    walk(dir)
        .into_iter()
        .map(|p| {
            let f = std::fs::File::open(&p).unwrap();
            let r = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(f)
                .unwrap()
                .build()
                .unwrap();
            let rel = p.strip_prefix(dir).unwrap().to_str().unwrap().to_string();
            (rel, r.map(|b| b.unwrap()).collect())
        })
        .collect()
}

#[test]
fn scoring_to_s3_equals_local_scoring_and_a_rerun_skips() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    upload_tree(s.port, "scoring", &lake, "in");
    let model = tmp.path().join("m.klm");
    let o = cli(
        s.port,
        &[
            "fit",
            lake.to_str().unwrap(),
            "--target",
            "PE",
            "--dim",
            "64",
            "-q",
            "-o",
            model.to_str().unwrap(),
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let local_out = tmp.path().join("out");
    let o = cli(
        s.port,
        &[
            "score",
            "-q",
            model.to_str().unwrap(),
            lake.to_str().unwrap(),
            "--out",
            local_out.to_str().unwrap(),
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = cli(
        s.port,
        &[
            "score",
            model.to_str().unwrap(),
            "s3://scoring/in/",
            "--out",
            "s3://scoring/out/",
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // Fetch the outputs as the server holds them.
    let fetched = tmp.path().join("fetched");
    for f in walk(&local_out) {
        let rel = f.strip_prefix(&local_out).unwrap().to_str().unwrap();
        let bytes = fetch("scoring", &format!("out/{rel}")).expect(rel);
        let to = fetched.join(rel);
        std::fs::create_dir_all(to.parent().unwrap()).unwrap();
        std::fs::write(to, bytes).unwrap();
    }
    // Each output is larger than one 16 KiB part: every upload above was multipart.
    assert!(walk(&local_out)
        .iter()
        .all(|f| std::fs::metadata(f).unwrap().len() > 16384));
    let (a, b) = (scored_rows(&local_out), scored_rows(&fetched));
    assert_eq!(a.len(), 6);
    assert_eq!(a, b);
    // A rerun finds every output complete.
    let o = cli(
        s.port,
        &[
            "score",
            model.to_str().unwrap(),
            "s3://scoring/in/",
            "--out",
            "s3://scoring/out/",
        ],
    );
    assert!(o.status.success());
    let text = String::from_utf8_lossy(&o.stdout).to_string() + &String::from_utf8_lossy(&o.stderr);
    assert!(text.contains("0 scored, 6 already complete"), "{text}");
}

#[test]
fn a_missing_bucket_or_empty_prefix_fails_with_one_sentence_naming_the_url() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let (st, _) = http(s.port, "PUT", "/emptyish", b"");
    assert!(st == 200 || st == 409);
    for (url, reason) in [
        ("s3://no-such-bucket-here/lake/", "bucket does not exist"),
        ("s3://emptyish/nothing/", "holds no data objects"),
    ] {
        let out = tmp.path().join("m.klm");
        let o = cli(
            s.port,
            &[
                "fit",
                url,
                "--target",
                "PE",
                "-q",
                "-o",
                out.to_str().unwrap(),
            ],
        );
        assert!(!o.status.success());
        let err = String::from_utf8_lossy(&o.stderr);
        let lines: Vec<&str> = err.lines().filter(|l| !l.trim().is_empty()).collect();
        assert_eq!(lines.len(), 1, "{err}");
        assert!(
            lines[0].contains(url.trim_end_matches('/')) && lines[0].contains(reason),
            "{err}"
        );
        assert!(!err.contains("testing"), "a credential leaked: {err}");
        assert!(!out.exists());
    }
}

/// A TCP proxy in front of the server counting the bytes the server sends back (the
/// server's side of the traffic, whatever the client believes it asked for).
fn counting_proxy(port: u16) -> (u16, Arc<AtomicU64>) {
    let listener = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
    let local = listener.local_addr().unwrap().port();
    let count = Arc::new(AtomicU64::new(0));
    let c = count.clone();
    std::thread::spawn(move || {
        for client in listener.incoming() {
            let Ok(client) = client else { continue };
            let Ok(server) = TcpStream::connect(("127.0.0.1", port)) else {
                continue;
            };
            let (mut c_in, mut s_out) = (client.try_clone().unwrap(), server.try_clone().unwrap());
            std::thread::spawn(move || {
                let _ = std::io::copy(&mut c_in, &mut s_out);
                let _ = s_out.shutdown(std::net::Shutdown::Write);
            });
            let (mut s_in, mut c_out, c) = (server, client, c.clone());
            std::thread::spawn(move || {
                let mut buf = [0u8; 1 << 16];
                loop {
                    match s_in.read(&mut buf) {
                        Ok(0) | Err(_) => break,
                        Ok(n) => {
                            c.fetch_add(n as u64, Ordering::SeqCst);
                            if c_out.write_all(&buf[..n]).is_err() {
                                break;
                            }
                        }
                    }
                }
                let _ = c_out.shutdown(std::net::Shutdown::Write);
            });
        }
    });
    (local, count)
}

#[test]
fn scoring_a_wide_object_with_a_narrow_model_fetches_only_its_columns() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    // CCPP (dataset: Tüfekci 2014) widened with 40 shifted copies of its columns.
    let (names, x, y) = common::ccpp();
    let mut cols: Vec<Vec<f64>> = (0..4).map(|j| x.column(j).to_vec()).collect();
    cols.push(y.to_vec());
    let mut wide_names = names.clone();
    for k in 0..40 {
        let j = k % 5;
        let shift = (k + 1) * 997;
        let n = cols[j].len();
        cols.push((0..n).map(|i| cols[j][(i + shift) % n]).collect());
        wide_names.push(format!("{}_{k}", names[j]));
    }
    let wide = tmp.path().join("wide/part.parquet");
    common::write_parquet(&wide, &wide_names, &cols);
    let size = std::fs::metadata(&wide).unwrap().len();
    upload_tree(s.port, "narrow", wide.parent().unwrap(), "in");
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    let model = tmp.path().join("m.klm");
    let o = cli(
        s.port,
        &[
            "fit",
            lake.to_str().unwrap(),
            "--target",
            "PE",
            "--dim",
            "64",
            "-q",
            "-o",
            model.to_str().unwrap(),
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (proxy, count) = counting_proxy(s.port);
    let out = tmp.path().join("out");
    let o = Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args([
            "score",
            "-q",
            model.to_str().unwrap(),
            "s3://narrow/in/part.parquet",
            "--keep",
            "PE",
        ])
        .args(["--out", out.to_str().unwrap()])
        .envs(env(s.port))
        .env("AWS_ENDPOINT_URL", format!("http://127.0.0.1:{proxy}"))
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let fetched = count.load(Ordering::SeqCst);
    // 5 of 45 columns are needed: the bytes served stay well under a quarter of the
    // object (headers and footer included).
    assert!(
        fetched * 4 < size,
        "fetched {fetched} bytes of a {size}-byte object"
    );
    assert!(fetched > 0);
}

/// A proxy in front of the server that answers the first `fail` connections with
/// `503 Slow Down` (S3's throttling answer) and forwards the rest unchanged.
fn throttling_proxy(port: u16, fail: u64) -> u16 {
    let listener = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
    let local = listener.local_addr().unwrap().port();
    std::thread::spawn(move || {
        let mut seen = 0u64;
        for client in listener.incoming() {
            let Ok(mut client) = client else { continue };
            seen += 1;
            if seen <= fail {
                std::thread::spawn(move || {
                    let mut buf = [0u8; 4096];
                    let _ = client.read(&mut buf);
                    let _ = client.write_all(
                        b"HTTP/1.1 503 Slow Down\r\nContent-Length: 0\r\nConnection: close\r\n\r\n",
                    );
                });
                continue;
            }
            let Ok(server) = TcpStream::connect(("127.0.0.1", port)) else {
                continue;
            };
            let (mut c_in, mut s_out) = (client.try_clone().unwrap(), server.try_clone().unwrap());
            std::thread::spawn(move || {
                let _ = std::io::copy(&mut c_in, &mut s_out);
                let _ = s_out.shutdown(std::net::Shutdown::Write);
            });
            let (mut s_in, mut c_out) = (server, client);
            std::thread::spawn(move || {
                let _ = std::io::copy(&mut s_in, &mut c_out);
                let _ = c_out.shutdown(std::net::Shutdown::Write);
            });
        }
    });
    local
}

#[test]
fn throttled_requests_are_retried_and_endless_throttling_fails_in_one_sentence() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    upload_tree(s.port, "throttled", &lake, "in");
    let args = ["--target", "PE", "--dim", "64", "--seed", "3", "-q"];
    let local = tmp.path().join("local.klm");
    let o = cli(
        s.port,
        &[
            &["fit", lake.to_str().unwrap(), "-o", local.to_str().unwrap()],
            &args[..],
        ]
        .concat(),
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    // Two refusals: within the two retries the tests allow (common practice: S3 clients
    // retry 503 Slow Down with backoff).
    for (fail, ok) in [(2u64, true), (u64::MAX, false)] {
        let proxy = throttling_proxy(s.port, fail);
        let remote = tmp.path().join(format!("remote-{ok}.klm"));
        let o = Command::new(env!("CARGO_BIN_EXE_kernlake"))
            .args(["fit", "s3://throttled/in/", "-o", remote.to_str().unwrap()])
            .args(args)
            .envs(env(s.port))
            .env("AWS_ENDPOINT_URL", format!("http://127.0.0.1:{proxy}"))
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&o.stderr);
        if ok {
            assert!(o.status.success(), "{err}");
            assert_eq!(
                std::fs::read(&local).unwrap(),
                std::fs::read(&remote).unwrap()
            );
        } else {
            assert!(!o.status.success());
            let lines: Vec<&str> = err.lines().filter(|l| !l.trim().is_empty()).collect();
            assert_eq!(lines.len(), 1, "{err}");
            assert!(
                lines[0].contains("s3://throttled/in") && lines[0].contains("after retries"),
                "{err}"
            );
            assert!(!remote.exists());
        }
    }
}
