//! Crash safety of `kernlake score`: the real binary is killed with SIGKILL part-way at
//! several moments; no partial file ever sits under a final name, and a rerun completes
//! the job with outputs identical byte for byte to an uninterrupted run, leaving no
//! temporary files (common practice: write to a temporary name, rename when complete).

use crate::common;

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Duration;

use kernlake::fit::Fitter;
use ndarray::s;

/// Every file below `dir`, relative paths sorted, with hidden (temporary) names apart.
fn listing(dir: &Path) -> (Vec<PathBuf>, Vec<PathBuf>) {
    fn walk(root: &Path, dir: &Path, files: &mut Vec<PathBuf>, temps: &mut Vec<PathBuf>) {
        let Ok(rd) = std::fs::read_dir(dir) else {
            return;
        };
        for e in rd {
            let p = e.unwrap().path();
            if p.is_dir() {
                walk(root, &p, files, temps);
            } else if p.file_name().unwrap().to_str().unwrap().starts_with('.') {
                temps.push(p.strip_prefix(root).unwrap().to_path_buf());
            } else {
                files.push(p.strip_prefix(root).unwrap().to_path_buf());
            }
        }
    }
    let (mut files, mut temps) = (Vec::new(), Vec::new());
    walk(dir, dir, &mut files, &mut temps);
    files.sort();
    temps.sort();
    (files, temps)
}

fn score_cmd(model: &Path, lake: &Path, out: &Path) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_kernlake"));
    c.args([
        "score",
        "-q",
        model.to_str().unwrap(),
        lake.to_str().unwrap(),
    ])
    .args([
        "--out",
        out.to_str().unwrap(),
        "--threads",
        "2",
        "--batch-rows",
        "2000",
    ])
    .stdout(Stdio::null())
    .stderr(Stdio::null());
    c
}

#[test]
fn killed_runs_leave_no_partial_outputs_and_rerun_matches() {
    // Model and data: CCPP (dataset: Tüfekci 2014), rows repeated over 16 files.
    let (names, x, y) = common::ccpp();
    let mut model = Fitter::new()
        .with_dim(256)
        .with_gamma(0.5)
        .with_c(50.0)
        .with_epsilon(1.0)
        .with_seed(3)
        .with_max_epochs(10)
        .fit(x.slice(s![..2000, ..]), y.slice(s![..2000]))
        .unwrap();
    model.columns.features = names[..4].to_vec();
    model.columns.target = Some(names[4].clone());
    let tmp = tempfile::tempdir().unwrap();
    let mpath = tmp.path().join("model.klm");
    model.save(&mpath).unwrap();
    let lake = tmp.path().join("lake");
    for k in 0..16 {
        let dir = lake.join(format!("day={:02}", k / 4));
        let path = dir.join(format!("part-{k}.parquet"));
        common::write_parts(&dir, &names, &x, &y, 1);
        std::fs::rename(dir.join("part-00.parquet"), path).unwrap();
    }

    let reference = tmp.path().join("reference");
    let t0 = std::time::Instant::now();
    assert!(score_cmd(&mpath, &lake, &reference)
        .status()
        .unwrap()
        .success());
    eprintln!("uninterrupted run: {} ms", t0.elapsed().as_millis());
    let (ref_files, ref_temps) = listing(&reference);
    assert_eq!(ref_files.len(), 16);
    assert!(ref_temps.is_empty());

    let out = tmp.path().join("out");
    let mut part_way = 0;
    for delay_ms in [20u64, 60, 150, 300, 500, 800] {
        let mut child = score_cmd(&mpath, &lake, &out).spawn().unwrap();
        std::thread::sleep(Duration::from_millis(delay_ms));
        child.kill().unwrap(); // SIGKILL on Unix
        child.wait().unwrap();
        // Whatever sits under a final name is complete and equal to the reference.
        let (files, temps) = listing(&out);
        eprintln!(
            "killed at {delay_ms} ms: {} outputs, {} temporary files",
            files.len(),
            temps.len()
        );
        if files.len() < 16 && !temps.is_empty() {
            part_way += 1;
        }
        for f in &files {
            assert_eq!(
                std::fs::read(out.join(f)).unwrap(),
                std::fs::read(reference.join(f)).unwrap(),
                "{f:?} after a kill at {delay_ms} ms"
            );
        }
    }
    // The kills must have caught runs part-way (outputs missing, temporary files present).
    assert!(part_way >= 2, "only {part_way} kills landed part-way");
    assert!(score_cmd(&mpath, &lake, &out).status().unwrap().success());
    let (files, temps) = listing(&out);
    assert_eq!(files, ref_files);
    assert!(temps.is_empty(), "temporary files left: {temps:?}");
    for f in &files {
        assert_eq!(
            std::fs::read(out.join(f)).unwrap(),
            std::fs::read(reference.join(f)).unwrap(),
            "{f:?}"
        );
    }
}
