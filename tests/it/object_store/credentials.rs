//! Refused credentials: a server that checks every request's signature against its own
//! users (moto's server with authentication on from the first request,
//! `INITIAL_NO_AUTH_ACTION_COUNT=0`) answers the test's keys with InvalidAccessKeyId;
//! kernlake must stop with one sentence naming the URL and the reason, without the secret.

use std::process::Command;

use super::{env, server, server_program, spawn_server};

#[test]
fn refused_credentials_fail_with_one_sentence_naming_the_url_and_no_secret() {
    // The shared server first: it says whether the program exists (and fails under CI if not).
    if server().is_none() {
        return;
    }
    let program = server_program().expect("the shared server started from it");
    let strict = spawn_server(&program, &[("INITIAL_NO_AUTH_ACTION_COUNT", "0")]);
    let tmp = tempfile::tempdir().unwrap();
    let model = tmp.path().join("m.klm");
    for args in [
        vec![
            "fit",
            "s3://guarded/lake/",
            "--target",
            "PE",
            "-q",
            "-o",
            model.to_str().unwrap(),
        ],
        vec!["inspect", "s3://guarded/models/m.klm"],
    ] {
        let o = Command::new(env!("CARGO_BIN_EXE_kernlake"))
            .args(&args)
            .envs(env(strict.port))
            .env("AWS_SECRET_ACCESS_KEY", "not-a-real-secret-417")
            .output()
            .unwrap();
        assert!(!o.status.success());
        let err = String::from_utf8_lossy(&o.stderr);
        let lines: Vec<&str> = err.lines().filter(|l| !l.trim().is_empty()).collect();
        assert_eq!(lines.len(), 1, "{err}");
        assert!(lines[0].contains("s3://guarded/"), "{err}");
        assert!(lines[0].contains("credentials were refused"), "{err}");
        assert!(
            !err.contains("not-a-real-secret-417"),
            "the secret leaked: {err}"
        );
        assert!(!model.exists());
    }
}
