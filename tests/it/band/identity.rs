//! Determinism and errors of banded scoring: identical band columns and deviation
//! reports with 1 and 2 threads and across batch sizes (the contract in DESIGN.md;
//! common practice), a model without a band and a level outside (0, 1) refused with one
//! sentence before any data is read, and old model files loading with no band.

use std::path::Path;
use std::process::Command;

use arrow_array::{Array, Float64Array, RecordBatch};
use kernlake::data::discover;
use kernlake::fit::Fitter;
use kernlake::model::Model;
use kernlake::score::{score_files, Quiet, ScoreOptions, BAND_HIGH_COLUMN, BAND_LOW_COLUMN};
use ndarray::Axis;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

use crate::common::{ccpp, write_parquet};

fn read_all(path: &Path) -> Vec<RecordBatch> {
    let f = std::fs::File::open(path).unwrap();
    ParquetRecordBatchReaderBuilder::try_new(f)
        .unwrap()
        .build()
        .unwrap()
        .map(|b| b.unwrap())
        .collect()
}

fn column(batches: &[RecordBatch], name: &str) -> Vec<Option<f64>> {
    batches
        .iter()
        .flat_map(|b| {
            let c = b.column_by_name(name).unwrap();
            let a = c.as_any().downcast_ref::<Float64Array>().unwrap().clone();
            (0..a.len()).map(move |i| (!a.is_null(i)).then(|| a.value(i)))
        })
        .collect()
}

#[test]
fn bands_and_reports_do_not_depend_on_threads_or_batch_size() {
    // CCPP (dataset: Tüfekci 2014) in three files with a time and a group column.
    let (_, x, y) = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let src = dir.path().join("src");
    std::fs::create_dir_all(&src).unwrap();
    let n = 3_000;
    for part in 0..3 {
        let rows: Vec<usize> = (part * n / 3..(part + 1) * n / 3).collect();
        let mut cols: Vec<Vec<f64>> = (0..4)
            .map(|j| rows.iter().map(|&i| x[[i, j]]).collect())
            .collect();
        cols.push(rows.iter().map(|&i| y[i]).collect());
        // Time runs backwards, so the report must sort; groups by row parity.
        cols.push(rows.iter().map(|&i| (n - i) as f64).collect());
        cols.push(rows.iter().map(|&i| (i % 2) as f64).collect());
        let mut all: Vec<String> = vec![
            "x1".into(),
            "x2".into(),
            "x3".into(),
            "x4".into(),
            "y".into(),
        ];
        all.push("t".into());
        all.push("g".into());
        write_parquet(&src.join(format!("part{part}.parquet")), &all, &cols);
    }
    let model = Fitter::new()
        .with_dim(64)
        .with_seed(3)
        .with_holdout(0.2)
        .fit(
            x.slice(ndarray::s![3000..6000, ..]),
            y.slice(ndarray::s![3000..6000]),
        )
        .unwrap();
    let files = discover(&[src.to_string_lossy().into_owned()]).unwrap();
    let run = |threads: usize, batch_rows: usize, tag: &str| {
        let out = dir.path().join(tag);
        let opts = ScoreOptions {
            out_dir: out.clone(),
            threads,
            batch_rows,
            band: Some(0.9),
            time_column: Some("t".into()),
            group_column: Some("g".into()),
            ..ScoreOptions::default()
        };
        let s = score_files(&model, &files, &opts, &Quiet).unwrap();
        let mut cols = Vec::new();
        for p in 0..3 {
            let b = read_all(&out.join(format!("part{p}.parquet")));
            cols.push((
                column(&b, BAND_LOW_COLUMN),
                column(&b, BAND_HIGH_COLUMN),
                column(&b, "residual"),
            ));
        }
        (s.deviation.unwrap(), cols)
    };
    let (r1, c1) = run(1, 4096, "a");
    let (r2, c2) = run(2, 97, "b");
    let (r3, c3) = run(2, 1000, "c");
    assert_eq!(c1, c2);
    assert_eq!(c1, c3);
    assert_eq!(r1, r2);
    assert_eq!(r1, r3);
    assert_eq!(r1.overall.rows + r1.overall.uncovered, 3_000);
    assert_eq!(r1.groups.len(), 2);
    assert_eq!(r1.files.len(), 3);
    // The band columns agree with the in-memory band (same prediction and spread).
    let xs = x.select(Axis(0), &(0..1000).collect::<Vec<_>>());
    let (_, lo, _) = kernlake::score::predict_with_band(&model, xs.view(), 0.9).unwrap();
    let got: Vec<f64> = c1[0].0.iter().map(|v| v.unwrap()).collect();
    assert_eq!(got, lo.to_vec());
}

#[test]
fn errors_are_one_sentence_and_come_before_data() {
    let (_, x, y) = ccpp();
    let xs = x.slice(ndarray::s![..500, ..]);
    let ys = y.slice(ndarray::s![..500]);
    let plain = Fitter::new()
        .with_dim(32)
        .with_holdout(0.0)
        .fit(xs, ys)
        .unwrap();
    assert!(
        plain.band.is_none(),
        "a fit without a holdout says it has no band"
    );
    let banded = Fitter::new()
        .with_dim(32)
        .with_holdout(0.3)
        .fit(xs, ys)
        .unwrap();
    let dir = tempfile::tempdir().unwrap();
    let (p_plain, p_band) = (dir.path().join("plain.klm"), dir.path().join("band.klm"));
    plain.save(&p_plain).unwrap();
    banded.save(&p_band).unwrap();
    // Round trip keeps the band exactly.
    assert_eq!(Model::load(&p_band).unwrap().band, banded.band);
    assert!(Model::load(&p_plain).unwrap().band.is_none());

    // The CLI refuses before reading data: the source does not even exist.
    let cli = |model: &Path, extra: &[&str]| {
        let mut c = Command::new(env!("CARGO_BIN_EXE_kernlake"));
        c.arg("score")
            .arg(model)
            .arg("/nonexistent/lake")
            .arg("--out")
            .arg(dir.path().join("o"));
        c.args(extra);
        let o = c.output().unwrap();
        assert!(!o.status.success());
        String::from_utf8(o.stderr).unwrap()
    };
    let e = cli(&p_plain, &["--band", "0.9"]);
    assert!(e.contains("stores no band"), "{e}");
    assert!(
        !e.contains("nonexistent"),
        "checked before the sources: {e}"
    );
    assert_eq!(e.trim().lines().count(), 1, "one sentence: {e}");
    for bad in ["1.5", "0", "1", "-0.2"] {
        let e = cli(&p_band, &[&format!("--band={bad}")]);
        assert!(e.contains("strictly between 0 and 1"), "{bad}: {e}");
        assert!(!e.contains("nonexistent"), "{e}");
    }
    // In the library too.
    let err = kernlake::score::predict_with_band(&plain, xs, 0.9)
        .unwrap_err()
        .to_string();
    assert!(err.contains("stores no band"), "{err}");
    let err = banded
        .band
        .as_ref()
        .unwrap()
        .quantile(1.2)
        .unwrap_err()
        .to_string();
    assert!(err.contains("strictly between 0 and 1"), "{err}");
}

#[test]
fn model_files_from_before_bands_load_without_one() {
    let p = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/it/fixtures/model_before_problem_rename.klm");
    let m = Model::load(&p).unwrap();
    assert!(m.band.is_none());
}
