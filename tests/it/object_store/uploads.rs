//! Uploads of scored outputs: whole objects only under final keys, and no multipart upload
//! left open after a rerun (S3's ListMultipartUploads, asked by the test itself).

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::Duration;

use super::{ccpp_lake, cli, env, fetch, http, scored_rows, server, upload_tree, walk};

/// The multipart uploads open in `bucket` (S3's ListMultipartUploads, unsigned request of
/// the test's own).
fn open_uploads(port: u16, bucket: &str) -> usize {
    let (st, body) = http(port, "GET", &format!("/{bucket}?uploads"), b"");
    assert_eq!(st, 200, "{}", String::from_utf8_lossy(&body));
    String::from_utf8_lossy(&body).matches("<Upload>").count()
}

/// The keys in `bucket` whose name marks an open upload (S3's ListObjectsV2).
fn markers(port: u16, bucket: &str) -> Vec<String> {
    let (st, body) = http(port, "GET", &format!("/{bucket}?list-type=2"), b"");
    assert_eq!(st, 200);
    let text = String::from_utf8_lossy(&body).into_owned();
    text.split("<Key>")
        .skip(1)
        .filter_map(|t| t.split_once("</Key>").map(|(k, _)| k.to_string()))
        .filter(|k| {
            k.rsplit('/')
                .next()
                .unwrap()
                .starts_with("_kernlake-upload.")
        })
        .collect()
}

/// A run killed in the middle of a multipart upload leaves the upload open and its marker
/// (`_kernlake-upload.<name>` holding the upload id) beside the output key; this makes
/// that state with the server's own API, then checks that the next run aborts the upload,
/// removes the marker and writes every output whole.
#[test]
fn a_rerun_aborts_the_multipart_upload_a_killed_run_left_open() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    upload_tree(s.port, "leftover", &lake, "in");
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
    let key = "out/site=1/day=2/part.parquet";
    let (st, body) = http(s.port, "POST", &format!("/leftover/{key}?uploads"), b"");
    assert_eq!(st, 200, "{}", String::from_utf8_lossy(&body));
    let text = String::from_utf8_lossy(&body).into_owned();
    let id = text
        .split("<UploadId>")
        .nth(1)
        .unwrap()
        .split("</UploadId>")
        .next()
        .unwrap();
    let (st, _) = http(
        s.port,
        "PUT",
        &format!("/leftover/{key}?partNumber=1&uploadId={id}"),
        &[7u8; 20_000],
    );
    assert_eq!(st, 200);
    let marker = "out/site=1/day=2/_kernlake-upload.part.parquet";
    let (st, _) = http(s.port, "PUT", &format!("/leftover/{marker}"), id.as_bytes());
    assert_eq!(st, 200);
    assert_eq!(open_uploads(s.port, "leftover"), 1);

    let o = cli(
        s.port,
        &[
            "score",
            "-q",
            model.to_str().unwrap(),
            "s3://leftover/in/",
            "--out",
            "s3://leftover/out/",
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(
        open_uploads(s.port, "leftover"),
        0,
        "the left upload is still open"
    );
    assert!(markers(s.port, "leftover").is_empty());
    let reference = tmp.path().join("ref");
    let o = cli(
        s.port,
        &[
            "score",
            "-q",
            model.to_str().unwrap(),
            lake.to_str().unwrap(),
            "--out",
            reference.to_str().unwrap(),
        ],
    );
    assert!(o.status.success());
    let got = tmp.path().join("got");
    for f in walk(&reference) {
        let rel = f
            .strip_prefix(&reference)
            .unwrap()
            .to_str()
            .unwrap()
            .to_string();
        let bytes = fetch("leftover", &format!("out/{rel}")).expect("every output was written");
        let to = got.join(&rel);
        std::fs::create_dir_all(to.parent().unwrap()).unwrap();
        std::fs::write(to, bytes).unwrap();
    }
    assert_eq!(scored_rows(&got), scored_rows(&reference));
}

#[test]
fn killed_scoring_to_s3_leaves_no_partial_object_and_a_rerun_completes() {
    let Some(s) = server() else { return };
    let tmp = tempfile::tempdir().unwrap();
    let lake = tmp.path().join("lake");
    ccpp_lake(&lake);
    upload_tree(s.port, "killing", &lake, "in");
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
    let reference = tmp.path().join("ref");
    let o = cli(
        s.port,
        &[
            "score",
            "-q",
            model.to_str().unwrap(),
            lake.to_str().unwrap(),
            "--out",
            reference.to_str().unwrap(),
            "--batch-rows",
            "500",
        ],
    );
    assert!(o.status.success());
    let rels: Vec<String> = walk(&reference)
        .iter()
        .map(|p| {
            p.strip_prefix(&reference)
                .unwrap()
                .to_str()
                .unwrap()
                .to_string()
        })
        .collect();
    let score = || {
        let mut c = Command::new(env!("CARGO_BIN_EXE_kernlake"));
        c.args([
            "score",
            "-q",
            model.to_str().unwrap(),
            "s3://killing/in/",
            "--out",
            "s3://killing/out/",
        ])
        .args(["--threads", "1", "--batch-rows", "500"])
        .envs(env(s.port))
        .stdout(Stdio::null())
        .stderr(Stdio::null());
        c
    };
    // Every object under a final key, at any moment, is a whole output.
    let check = |dir: &Path| {
        for rel in &rels {
            if let Some(bytes) = fetch("killing", &format!("out/{rel}")) {
                let to = dir.join(rel);
                std::fs::create_dir_all(to.parent().unwrap()).unwrap();
                std::fs::write(to, bytes).unwrap();
            }
        }
        let got = scored_rows(dir);
        let want: Vec<_> = scored_rows(&reference)
            .into_iter()
            .filter(|(r, _)| got.iter().any(|(g, _)| g == r))
            .collect();
        assert_eq!(got, want);
        got.len()
    };
    for (k, ms) in [30u64, 150, 400].into_iter().enumerate() {
        let mut child = score().spawn().unwrap();
        std::thread::sleep(Duration::from_millis(ms));
        let _ = child.kill(); // SIGKILL
        let _ = child.wait();
        check(&tmp.path().join(format!("after-kill-{k}")));
    }
    assert!(score().status().unwrap().success());
    assert_eq!(check(&tmp.path().join("final")), rels.len());
    assert_eq!(
        open_uploads(s.port, "killing"),
        0,
        "a multipart upload was left open"
    );
    assert!(markers(s.port, "killing").is_empty());
}
