//! Test data: open datasets read from tests/data, Friedman #1 and inline Gaussian
//! random Fourier features.

use ndarray::{s, Array1, Array2, ArrayView1, ArrayView2, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

const DATA: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/data/");

/// Reads a numeric table (any of comma, tab or space separators; a header line that does
/// not parse is skipped), returning all columns.
pub fn read_table(file: &str) -> Array2<f64> {
    let text = std::fs::read_to_string(format!("{DATA}{file}")).expect("dataset file");
    let mut rows: Vec<Vec<f64>> = Vec::new();
    for line in text.lines() {
        let parsed: Result<Vec<f64>, _> = line
            .split(|c: char| c == ',' || c.is_whitespace())
            .filter(|t| !t.is_empty())
            .map(str::parse::<f64>)
            .collect();
        match parsed {
            Ok(v) if !v.is_empty() => rows.push(v),
            _ => continue,
        }
    }
    let cols = rows[0].len();
    Array2::from_shape_fn((rows.len(), cols), |(i, j)| rows[i][j])
}

/// Splits a table into standardized inputs (all columns but the last) and the raw target.
pub fn inputs_and_target(t: &Array2<f64>) -> (Array2<f64>, Array1<f64>) {
    let d = t.ncols() - 1;
    let mut x = t.slice(s![.., ..d]).to_owned();
    for mut c in x.axis_iter_mut(Axis(1)) {
        let m = c.mean().unwrap();
        let sd = c.std(0.0);
        c.mapv_inplace(|v| (v - m) / sd);
    }
    (x, t.column(d).to_owned())
}

/// Gaussian random Fourier features (Rahimi & Recht, NIPS 2007): √(2/D)·cos(Wx + b),
/// W ~ N(0, 2γ), b ~ U[0, 2π), γ = 1/(2d).
pub fn rff(x: ArrayView2<f64>, dim: usize, seed: u64) -> Array2<f64> {
    let d = x.ncols();
    let gamma = 1.0 / (2.0 * d as f64);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let normal = Normal::new(0.0, (2.0 * gamma).sqrt()).unwrap();
    let w = Array2::from_shape_fn((d, dim), |_| normal.sample(&mut rng));
    let b = Array1::from_shape_fn(dim, |_| rng.random::<f64>() * std::f64::consts::TAU);
    let scale = (2.0 / dim as f64).sqrt();
    let mut z = x.dot(&w);
    for mut row in z.rows_mut() {
        for (v, bj) in row.iter_mut().zip(b.iter()) {
            *v = scale * (*v + bj).cos();
        }
    }
    z
}

/// Friedman #1 (published: Friedman, Annals of Statistics 1991), the project's one
/// generator: (x, noisy y).
pub fn friedman1(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let (x, y, _) = kernlake::testing::friedman1(n, seed);
    (x, y)
}

pub fn ccpp(rows: usize) -> (Array2<f64>, Array1<f64>) {
    let t = read_table("ccpp_folds5x2_sheet1.csv");
    inputs_and_target(&t.slice(s![..rows, ..]).to_owned())
}

pub fn sd(y: ArrayView1<f64>) -> f64 {
    y.std(0.0)
}

/// Friedman #1 (Friedman, Annals of Statistics 1991), 200 rows, seed 11, with the
/// deterministic non-linear features x, x² and sin(π x1 x2) (21 columns).
pub fn friedman_features() -> (Array2<f64>, Array1<f64>) {
    let (x, y) = friedman1(200, 11);
    let mut z = Array2::zeros((200, 21));
    for i in 0..200 {
        for j in 0..10 {
            z[[i, j]] = x[[i, j]];
            z[[i, 10 + j]] = x[[i, j]] * x[[i, j]];
        }
        z[[i, 20]] = (std::f64::consts::PI * x[[i, 0]] * x[[i, 1]]).sin();
    }
    (z, y)
}
