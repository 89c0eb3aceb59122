//! The real `kernlake` binary on temporary folders: happy paths and bad input.

use std::path::Path;
use std::process::{Command, Output};

use crate::common::{ccpp, write_parquet, write_parts};
use ndarray::s;

fn kernlake(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(args)
        .output()
        .expect("the binary runs")
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// A small CCPP lake (dataset: Tüfekci 2014) in `parts` files under `dir`.
fn small_lake(dir: &Path, rows: usize, parts: usize) {
    let (header, x, y) = ccpp();
    let x = x.slice(s![..rows, ..]).to_owned();
    let y = y.slice(s![..rows]).to_owned();
    write_parts(dir, &header, &x, &y, parts);
}

fn fit_args<'a>(src: &'a str, out: &'a str) -> Vec<&'a str> {
    vec![
        "fit", src, "--target", "PE", "--out", out, "-D", "64", "--quiet", "--epochs", "20",
    ]
}

fn no_temp_files(dir: &Path) {
    for e in std::fs::read_dir(dir).unwrap() {
        let name = e.unwrap().file_name().to_string_lossy().into_owned();
        assert!(
            !kernlake::testing::is_temp_name(&name),
            "temporary file left: {name}"
        );
    }
}

#[test]
fn fit_then_inspect() {
    let dir = tempfile::tempdir().unwrap();
    let lake = dir.path().join("lake");
    small_lake(&lake, 2_000, 3);
    let model = dir.path().join("m.klm");
    let report = dir.path().join("r.json");
    let mut args = fit_args(lake.to_str().unwrap(), model.to_str().unwrap());
    args.extend(["--report", report.to_str().unwrap()]);
    let o = kernlake(&args);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(model.exists() && report.exists());
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
    assert!(json["rows_trained"].as_u64().unwrap() > 1_500);

    let o = kernlake(&["inspect", model.to_str().unwrap()]);
    assert!(o.status.success());
    let text = String::from_utf8_lossy(&o.stdout);
    for col in ["AT", "V", "AP", "RH", "PE", "gaussian"] {
        assert!(text.contains(col), "inspect output lacks {col}:\n{text}");
    }
    let o = kernlake(&["inspect", "--json", model.to_str().unwrap()]);
    let doc: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(doc["columns"]["features"][0], "AT");
    no_temp_files(dir.path());
}

#[test]
fn help_carries_the_safety_note() {
    for args in [&["--help"][..], &["fit", "--help"][..]] {
        let o = kernlake(args);
        let text = String::from_utf8_lossy(&o.stdout);
        let flat = text.split_whitespace().collect::<Vec<_>>().join(" ");
        assert!(
            flat.contains("no substitute for protective systems"),
            "{text}"
        );
    }
}

fn fails_with(args: &[&str], needles: &[&str]) {
    let o = kernlake(args);
    assert!(!o.status.success(), "expected failure for {args:?}");
    let err = stderr(&o);
    for n in needles {
        assert!(err.contains(n), "message lacks '{n}': {err}");
    }
    assert!(!err.contains("panicked"), "{err}");
}

#[test]
fn bad_sources_fail_with_one_clear_sentence() {
    let dir = tempfile::tempdir().unwrap();
    let lake = dir.path().join("lake");
    small_lake(&lake, 300, 2);
    let lake_s = lake.to_str().unwrap();
    let out = dir.path().join("m.klm");
    let out_s = out.to_str().unwrap();

    // missing target column
    fails_with(
        &["fit", lake_s, "--target", "nope", "--out", out_s, "--quiet"],
        &["nope"],
    );
    // a folder with no data files
    let empty = dir.path().join("empty");
    std::fs::create_dir_all(&empty).unwrap();
    fails_with(&fit_args(empty.to_str().unwrap(), out_s), &["empty"]);
    // a corrupt Parquet file names the file
    let bad = dir.path().join("bad");
    std::fs::create_dir_all(&bad).unwrap();
    std::fs::write(bad.join("broken.parquet"), b"PAR1 this is not parquet").unwrap();
    fails_with(&fit_args(bad.to_str().unwrap(), out_s), &["broken.parquet"]);
    // schema disagreement between files names both files
    let mixed = dir.path().join("mixed");
    small_lake(&mixed, 200, 1);
    let strs: Vec<String> = ["AT", "V", "AP", "RH", "PE"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let mut other = strs.clone();
    other[1] = "V2".into();
    write_parquet(&mixed.join("zz.parquet"), &other, &vec![vec![1.0; 5]; 5]);
    fails_with(&fit_args(mixed.to_str().unwrap(), out_s), &["zz.parquet"]);
    // invalid parameters
    let mut a = fit_args(lake_s, out_s);
    a.extend(["--c", "0"]);
    fails_with(&a, &["C"]);
    let mut a = fit_args(lake_s, out_s);
    a.extend(["--epsilon", "-1"]);
    fails_with(&a, &["epsilon"]);
    let mut a = fit_args(lake_s, out_s);
    a[7] = "0";
    fails_with(&a, &["dim"]);
    assert!(!out.exists(), "a failed fit left a model behind");
    no_temp_files(dir.path());
}

#[test]
fn missing_values_are_skipped_or_fail_by_policy() {
    let dir = tempfile::tempdir().unwrap();
    let lake = dir.path().join("lake");
    let names: Vec<String> = ["a", "b", "y"].iter().map(|s| s.to_string()).collect();
    let n = 200;
    let a: Vec<f64> = (0..n).map(|i| i as f64 / 10.0).collect();
    let mut b: Vec<f64> = (0..n).map(|i| ((i * 7) % 13) as f64).collect();
    let y: Vec<f64> = (0..n)
        .map(|i| (i as f64 / 10.0).sin() + ((i * 7) % 13) as f64 / 13.0)
        .collect();
    b[10] = f64::NAN;
    b[20] = f64::INFINITY;
    write_parquet(&lake.join("p.parquet"), &names, &[a, b, y]);
    let out = dir.path().join("m.klm");
    let report = dir.path().join("r.json");
    let o = kernlake(&[
        "fit",
        lake.to_str().unwrap(),
        "--target",
        "y",
        "--out",
        out.to_str().unwrap(),
        "--report",
        report.to_str().unwrap(),
        "--quiet",
        "-D",
        "32",
    ]);
    assert!(o.status.success(), "{}", stderr(&o));
    let json: serde_json::Value = serde_json::from_slice(&std::fs::read(&report).unwrap()).unwrap();
    assert_eq!(json["rows_skipped"], 2);
    std::fs::remove_file(&out).unwrap();
    fails_with(
        &[
            "fit",
            lake.to_str().unwrap(),
            "--target",
            "y",
            "--out",
            out.to_str().unwrap(),
            "--quiet",
            "--missing",
            "fail",
        ],
        &["p.parquet", "row 11", "'b'"],
    );
    assert!(!out.exists());
}

#[test]
fn damaged_models_fail_to_load_clearly() {
    let dir = tempfile::tempdir().unwrap();
    let lake = dir.path().join("lake");
    small_lake(&lake, 400, 1);
    let model = dir.path().join("m.klm");
    let o = kernlake(&fit_args(lake.to_str().unwrap(), model.to_str().unwrap()));
    assert!(o.status.success(), "{}", stderr(&o));
    let bytes = std::fs::read(&model).unwrap();
    let truncated = dir.path().join("t.klm");
    std::fs::write(&truncated, &bytes[..bytes.len() / 2]).unwrap();
    fails_with(&["inspect", truncated.to_str().unwrap()], &["t.klm"]);
    let mut flipped = bytes.clone();
    // Damage every 97th byte of the second half (the arrays' values live there).
    let half = flipped.len() / 2;
    for b in flipped[half..].iter_mut().step_by(97) {
        *b ^= 0x40;
    }
    let fpath = dir.path().join("f.klm");
    std::fs::write(&fpath, &flipped).unwrap();
    fails_with(&["inspect", fpath.to_str().unwrap()], &["f.klm"]);
    fails_with(
        &["inspect", dir.path().join("none.klm").to_str().unwrap()],
        &["none.klm"],
    );
}

#[test]
fn unusable_columns_and_rows_fail_clearly() {
    use std::sync::Arc;

    use arrow_array::{ArrayRef, Float64Array, RecordBatch, StringArray};
    use arrow_schema::{DataType, Field, Schema};

    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("m.klm");
    let out_s = out.to_str().unwrap();

    // A chosen column that is not numeric: the error names the file and the column.
    let text = dir.path().join("text");
    std::fs::create_dir_all(&text).unwrap();
    let schema = Arc::new(Schema::new(vec![
        Field::new("label", DataType::Utf8, true),
        Field::new("a", DataType::Float64, true),
        Field::new("y", DataType::Float64, true),
    ]));
    let batch = RecordBatch::try_new(
        schema.clone(),
        vec![
            Arc::new(StringArray::from(vec!["p", "q", "r"])) as ArrayRef,
            Arc::new(Float64Array::from(vec![1.0, 2.0, 3.0])),
            Arc::new(Float64Array::from(vec![1.0, 4.0, 9.0])),
        ],
    )
    .unwrap();
    let f = std::fs::File::create(text.join("t.parquet")).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(f, schema, None).unwrap();
    w.write(&batch).unwrap();
    w.close().unwrap();
    fails_with(
        &[
            "fit",
            text.to_str().unwrap(),
            "--target",
            "y",
            "--features",
            "label,a",
            "--out",
            out_s,
            "--quiet",
        ],
        &["t.parquet", "label"],
    );

    // Only an empty file: nothing to fit on.
    let empty = dir.path().join("emptyfile");
    let names: Vec<String> = ["a", "y"].iter().map(|s| s.to_string()).collect();
    write_parquet(&empty.join("e.parquet"), &names, &[vec![], vec![]]);
    let mut a = fit_args(empty.to_str().unwrap(), out_s);
    a[3] = "y";
    fails_with(&a, &["rows"]);

    // Every row has a missing input: zero usable rows after skipping.
    let holes = dir.path().join("holes");
    write_parquet(
        &holes.join("h.parquet"),
        &names,
        &[vec![f64::NAN; 20], vec![1.0; 20]],
    );
    let mut a = fit_args(holes.to_str().unwrap(), out_s);
    a[3] = "y";
    fails_with(&a, &["rows"]);
    assert!(!out.exists());
    no_temp_files(dir.path());
}

#[test]
fn fit_names_left_out_columns_and_clears_stale_temporaries() {
    // CCPP rows (dataset: Tüfekci 2014) as CSV with a text column and one bad V cell.
    let dir = tempfile::tempdir().unwrap();
    let (_, x, y) = ccpp();
    let mut text = String::from("site,AT,V,AP,RH,PE\n");
    for i in 0..600 {
        let v = if i == 41 {
            "abc".to_string()
        } else {
            x[[i, 1]].to_string()
        };
        text.push_str(&format!(
            "S{},{},{v},{},{},{}\n",
            i % 7,
            x[[i, 0]],
            x[[i, 2]],
            x[[i, 3]],
            y[i]
        ));
    }
    let csv = dir.path().join("plant.csv");
    std::fs::write(&csv, text).unwrap();
    let model = dir.path().join("m.klm");
    // a temporary file of a run that no longer exists (no process has this id: above
    // Linux's largest pid) and one of a live process (this test)
    let stale = dir.path().join(".m.klm.part-4194305-00000000deadbeef");
    let live = dir.path().join(format!(
        ".m.klm.part-{}-00000000deadbeef",
        std::process::id()
    ));
    std::fs::write(&stale, b"half").unwrap();
    std::fs::write(&live, b"busy").unwrap();
    let mut args = fit_args(csv.to_str().unwrap(), model.to_str().unwrap());
    args.retain(|a| *a != "--quiet");
    let o = kernlake(&args);
    let err = stderr(&o);
    assert!(o.status.success(), "{err}");
    assert!(err.contains("4 input column(s)"), "{err}");
    assert!(
        err.contains("column 'site'") && err.contains("'S0' in row 1"),
        "{err}"
    );
    assert!(!stale.exists() && live.exists());
    // under the fail policy the bad cell is named with its row
    let mut args = fit_args(csv.to_str().unwrap(), model.to_str().unwrap());
    args.extend(["--missing", "fail"]);
    fails_with(&args, &["plant.csv", "row 42", "'V'", "abc"]);
}

#[test]
fn outputs_that_cannot_be_written_are_refused_before_any_data_is_read() {
    // The source does not exist: if the output were checked after discovery, the error
    // would name the source. Each case names the output path instead.
    let dir = tempfile::tempdir().unwrap();
    let missing_src = dir.path().join("no-such-lake");
    let src = missing_src.to_str().unwrap();
    let in_missing_folder = dir.path().join("no-such-folder").join("m.klm");
    let a_folder = dir.path().to_path_buf();
    for out in [&in_missing_folder, &a_folder] {
        let o = kernlake(&fit_args(src, out.to_str().unwrap()));
        let err = stderr(&o);
        assert!(!o.status.success(), "fit --out {} succeeded", out.display());
        assert!(
            err.contains(out.to_str().unwrap()) && !err.contains("no-such-lake"),
            "fit --out {}: {err}",
            out.display()
        );
    }
    let report = dir.path().join("no-such-folder").join("r.json");
    let model = dir.path().join("m.klm");
    let mut args = fit_args(src, model.to_str().unwrap());
    args.extend(["--report", report.to_str().unwrap()]);
    let err = stderr(&kernlake(&args));
    assert!(err.contains(report.to_str().unwrap()), "{err}");
    for (cmd, flag) in [("tune", "--json"), ("audit", "--json")] {
        let o = kernlake(&[cmd, src, "--target", "PE", flag, report.to_str().unwrap()]);
        let err = stderr(&o);
        assert!(
            !o.status.success() && err.contains(report.to_str().unwrap()),
            "{cmd} {flag}: {err}"
        );
    }
    no_temp_files(dir.path());
}

/// Issue 20: one cleanup rule for every output. A killed `tune` or `audit` leaves a
/// temporary file beside its report; the next run that writes that report removes it
/// (its process is gone) and leaves a live run's alone. Data: CCPP (Tüfekci 2014).
#[test]
fn tune_and_audit_reports_clear_a_killed_runs_temporaries() {
    let dir = tempfile::tempdir().unwrap();
    small_lake(&dir.path().join("lake"), 600, 2);
    let lake = dir.path().join("lake");
    let lake = lake.to_str().unwrap();
    for (name, args) in [
        (
            "tune.json",
            vec![
                "tune",
                lake,
                "--target",
                "PE",
                "--sample",
                "300",
                "-D",
                "32",
                "--max-dim",
                "32",
                "--refine-fits",
                "0",
                "--quiet",
                "--json",
            ],
        ),
        (
            "audit.json",
            vec![
                "audit", lake, "--target", "PE", "--sample", "300", "--dims", "16", "--quiet",
                "--json",
            ],
        ),
    ] {
        let out = dir.path().join(name);
        // no process has this id (above Linux's largest pid); the second is this test
        let stale = dir
            .path()
            .join(format!(".{name}.part-4194305-00000000deadbeef"));
        let live = dir.path().join(format!(
            ".{name}.part-{}-00000000deadbeef",
            std::process::id()
        ));
        std::fs::write(&stale, b"half").unwrap();
        std::fs::write(&live, b"busy").unwrap();
        let mut args = args.clone();
        args.push(out.to_str().unwrap());
        let o = kernlake(&args);
        assert!(o.status.success(), "{args:?}: {}", stderr(&o));
        assert!(out.exists(), "{name} written");
        assert!(!stale.exists(), "{name}: the killed run's temporary stayed");
        assert!(live.exists(), "{name}: a live run's temporary was removed");
    }
}
