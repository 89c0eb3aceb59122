//! Helpers shared by the integration tests: the open datasets and Parquet fixtures.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::{ArrayRef, Float64Array, RecordBatch};
use arrow_schema::{DataType, Field, Schema};
use ndarray::{Array1, Array2};

/// The folder of the committed open datasets.
pub fn data_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data")
}

/// Combined Cycle Power Plant (dataset: Tüfekci, Int. J. Electrical Power & Energy
/// Systems 60 (2014) 126–140; CC BY 4.0): inputs AT, V, AP, RH and target PE (MW).
pub fn ccpp() -> (Vec<String>, Array2<f64>, Array1<f64>) {
    let text = std::fs::read_to_string(data_dir().join("ccpp_folds5x2_sheet1.csv")).unwrap();
    let mut lines = text.lines();
    let header: Vec<String> = lines
        .next()
        .unwrap()
        .split(',')
        .map(str::to_string)
        .collect();
    let rows: Vec<Vec<f64>> = lines
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split(',').map(|v| v.trim().parse().unwrap()).collect())
        .collect();
    let n = rows.len();
    let x = Array2::from_shape_fn((n, 4), |(i, j)| rows[i][j]);
    let y = Array1::from_shape_fn(n, |i| rows[i][4]);
    (header, x, y)
}

/// The CCPP file's path (dataset: Tüfekci 2014), for tests that read it as a CSV source.
pub fn ccpp_path() -> String {
    data_dir()
        .join("ccpp_folds5x2_sheet1.csv")
        .to_string_lossy()
        .into_owned()
}

/// CCPP rows as `[AT, V, AP, RH, PE]` (dataset: Tüfekci 2014).
pub fn ccpp_rows() -> Vec<[f64; 5]> {
    let (_, x, y) = ccpp();
    (0..x.nrows())
        .map(|i| [x[[i, 0]], x[[i, 1]], x[[i, 2]], x[[i, 3]], y[i]])
        .collect()
}

/// Friedman #1 (published: Friedman, Annals of Statistics 19 (1991)): the project's one
/// generator. Returns (x, noisy y, noise-free f).
pub fn friedman1(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
    kernlake::testing::friedman1(n, seed)
}

/// Writes named Float64 columns to one Parquet file (snappy, as the demo does).
pub fn write_parquet(path: &Path, names: &[String], cols: &[Vec<f64>]) {
    let fields: Vec<Field> = names
        .iter()
        .map(|n| Field::new(n, DataType::Float64, true))
        .collect();
    let schema = Arc::new(Schema::new(fields));
    let arrays: Vec<ArrayRef> = cols
        .iter()
        .map(|c| Arc::new(Float64Array::from(c.clone())) as ArrayRef)
        .collect();
    let batch = RecordBatch::try_new(schema.clone(), arrays).unwrap();
    if let Some(dir) = path.parent() {
        std::fs::create_dir_all(dir).unwrap();
    }
    let file = std::fs::File::create(path).unwrap();
    let mut w = parquet::arrow::ArrowWriter::try_new(file, schema, None).unwrap();
    w.write(&batch).unwrap();
    w.close().unwrap();
}

/// Writes rows `x`, `y` as `parts` Parquet files of consecutive rows under `dir`
/// (`part-00.parquet`, …), columns named `names` (inputs then target).
pub fn write_parts(
    dir: &Path,
    names: &[String],
    x: &Array2<f64>,
    y: &Array1<f64>,
    parts: usize,
) -> Vec<PathBuf> {
    let n = x.nrows();
    let per = n.div_ceil(parts);
    let mut out = Vec::new();
    for p in 0..parts {
        let lo = p * per;
        let hi = ((p + 1) * per).min(n);
        let mut cols: Vec<Vec<f64>> = (0..x.ncols())
            .map(|j| x.column(j).slice(ndarray::s![lo..hi]).to_vec())
            .collect();
        cols.push(y.slice(ndarray::s![lo..hi]).to_vec());
        let path = dir.join(format!("part-{p:02}.parquet"));
        write_parquet(&path, names, &cols);
        out.push(path);
    }
    out
}

/// Root-mean-square difference.
pub fn rmse(a: &Array1<f64>, b: &Array1<f64>) -> f64 {
    ((a - b).mapv(|e| e * e).mean().unwrap()).sqrt()
}
