//! Support shared by the project's own tests and benchmarks; not part of the API: the
//! one Friedman #1 generator and CCPP reader, and the internals the tests check directly
//! (atomic writes, the invented demo scenario).

pub use crate::atomic::{create_dir_durable, is_temp_name, AtomicFile};
pub use crate::demo::{generate, months, DemoSpec, FEATURES, TARGET};

use ndarray::{Array1, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Friedman #1 (published: Friedman, Annals of Statistics 19 (1991), eq. for "#1"):
/// x ~ U(0, 1)^10, f = 10 sin(π x1 x2) + 20 (x3 − ½)² + 10 x4 + 5 x5, y = f + N(0,1).
/// All inputs are drawn first, then the noise, from one ChaCha8 stream seeded by `seed`.
/// Returns (x, noisy y, noise-free f).
pub fn friedman1(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, 10), |_| rng.random::<f64>());
    let f = Array1::from_shape_fn(n, |i| {
        let r = x.row(i);
        10.0 * (std::f64::consts::PI * r[0] * r[1]).sin()
            + 20.0 * (r[2] - 0.5).powi(2)
            + 10.0 * r[3]
            + 5.0 * r[4]
    });
    let noise: Array1<f64> =
        Array1::from_shape_fn(n, |_| rng.sample::<f64, _>(rand_distr::StandardNormal));
    let y = &f + &noise;
    (x, y, f)
}

/// CCPP (dataset: Tüfekci, Int. J. Electrical Power & Energy Systems 60 (2014) 126–140;
/// tests/data, CC BY 4.0): raw inputs AT, V, AP, RH and the target PE (MW).
pub fn ccpp() -> (Array2<f64>, Array1<f64>) {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/ccpp_folds5x2_sheet1.csv"
    );
    let text = std::fs::read_to_string(path).expect("the CCPP file in tests/data");
    let rows: Vec<Vec<f64>> = text
        .lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split(',').map(|v| v.trim().parse().unwrap()).collect())
        .collect();
    let x = Array2::from_shape_fn((rows.len(), 4), |(i, j)| rows[i][j]);
    let y = Array1::from_shape_fn(rows.len(), |i| rows[i][4]);
    (x, y)
}
