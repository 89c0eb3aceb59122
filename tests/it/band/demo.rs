//! The demo's injected fault (invented scenario, `kernlake demo`): one site's compressor
//! loses efficiency over the held-out month's last two weeks. The deviation report must
//! name that site first, at a change that starts on or after the fault's first day, and
//! a steady offset (the hot-climate site beyond the training range) must rank below it.
//! The ranking is the binomial change scan of Worsley (Biometrika 1983).

use std::process::Command;

#[test]
fn the_demo_report_names_the_faulty_site_and_its_period_first() {
    let dir = tempfile::tempdir().unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(["demo", "-q", "--rows", "200000", "-D", "256", "--dir"])
        .arg(dir.path())
        .output()
        .expect("the binary runs");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // "injected fault: site 25 losing compressor efficiency from 2025-12-18 00:00;"
    let text = stdout
        .split("injected fault: site ")
        .nth(1)
        .expect("the demo names its injected fault");
    let site = text.split_whitespace().next().unwrap();
    let from = text.split(" from ").nth(1).unwrap();
    let fault_day = &from[..10];

    let json = std::fs::read_to_string(dir.path().join("deviation.json")).unwrap();
    let report: serde_json::Value = serde_json::from_str(&json).unwrap();
    let changes = report["changes"]
        .as_array()
        .expect("the report lists rises");
    let first = &changes[0];
    assert_eq!(
        first["group"].as_str().unwrap().trim_start_matches('0'),
        site,
        "first rise {first}"
    );
    let start = first["start_text"].as_str().unwrap();
    assert!(
        &start[..10] >= fault_day,
        "rise from {start}, fault from {fault_day}"
    );
    assert!(
        first["share_after"].as_f64().unwrap() > 4.0 * first["share_before"].as_f64().unwrap(),
        "{first}"
    );
    // The text puts the rises before the tables.
    let rises = stdout.find("largest rises").unwrap();
    assert!(rises < stdout.find("by site").unwrap());
}
