//! Scoring throughput: end-to-end `score_files` (read Parquet → standardize → Gaussian
//! random Fourier features (Rahimi & Recht, NIPS 2007), D = 1,024 → dot → write Parquet,
//! atomically) against the map alone (`Model::predict_into`) on the same rows held in
//! memory, measured side by side in one run, with and without coverage.
//!
//! Settings by environment: `KERNLAKE_BENCH_ROWS` (default 2,000,000; the task's figure
//! is 10,000,000), `KERNLAKE_BENCH_FILES` (20), `KERNLAKE_BENCH_DIR` (a folder that keeps
//! the data `data/` and model `model.klm` for `scripts/bench-score`'s memory runs; a
//! temporary folder otherwise). Inputs: 20 standard-normal columns plus an Int64 id.
//! `cargo bench --bench score` runs it (without `--bench` a 100,000-row smoke run).

use std::path::Path;
use std::sync::Arc;
use std::time::Instant;

use arrow_array::{ArrayRef, Float64Array, Int64Array, RecordBatch};
use arrow_schema::{DataType, Field, Schema};
use kernlake::data::discover;
use kernlake::fit::Fitter;
use kernlake::model::Model;
use kernlake::score::{predict_covered, score_files, Quiet, ScoreOptions};
use ndarray::{Array1, Array2};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

const D_IN: usize = 20;
const BATCH: usize = 65_536;

fn env_usize(name: &str, default: usize) -> usize {
    std::env::var(name)
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

/// Rows `lo..lo+n` of the synthetic table (deterministic per row block seed).
fn rows(seed: u64, n: usize) -> Array2<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array2::from_shape_fn((n, D_IN), |_| StandardNormal.sample(&mut rng))
}

fn names() -> Vec<String> {
    (0..D_IN).map(|j| format!("f{j:02}")).collect()
}

/// Writes `files` Parquet files of `per_file` rows; batch `b` of the whole table comes
/// from seed `b` so the in-memory pass can regenerate the same rows.
fn write_data(dir: &Path, files: usize, per_file: usize) {
    let mut fields = vec![Field::new("id", DataType::Int64, false)];
    fields.extend(
        names()
            .iter()
            .map(|n| Field::new(n, DataType::Float64, false)),
    );
    let schema = Arc::new(Schema::new(fields));
    let mut seed = 0u64;
    let mut id = 0i64;
    for f in 0..files {
        let path = dir.join(format!("part={f:02}")).join("rows.parquet");
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        let file = std::fs::File::create(&path).unwrap();
        let mut w = parquet::arrow::ArrowWriter::try_new(file, schema.clone(), None).unwrap();
        let mut left = per_file;
        while left > 0 {
            let n = left.min(BATCH);
            let x = rows(seed, n);
            seed += 1;
            let mut cols: Vec<ArrayRef> =
                vec![Arc::new(Int64Array::from_iter_values(id..id + n as i64))];
            for j in 0..D_IN {
                cols.push(Arc::new(Float64Array::from(x.column(j).to_vec())));
            }
            w.write(&RecordBatch::try_new(schema.clone(), cols).unwrap())
                .unwrap();
            id += n as i64;
            left -= n;
        }
        w.close().unwrap();
    }
}

/// A model on the synthetic inputs: y = Σ sin(x_j) fitted on 4,000 rows, D = 1,024.
fn model() -> Model {
    let x = rows(u64::MAX, 4000);
    let y = Array1::from_shape_fn(4000, |i| x.row(i).iter().map(|v| v.sin()).sum::<f64>());
    let mut m = Fitter::new()
        .with_dim(1024)
        .with_gamma(1.0 / D_IN as f64)
        .with_c(10.0)
        .with_epsilon(0.1)
        .with_max_epochs(3)
        .with_seed(1)
        .fit(x.view(), y.view())
        .unwrap();
    m.columns.features = names();
    m.columns.target = None;
    m
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let total = env_usize(
        "KERNLAKE_BENCH_ROWS",
        if full { 2_000_000 } else { 100_000 },
    );
    let files = env_usize("KERNLAKE_BENCH_FILES", 20);
    let per_file = total / files;
    let total = per_file * files;
    let tmp = tempfile::tempdir().unwrap();
    let root = std::env::var("KERNLAKE_BENCH_DIR")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|_| tmp.path().to_path_buf());
    let data = root.join("data");
    let _ = std::fs::remove_dir_all(&data);
    let t = Instant::now();
    write_data(&data, files, per_file);
    eprintln!(
        "wrote {total} rows × {D_IN} in {files} files: {:.1}s",
        t.elapsed().as_secs_f64()
    );
    let model = model();
    model.save(&root.join("model.klm")).unwrap();

    // Map only (predict on rows already in memory; generating them is not timed).
    let mut map_s = 0.0;
    let mut mapcov_s = 0.0;
    let mut seed = 0u64;
    for _ in 0..files {
        let mut left = per_file;
        while left > 0 {
            let n = left.min(BATCH);
            let x = rows(seed, n);
            seed += 1;
            let mut out = Array1::zeros(n);
            let t = Instant::now();
            model.predict_into(x.view(), out.view_mut());
            map_s += t.elapsed().as_secs_f64();
            if model.coverage.is_some() {
                // Prediction and coverage in one pass, as the scoring pipeline does.
                let mut v = Array1::zeros(n);
                let t = Instant::now();
                predict_covered(&model, x.view(), out.view_mut(), v.view_mut());
                mapcov_s += t.elapsed().as_secs_f64();
                std::hint::black_box(&v);
            }
            std::hint::black_box(&out);
            left -= n;
        }
    }
    let sources = discover(&[data.display().to_string()]).unwrap();
    let mut e2e = Vec::new();
    for coverage in [false, true] {
        let out = root.join(if coverage {
            "out-coverage"
        } else {
            "out-plain"
        });
        let _ = std::fs::remove_dir_all(&out);
        let opts = ScoreOptions {
            out_dir: out.clone(),
            coverage,
            batch_rows: BATCH,
            ..ScoreOptions::default()
        };
        let s = score_files(&model, &sources, &opts, &Quiet).unwrap();
        assert_eq!(s.rows_written as usize, total);
        e2e.push(s.seconds);
        let _ = std::fs::remove_dir_all(&out);
    }
    let rate = |s: f64| total as f64 / s;
    println!(
        "rows {total}, files {files}, inputs {D_IN}, D 1024, threads {}",
        rayon::current_num_threads()
    );
    println!(
        "map only (predict, in memory)      {:>12.0} rows/s",
        rate(map_s)
    );
    println!(
        "end-to-end, no coverage            {:>12.0} rows/s   ratio {:.2}",
        rate(e2e[0]),
        map_s / e2e[0]
    );
    if model.coverage.is_some() {
        println!(
            "map + coverage (in memory)         {:>12.0} rows/s",
            rate(mapcov_s)
        );
        println!(
            "end-to-end, with coverage          {:>12.0} rows/s   ratio {:.2} (vs map only), {:.2} (vs map + coverage)",
            rate(e2e[1]),
            map_s / e2e[1],
            mapcov_s / e2e[1]
        );
    }
}
