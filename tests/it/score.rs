//! Batch scoring (`kernlake score` and `kernlake::score`): scores equal `Model::predict`
//! bit for bit, outputs mirror the inputs, coverage behaves as a Gaussian kernel must,
//! reruns skip complete outputs, and bad input fails with a clear error.

use crate::common;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::Arc;

use arrow_array::cast::AsArray;
use arrow_array::types::Float64Type;
use arrow_array::{
    ArrayRef, Float64Array, Int64Array, RecordBatch, RecordBatchReader, StringArray,
};
use arrow_schema::{DataType, Field, Schema};
use kernlake::data::{discover, CsvOptions, SourceFile};
use kernlake::fit::Fitter;
use kernlake::model::Model;
use kernlake::score::{score_batch, score_files, MissingRows, Quiet, ScoreOptions};
use kernlake::Error;
use ndarray::{s, Array1, Array2, Axis};
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

const NAMES: [&str; 4] = ["AT", "V", "AP", "RH"];

/// A model fitted on the first 3,000 rows of CCPP (dataset: Tüfekci 2014), with the
/// dataset's column names as its input contract.
fn ccpp_model() -> Model {
    let (_, x, y) = common::ccpp();
    let mut m = Fitter::new()
        .with_dim(128)
        .with_gamma(0.5)
        .with_c(50.0)
        .with_epsilon(1.0)
        .with_seed(7)
        .with_max_epochs(20)
        .fit(x.slice(s![..3000, ..]), y.slice(s![..3000]))
        .unwrap();
    m.columns.features = NAMES.iter().map(|s| s.to_string()).collect();
    m.columns.target = Some("PE".into());
    assert!(
        m.coverage.is_some(),
        "a fitted model stores coverage landmarks"
    );
    m
}

/// One batch of CCPP rows `lo..hi` with an id (Int64), a text tag and the target.
fn ccpp_batch(x: &Array2<f64>, y: &Array1<f64>, lo: usize, hi: usize) -> RecordBatch {
    let mut fields = vec![
        Field::new("id", DataType::Int64, false),
        Field::new("tag", DataType::Utf8, true),
    ];
    let mut cols: Vec<ArrayRef> = vec![
        Arc::new(Int64Array::from_iter_values(lo as i64..hi as i64)),
        Arc::new(StringArray::from_iter_values(
            (lo..hi).map(|i| format!("r{i}")),
        )),
    ];
    for (j, n) in NAMES.iter().enumerate() {
        fields.push(Field::new(*n, DataType::Float64, true));
        cols.push(Arc::new(Float64Array::from(
            x.slice(s![lo..hi, j]).to_vec(),
        )));
    }
    fields.push(Field::new("PE", DataType::Float64, true));
    cols.push(Arc::new(Float64Array::from(y.slice(s![lo..hi]).to_vec())));
    RecordBatch::try_new(Arc::new(Schema::new(fields)), cols).unwrap()
}

fn write_batch(path: &Path, batch: &RecordBatch) {
    std::fs::create_dir_all(path.parent().unwrap()).unwrap();
    let f = std::fs::File::create(path).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(f, batch.schema(), None).unwrap();
    w.write(batch).unwrap();
    w.close().unwrap();
}

fn read_parquet(path: &Path) -> RecordBatch {
    let f = std::fs::File::open(path).unwrap();
    let r = ParquetRecordBatchReaderBuilder::try_new(f)
        .unwrap()
        .build()
        .unwrap();
    let schema = r.schema();
    let batches: Vec<RecordBatch> = r.map(|b| b.unwrap()).collect();
    arrow_select::concat::concat_batches(&schema, &batches).unwrap()
}

fn f64s(b: &RecordBatch, name: &str) -> Vec<Option<f64>> {
    b.column_by_name(name)
        .unwrap()
        .as_primitive::<Float64Type>()
        .iter()
        .collect()
}

/// CCPP rows 0..6000 as six files in partition folders `site=1..3/part-k.parquet`.
fn lake(dir: &Path) -> (Vec<PathBuf>, Array2<f64>, Array1<f64>) {
    let (_, x, y) = common::ccpp();
    let mut paths = Vec::new();
    for k in 0..6 {
        let p = dir
            .join(format!("site={}", k / 2 + 1))
            .join(format!("part-{k}.parquet"));
        write_batch(&p, &ccpp_batch(&x, &y, k * 1000, (k + 1) * 1000));
        paths.push(p);
    }
    (paths, x, y)
}

fn opts(out: &Path, threads: usize, batch_rows: usize) -> ScoreOptions {
    ScoreOptions {
        out_dir: out.to_path_buf(),
        threads,
        batch_rows,
        ..ScoreOptions::default()
    }
}

#[test]
fn scores_equal_predict_bit_for_bit_whatever_threads_and_batches() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, _) = lake(&tmp.path().join("lake"));
    let files = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    let expected = model.predict(x.slice(s![..6000, ..]));
    let mut runs = Vec::new();
    for (threads, batch) in [(1, 1000), (2, 777), (2, 65_536)] {
        let out = tmp.path().join(format!("out-{threads}-{batch}"));
        let sum = score_files(&model, &files, &opts(&out, threads, batch), &Quiet).unwrap();
        assert_eq!(
            (sum.files_scored, sum.rows_read, sum.rows_written),
            (6, 6000, 6000)
        );
        let mut preds = Vec::new();
        let mut covs = Vec::new();
        for k in 0..6 {
            // Outputs mirror the input folders (partition folders kept).
            let p = out
                .join(format!("site={}", k / 2 + 1))
                .join(format!("part-{k}.parquet"));
            let b = read_parquet(&p);
            let ids = b
                .column_by_name("id")
                .unwrap()
                .as_primitive::<arrow_array::types::Int64Type>();
            assert_eq!(ids.value(0), (k * 1000) as i64);
            preds.extend(f64s(&b, "prediction").into_iter().map(Option::unwrap));
            covs.extend(
                f64s(&b, "coverage")
                    .into_iter()
                    .map(|c| c.unwrap().to_bits()),
            );
        }
        // common practice / our contract: the same numbers as Model::predict, bit for bit
        for (i, (p, e)) in preds.iter().zip(expected.iter()).enumerate() {
            assert_eq!(p.to_bits(), e.to_bits(), "row {i}");
        }
        runs.push((preds, covs));
    }
    // Coverage too is the same, bit for bit, whatever the threads and batch size.
    assert_eq!(runs[0], runs[1]);
    assert_eq!(runs[0], runs[2]);
}

#[test]
fn output_schema_and_columns() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, y) = common::ccpp();
    let p = tmp.path().join("in").join("a.parquet");
    write_batch(&p, &ccpp_batch(&x, &y, 0, 500));
    let file = SourceFile::open(p.clone()).unwrap();
    let out = tmp.path().join("out");
    score_files(
        &model,
        std::slice::from_ref(&file),
        &opts(&out, 1, 128),
        &Quiet,
    )
    .unwrap();
    let b = read_parquet(&out.join("a.parquet"));
    let names: Vec<(String, DataType)> = b
        .schema()
        .fields()
        .iter()
        .map(|f| (f.name().clone(), f.data_type().clone()))
        .collect();
    // Default: every non-input column, then prediction, coverage and the flag.
    let want = [
        ("id", DataType::Int64),
        ("tag", DataType::Utf8),
        ("PE", DataType::Float64),
        ("prediction", DataType::Float64),
        ("coverage", DataType::Float64),
        ("covered", DataType::Boolean),
    ];
    let want: Vec<(String, DataType)> = want
        .iter()
        .map(|(n, t)| (n.to_string(), t.clone()))
        .collect();
    assert_eq!(names, want);
    assert_eq!(b.num_rows(), 500);

    // --keep, --name, --with-inputs, no coverage
    let o = ScoreOptions {
        keep: Some(vec!["tag".into()]),
        prediction_name: "pe_hat".into(),
        with_inputs: true,
        coverage: false,
        overwrite: true,
        ..opts(&out, 1, 128)
    };
    score_files(&model, &[file], &o, &Quiet).unwrap();
    let b = read_parquet(&out.join("a.parquet"));
    let names: Vec<&str> = b
        .schema_ref()
        .fields()
        .iter()
        .map(|f| f.name().as_str())
        .collect();
    assert_eq!(names, ["tag", "AT", "V", "AP", "RH", "pe_hat"]);
}

#[test]
fn coverage_high_in_distribution_and_near_zero_far_away() {
    let model = ccpp_model();
    let (_, x, y) = common::ccpp();
    // Held-out rows from the same plant (rows 6000..7000 were not used to fit).
    let near = score_batch(
        &model,
        &ccpp_batch(&x, &y, 6000, 7000),
        &ScoreOptions::default(),
    )
    .unwrap();
    let cov: Vec<f64> = f64s(&near, "coverage")
        .into_iter()
        .map(Option::unwrap)
        .collect();
    let mean = cov.iter().sum::<f64>() / cov.len() as f64;
    let flagged = near
        .column_by_name("covered")
        .unwrap()
        .as_boolean()
        .false_count();
    // The threshold is the 1% quantile of held-out coverage: few rows like the training
    // data are flagged (allow 5% for sampling).
    assert!(mean > 0.5, "mean coverage {mean}");
    assert!(
        flagged <= 50,
        "{flagged} of 1000 in-distribution rows flagged"
    );
    // Far outside: every input shifted by 50 standard deviations. common practice:
    // a Gaussian kernel k → 0 with distance, so coverage → 0 and every row is flagged.
    let mut far_x = x.clone();
    for (j, mut c) in far_x.axis_iter_mut(Axis(1)).enumerate() {
        c += 50.0 * model.scaler.scale[j];
    }
    let far = score_batch(
        &model,
        &ccpp_batch(&far_x, &y, 6000, 7000),
        &ScoreOptions::default(),
    )
    .unwrap();
    for c in f64s(&far, "coverage") {
        assert!(c.unwrap() < 1e-6, "far coverage {c:?}");
    }
    assert_eq!(
        far.column_by_name("covered")
            .unwrap()
            .as_boolean()
            .true_count(),
        0
    );
}

#[test]
fn missing_inputs_null_skip_fail() {
    let model = ccpp_model();
    let (_, x, y) = common::ccpp();
    let mut xm = x.slice(s![..20, ..]).to_owned();
    xm[[3, 1]] = f64::NAN;
    xm[[7, 2]] = f64::INFINITY;
    let mut batch = ccpp_batch(&xm, &y, 0, 20);
    // A true null in AT of row 11.
    let at: Float64Array = (0..20).map(|i| (i != 11).then(|| xm[[i, 0]])).collect();
    let mut cols = batch.columns().to_vec();
    cols[2] = Arc::new(at);
    batch = RecordBatch::try_new(batch.schema(), cols).unwrap();
    let expected = model.predict(xm.view());
    let bad = [3usize, 7, 11];

    let out = score_batch(&model, &batch, &ScoreOptions::default()).unwrap();
    let p = f64s(&out, "prediction");
    for i in 0..20 {
        if bad.contains(&i) {
            assert_eq!(p[i], None, "row {i}");
        } else {
            assert_eq!(p[i].unwrap().to_bits(), expected[i].to_bits(), "row {i}");
        }
    }
    let skip = ScoreOptions {
        missing: MissingRows::Skip,
        ..ScoreOptions::default()
    };
    let out = score_batch(&model, &batch, &skip).unwrap();
    assert_eq!(out.num_rows(), 17);
    let ids = out
        .column_by_name("id")
        .unwrap()
        .as_primitive::<arrow_array::types::Int64Type>();
    assert!(ids.iter().all(|i| !bad.contains(&(i.unwrap() as usize))));

    let fail = ScoreOptions {
        missing: MissingRows::Fail,
        ..ScoreOptions::default()
    };
    match score_batch(&model, &batch, &fail) {
        Err(Error::Cell { row, column, .. }) => assert_eq!((row, column.as_str()), (4, "V")),
        other => panic!("expected a cell error, got {other:?}"),
    }
}

#[test]
fn rerun_skips_complete_outputs_and_redoes_changed_ones() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (paths, x, y) = lake(&tmp.path().join("lake"));
    let files = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    let out = tmp.path().join("out");
    let o = opts(&out, 2, 4096);
    let first = score_files(&model, &files, &o, &Quiet).unwrap();
    assert_eq!(first.files_scored, 6);
    let again = score_files(&model, &files, &o, &Quiet).unwrap();
    assert_eq!(
        (again.files_scored, again.files_skipped, again.rows_read),
        (0, 6, 0)
    );

    // A truncated output is not complete; a changed input is rescored.
    let out0 = out.join("site=1").join("part-0.parquet");
    let bytes = std::fs::read(&out0).unwrap();
    std::fs::write(&out0, &bytes[..bytes.len() / 2]).unwrap();
    write_batch(&paths[5], &ccpp_batch(&x, &y, 5000, 5500));
    let files = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    let third = score_files(&model, &files, &o, &Quiet).unwrap();
    assert_eq!((third.files_scored, third.files_skipped), (2, 4));
    assert_eq!(
        read_parquet(&out.join("site=3").join("part-5.parquet")).num_rows(),
        500
    );
    assert_eq!(std::fs::read(&out0).unwrap(), bytes);

    // Different settings or --overwrite: everything again.
    let renamed = ScoreOptions {
        prediction_name: "p".into(),
        ..o.clone()
    };
    assert_eq!(
        score_files(&model, &files, &renamed, &Quiet)
            .unwrap()
            .files_scored,
        6
    );
    let over = ScoreOptions {
        overwrite: true,
        ..o
    };
    assert_eq!(
        score_files(&model, &files, &over, &Quiet)
            .unwrap()
            .files_scored,
        6
    );
}

#[test]
fn rerun_rewrites_an_output_whose_pages_are_damaged_under_an_intact_footer() {
    // issue 20: bytes 2,000-2,400 zeroed used to pass as "already complete"
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    lake(&tmp.path().join("lake"));
    let files = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    let out = tmp.path().join("out");
    let o = opts(&out, 2, 4096);
    assert_eq!(
        score_files(&model, &files, &o, &Quiet)
            .unwrap()
            .files_scored,
        6
    );
    let out0 = out.join("site=1").join("part-0.parquet");
    let good = std::fs::read(&out0).unwrap();
    let mut bad = good.clone();
    assert!(bad.len() > 2400, "{} bytes", bad.len());
    bad[2000..2400].fill(0);
    std::fs::write(&out0, &bad).unwrap();
    // the footer still reads
    ParquetRecordBatchReaderBuilder::try_new(std::fs::File::open(&out0).unwrap()).unwrap();
    let again = score_files(&model, &files, &o, &Quiet).unwrap();
    assert_eq!((again.files_scored, again.files_skipped), (1, 5));
    assert_eq!(std::fs::read(&out0).unwrap(), good);
}

#[test]
fn keep_going_scores_the_rest_past_an_unreadable_parquet_file() {
    let dir = tempfile::tempdir().unwrap();
    let lake_dir = dir.path().join("lake");
    lake(&lake_dir);
    std::fs::write(
        lake_dir.join("site=1").join("broken.parquet"),
        b"PAR1 not really",
    )
    .unwrap();
    let model = dir.path().join("m.klm");
    ccpp_model().save(&model).unwrap();
    let out = dir.path().join("out");
    let o = kernlake()
        .args(["score", "--keep-going", model.to_str().unwrap()])
        .arg(&lake_dir)
        .args(["--out", out.to_str().unwrap()])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(
        err.contains("broken.parquet") && err.contains("6 scored"),
        "{err}"
    );
    assert!(out.join("site=3").join("part-5.parquet").exists());
    // without --keep-going the same lake stops before scoring, naming the file
    let o = kernlake()
        .args(["score", model.to_str().unwrap()])
        .arg(&lake_dir)
        .args(["--out", dir.path().join("out2").to_str().unwrap()])
        .output()
        .unwrap();
    assert!(!o.status.success());
    assert!(String::from_utf8_lossy(&o.stderr).contains("broken.parquet"));
}

#[test]
fn contract_failures_name_file_and_column_and_write_nothing() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, y) = lake(&tmp.path().join("lake"));
    // part-9: no RH column; part-8: AT as text.
    let good = ccpp_batch(&x, &y, 0, 100);
    let no_rh = good.project(&[0, 1, 2, 3, 4, 6]).unwrap();
    write_batch(&tmp.path().join("lake/site=9/part-9.parquet"), &no_rh);
    let mut fields: Vec<Field> = good
        .schema()
        .fields()
        .iter()
        .map(|f| f.as_ref().clone())
        .collect();
    fields[2] = Field::new("AT", DataType::Utf8, true);
    let mut cols = good.columns().to_vec();
    cols[2] = Arc::new(StringArray::from_iter_values(
        (0..100).map(|i| format!("{i}")),
    ));
    let text = RecordBatch::try_new(Arc::new(Schema::new(fields)), cols).unwrap();
    write_batch(&tmp.path().join("lake/site=8/part-8.parquet"), &text);
    let files = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    let out = tmp.path().join("out");

    match score_files(&model, &files, &opts(&out, 1, 1000), &Quiet) {
        Err(Error::Column { path, column, .. }) => {
            assert!(path.ends_with("site=8/part-8.parquet"), "{path:?}");
            assert_eq!(column, "AT");
        }
        other => panic!("expected a column error, got {other:?}"),
    }
    let keep_going = ScoreOptions {
        keep_going: true,
        ..opts(&out, 2, 1000)
    };
    let sum = score_files(&model, &files, &keep_going, &Quiet).unwrap();
    assert_eq!(sum.files_scored + sum.files_skipped, 6);
    assert_eq!(sum.failures.len(), 2);
    assert!(
        sum.failures[1].message.contains("'RH'"),
        "{}",
        sum.failures[1].message
    );
    assert!(!out.join("site=9/part-9.parquet").exists());
    assert!(!out.join("site=8").exists());
}

#[test]
fn bad_outputs_corrupt_and_empty_inputs() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, y) = lake(&tmp.path().join("lake"));
    let files = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    // Output folder inside the input folder.
    let inside = opts(&tmp.path().join("lake/scored"), 1, 1000);
    assert!(matches!(
        score_files(&model, &files, &inside, &Quiet),
        Err(Error::InvalidParameter { .. })
    ));
    // Unwritable output folder: below a regular file.
    std::fs::write(tmp.path().join("plain"), b"x").unwrap();
    let blocked = tmp.path().join("plain").join("out");
    match score_files(&model, &files, &opts(&blocked, 1, 1000), &Quiet) {
        Err(e @ Error::Output { .. }) => {
            let m = e.to_string();
            assert!(m.contains("plain") && m.contains("is a file"), "{m}");
        }
        other => panic!("expected an output error, got {other:?}"),
    }
    // A corrupt input file (not Parquet bytes) is named.
    let bad = tmp.path().join("other/bad.parquet");
    std::fs::create_dir_all(bad.parent().unwrap()).unwrap();
    std::fs::write(&bad, b"PAR1 this is not a parquet file PAR1").unwrap();
    let bad_file = SourceFile {
        path: bad.clone(),
        format: kernlake::data::Format::Parquet,
        partitions: vec![],
        rows: None,
    };
    match score_files(
        &model,
        &[bad_file],
        &opts(&tmp.path().join("o2"), 1, 1000),
        &Quiet,
    ) {
        Err(e @ Error::File { .. }) => assert!(e.to_string().contains("bad.parquet"), "{e}"),
        other => panic!("expected a file error, got {other:?}"),
    }
    // An empty input file gives an empty output with the right schema.
    let empty = tmp.path().join("other/empty.parquet");
    write_batch(&empty, &ccpp_batch(&x, &y, 0, 0));
    let file = SourceFile::open(empty).unwrap();
    let out = tmp.path().join("o3");
    let sum = score_files(&model, &[file], &opts(&out, 1, 1000), &Quiet).unwrap();
    assert_eq!((sum.files_scored, sum.rows_written), (1, 0));
    let b = read_parquet(&out.join("empty.parquet"));
    assert_eq!(b.num_rows(), 0);
    let names: Vec<&str> = b
        .schema_ref()
        .fields()
        .iter()
        .map(|f| f.name().as_str())
        .collect();
    assert_eq!(
        names,
        ["id", "tag", "PE", "prediction", "coverage", "covered"]
    );
}

fn kernlake() -> Command {
    Command::new(env!("CARGO_BIN_EXE_kernlake"))
}

#[test]
fn cli_scores_files_pipes_and_refuses_a_damaged_model() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, _) = lake(&tmp.path().join("lake"));
    let mpath = tmp.path().join("m.klm");
    model.save(&mpath).unwrap();
    let out = tmp.path().join("out");
    let st = kernlake()
        .args([
            "score",
            "-q",
            mpath.to_str().unwrap(),
            tmp.path().join("lake").to_str().unwrap(),
        ])
        .args(["--out", out.to_str().unwrap(), "--threads", "2"])
        .status()
        .unwrap();
    assert!(st.success());
    let b = read_parquet(&out.join("site=2/part-3.parquet"));
    let expected = model.predict(x.slice(s![3000..4000, ..]));
    for (p, e) in f64s(&b, "prediction").iter().zip(expected.iter()) {
        assert_eq!(p.unwrap().to_bits(), e.to_bits());
    }

    // Pipe: an Arrow IPC stream on stdin scored onto stdout.
    let (_, xa, ya) = common::ccpp();
    let batch = ccpp_batch(&xa, &ya, 100, 400);
    let mut input = Vec::new();
    {
        let mut w = arrow_ipc::writer::StreamWriter::try_new(&mut input, &batch.schema()).unwrap();
        w.write(&batch).unwrap();
        w.finish().unwrap();
    }
    let mut child = kernlake()
        .args([
            "score",
            "-q",
            mpath.to_str().unwrap(),
            "-",
            "--out",
            "-",
            "--batch-rows",
            "64",
        ])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    std::io::Write::write_all(&mut child.stdin.take().unwrap(), &input).unwrap();
    let got = child.wait_with_output().unwrap();
    assert!(got.status.success());
    let r =
        arrow_ipc::reader::StreamReader::try_new(std::io::Cursor::new(got.stdout), None).unwrap();
    let batches: Vec<RecordBatch> = r.map(|b| b.unwrap()).collect();
    let all = arrow_select::concat::concat_batches(&batches[0].schema(), &batches).unwrap();
    let expected = model.predict(xa.slice(s![100..400, ..]));
    for (p, e) in f64s(&all, "prediction").iter().zip(expected.iter()) {
        assert_eq!(p.unwrap().to_bits(), e.to_bits());
    }

    // A model file that fails its checksum: one error line, non-zero exit.
    let mut bytes = std::fs::read(&mpath).unwrap();
    let mid = bytes.len() / 2;
    bytes[mid] ^= 0x55;
    let broken = tmp.path().join("broken.klm");
    std::fs::write(&broken, bytes).unwrap();
    let got = kernlake()
        .args([
            "score",
            "-q",
            broken.to_str().unwrap(),
            tmp.path().join("lake").to_str().unwrap(),
        ])
        .args(["--out", tmp.path().join("o9").to_str().unwrap()])
        .output()
        .unwrap();
    assert_eq!(got.status.code(), Some(2));
    let err = String::from_utf8_lossy(&got.stderr);
    assert!(err.contains("broken.klm"), "{err}");
    assert!(!tmp.path().join("o9").exists());
}

/// Writes CCPP rows `lo..hi` as delimited text with the columns of [`ccpp_batch`];
/// numbers in Rust's shortest round-trip form, so they parse back to the same bits.
fn write_csv(path: &Path, x: &Array2<f64>, y: &Array1<f64>, lo: usize, hi: usize, sep: char) {
    use std::fmt::Write as _;
    std::fs::create_dir_all(path.parent().unwrap()).unwrap();
    let mut t = ["id", "tag", "AT", "V", "AP", "RH", "PE"].join(&sep.to_string());
    t.push('\n');
    for i in lo..hi {
        write!(t, "{i}{sep}r{i}").unwrap();
        for j in 0..4 {
            write!(t, "{sep}{}", x[[i, j]]).unwrap();
        }
        writeln!(t, "{sep}{}", y[i]).unwrap();
    }
    std::fs::write(path, t).unwrap();
}

#[test]
fn csv_folder_scores_like_the_same_rows_in_parquet() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, y) = lake(&tmp.path().join("lake"));
    for k in 0..6 {
        let p = tmp
            .path()
            .join("text")
            .join(format!("site={}", k / 2 + 1))
            .join(format!("part-{k}.csv"));
        write_csv(&p, &x, &y, k * 1000, (k + 1) * 1000, ';');
    }
    let parquet = discover(&[tmp.path().join("lake").display().to_string()]).unwrap();
    let text = discover(&[tmp.path().join("text").display().to_string()]).unwrap();
    let out_p = tmp.path().join("out-parquet");
    let out_t = tmp.path().join("out-text");
    score_files(&model, &parquet, &opts(&out_p, 2, 777), &Quiet).unwrap();
    let o = ScoreOptions {
        csv: CsvOptions { delimiter: b';' },
        ..opts(&out_t, 2, 777)
    };
    let sum = score_files(&model, &text, &o, &Quiet).unwrap();
    assert_eq!(
        (sum.files_scored, sum.rows_read, sum.rows_written),
        (6, 6000, 6000)
    );
    for k in 0..6 {
        let rel = PathBuf::from(format!("site={}", k / 2 + 1));
        // Outputs mirror the folders; the CSV file's output ends in .parquet.
        let a = read_parquet(&out_p.join(&rel).join(format!("part-{k}.parquet")));
        let b = read_parquet(&out_t.join(&rel).join(format!("part-{k}.parquet")));
        assert!(!out_t.join(&rel).join(format!("part-{k}.csv")).exists());
        // dataset: Tüfekci 2014 rows; our contract: the same numbers in CSV and Parquet
        // give the same prediction and coverage, bit for bit.
        for name in ["prediction", "coverage"] {
            let (pa, pb) = (f64s(&a, name), f64s(&b, name));
            assert_eq!(pa.len(), 1000);
            for (i, (u, v)) in pa.iter().zip(&pb).enumerate() {
                assert_eq!(u.unwrap().to_bits(), v.unwrap().to_bits(), "{name} {k}/{i}");
            }
        }
        // Kept columns travel as the file's text.
        let ids = b.column_by_name("id").unwrap().as_string::<i32>();
        assert_eq!(ids.value(0), (k * 1000).to_string());
        assert_eq!(
            b.schema().field_with_name("PE").unwrap().data_type(),
            &DataType::Utf8
        );
    }
    // A rerun finds every CSV output complete (stamped with its rows) and skips it.
    let again = score_files(&model, &text, &o, &Quiet).unwrap();
    assert_eq!(
        (again.files_scored, again.files_skipped, again.rows_read),
        (0, 6, 0)
    );
    // Another delimiter is another setting: everything is scored again.
    let comma = ScoreOptions {
        csv: CsvOptions::default(),
        ..o.clone()
    };
    match score_files(&model, &text, &comma, &Quiet) {
        Err(Error::File { path, message }) => {
            // With ',' the header is one column named "id;tag;AT;…": the file is named
            // and the delimiter suggested.
            assert!(path.ends_with("site=1/part-0.csv"), "{path:?}");
            assert!(message.contains("--delimiter ';'"), "{message}");
        }
        other => panic!("expected a file error suggesting the delimiter, got {other:?}"),
    }

    // The command line: --delimiter, a CSV folder in, Parquet out.
    let mpath = tmp.path().join("m.klm");
    model.save(&mpath).unwrap();
    let out_c = tmp.path().join("out-cli");
    let st = kernlake()
        .args(["score", "-q", mpath.to_str().unwrap()])
        .arg(tmp.path().join("text"))
        .args(["--out", out_c.to_str().unwrap(), "--delimiter", ";"])
        .status()
        .unwrap();
    assert!(st.success());
    let a = read_parquet(&out_p.join("site=3/part-5.parquet"));
    let c = read_parquet(&out_c.join("site=3/part-5.parquet"));
    assert_eq!(f64s(&a, "prediction"), f64s(&c, "prediction"));
}

#[test]
fn csv_contract_failures_name_file_and_column() {
    let model = ccpp_model();
    let tmp = tempfile::tempdir().unwrap();
    let (_, x, y) = common::ccpp();
    let dir = tmp.path().join("text");
    // No RH column.
    let no_rh = dir.join("no-rh.csv");
    std::fs::create_dir_all(&dir).unwrap();
    let mut t = String::from("id,AT,V,AP\n");
    for i in 0..50 {
        t.push_str(&format!("{i},{},{},{}\n", x[[i, 0]], x[[i, 1]], x[[i, 2]]));
    }
    std::fs::write(&no_rh, t).unwrap();
    let out = tmp.path().join("out");
    let file = SourceFile::open(no_rh.clone()).unwrap();
    let err = score_files(&model, &[file], &opts(&out, 1, 16), &Quiet).unwrap_err();
    match &err {
        Error::Column { path, column, .. } => {
            assert_eq!(path, &no_rh);
            assert_eq!(column, "RH");
        }
        other => panic!("expected a column error, got {other:?}"),
    }
    // One sentence naming file and column.
    let msg = err.to_string();
    assert!(msg.contains("no-rh.csv") && msg.contains("'RH'"), "{msg}");
    assert_eq!(msg.lines().count(), 1, "{msg}");
    assert!(!out.join("no-rh.parquet").exists());

    // A cell that is not a number: named by row and column; nothing under the final name.
    let bad = dir.join("bad-cell.csv");
    write_csv(&bad, &x, &y, 0, 40, ',');
    let text = std::fs::read_to_string(&bad).unwrap();
    let mut lines: Vec<String> = text.lines().map(str::to_string).collect();
    let mut fields: Vec<&str> = lines[31].split(',').collect(); // data row 31 (1-based)
    fields[3] = "n/a"; // V
    lines[31] = fields.join(",");
    std::fs::write(&bad, lines.join("\n") + "\n").unwrap();
    let file = SourceFile::open(bad).unwrap();
    // A text cell in a numeric column is a missing value (common practice: one bad cell
    // does not drop a column); under the fail policy it is named by row and column.
    let fail = ScoreOptions {
        missing: MissingRows::Fail,
        ..opts(&out, 1, 16)
    };
    match score_files(&model, &[file], &fail, &Quiet) {
        Err(Error::Cell { row, column, .. }) => assert_eq!((row, column.as_str()), (31, "V")),
        other => panic!("expected a cell error, got {other:?}"),
    }
    assert!(!out.join("bad-cell.parquet").exists());

    // a.csv beside a.parquet would share one output: refused before anything is written.
    let both = tmp.path().join("both");
    write_csv(&both.join("a.csv"), &x, &y, 0, 10, ',');
    write_batch(&both.join("a.parquet"), &ccpp_batch(&x, &y, 0, 10));
    let files = discover(&[both.display().to_string()]).unwrap();
    let out2 = tmp.path().join("out2");
    match score_files(&model, &files, &opts(&out2, 1, 16), &Quiet) {
        Err(e @ Error::File { .. }) => {
            let m = e.to_string();
            assert!(m.contains("a.csv") && m.contains("a.parquet"), "{m}");
        }
        other => panic!("expected a file error, got {other:?}"),
    }
    assert!(!out2.join("a.parquet").exists());
}
