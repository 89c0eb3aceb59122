//! Validation search time (issue 6): a 5 × 5 × 3 grid (gamma × C × epsilon) at D = 1,024
//! on Friedman #1 (Friedman, Annals of Statistics 1991), 3-fold, with and without
//! successive halving (Jamieson & Talwalkar, AISTATS 2016) and warm starts along C, side
//! by side in one run (ratios, not absolute figures, are what carries to other machines).
//!
//! `cargo bench --bench tune` runs the full measurement (rows from `KL_TUNE_ROWS`,
//! default 5,000; the issue asks for 20,000, which takes tens of minutes without halving
//! on two shared cores). Without `--bench` a small smoke run is made.

use std::time::Instant;

use kernlake::tune::{tune, TuneOptions, TuneReport};
use ndarray::{Array1, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Friedman #1: x ~ U[0,1]^10, y = 10 sin(π x1 x2) + 20 (x3 − ½)² + 10 x4 + 5 x5 + N(0,1).
fn friedman1(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, 10), |_| rng.random::<f64>());
    let y = Array1::from_shape_fn(n, |i| {
        let r = x.row(i);
        10.0 * (std::f64::consts::PI * r[0] * r[1]).sin()
            + 20.0 * (r[2] - 0.5).powi(2)
            + 10.0 * r[3]
            + 5.0 * r[4]
            + rng.sample::<f64, _>(rand_distr::StandardNormal)
    });
    (x, y)
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let rows = if full {
        std::env::var("KL_TUNE_ROWS")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(5_000)
    } else {
        400
    };
    let d = if full { 1_024 } else { 64 };
    let (x, y) = friedman1(rows, 1);
    println!(
        "tune bench ({} run): Friedman #1, {rows} rows, 5 × 5 × 3 grid, D = {d}, 3-fold, {} threads",
        if full { "full" } else { "smoke" },
        rayon::current_num_threads()
    );
    let mut base_seconds = None;
    for (halving, warm) in [(true, true), (true, false), (false, true), (false, false)] {
        let opts = TuneOptions {
            halving,
            warm_start: warm,
            components: d,
            max_components: d,
            max_epochs: if full { 27 } else { 3 },
            seed: 1,
            ..TuneOptions::default()
        };
        let t = Instant::now();
        let r: TuneReport = tune(x.view(), y.view(), &opts).expect("tune runs");
        let s = t.elapsed().as_secs_f64();
        let base = *base_seconds.get_or_insert(s);
        println!(
            "  halving {:<5} warm start {:<5}: {s:8.2} s ({:5.2}× the first), {:6} epochs, best val. RMSE {:.4} (gamma {:.4e}, C {:.4e}, epsilon {:.4e})",
            halving,
            warm,
            s / base,
            r.epochs_total,
            r.best.error,
            r.best.gamma,
            r.best.c,
            r.best.epsilon
        );
    }
}
