//! Dual coordinate descent for linear epsilon-SVR (Ho & Lin, JMLR 2012) with block
//! minimization (Yu, Hsieh, Chang & Lin, KDD 2010): row visits per second at D = 1,024,
//! and epochs (passes over the data) to reach relative duality gaps 1e-3 and 1e-6 on
//! CCPP (Tüfekci, Int. J. Electrical Power & Energy Systems 60, 2014) with D = 1,000
//! Gaussian random Fourier features (Rahimi & Recht, NIPS 2007), standardized target,
//! epsilon = 0.05, for both losses at C = 10 and C = 100, plain against accelerated.
//!
//! `cargo bench --bench dcd` runs everything (pass `--bench` to the binary to get the
//! full run under another profile); without `--bench` a small smoke run is made.

use kernlake::solver::dcd::{fit, solve_block, BlockWorkspace, DcdSettings, DcdState, Loss};
use ndarray::{s, Array1, Array2, ArrayView2, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use std::time::Instant;

/// CCPP inputs (standardized) and the standardized target.
fn ccpp() -> (Array2<f64>, Array1<f64>) {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/data/ccpp_folds5x2_sheet1.csv"
    );
    let text = std::fs::read_to_string(path).expect("CCPP file");
    let rows: Vec<Vec<f64>> = text
        .lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split(',').map(|t| t.trim().parse().unwrap()).collect())
        .collect();
    let t = Array2::from_shape_fn((rows.len(), 5), |(i, j)| rows[i][j]);
    let mut x = t.slice(s![.., ..4]).to_owned();
    for mut c in x.axis_iter_mut(Axis(1)) {
        let (m, sd) = (c.mean().unwrap(), c.std(0.0));
        c.mapv_inplace(|v| (v - m) / sd);
    }
    let y = t.column(4).to_owned();
    let (m, sd) = (y.mean().unwrap(), y.std(0.0));
    (x, y.mapv(|v| (v - m) / sd))
}

/// Minimal Gaussian random Fourier features: √(2/D)·cos(Wx + b), W ~ N(0, 2γ),
/// b ~ U[0, 2π), γ = 1/(2d) (to be replaced by the library's map).
fn rff(x: ArrayView2<f64>, dim: usize, seed: u64) -> Array2<f64> {
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

/// Row visits per second of one DCD sweep (dot + step + axpy) at D = 1,024.
fn visits_per_second(x: ArrayView2<f64>, y: &Array1<f64>, rows: usize, sweeps: usize) {
    let z = rff(x.slice(s![..rows, ..]), 1024, 1);
    let y = y.slice(s![..rows]);
    let index: Vec<usize> = (0..rows).collect();
    let settings = DcdSettings {
        c: 10.0,
        epsilon: 0.05,
        loss: Loss::L2,
        shrinking: false,
        sweeps_per_block: 1,
        ..DcdSettings::default()
    };
    let mut state = DcdState::new(1024, rows);
    let mut rng = ChaCha8Rng::seed_from_u64(0);
    let mut ws = BlockWorkspace::new();
    let t = Instant::now();
    for _ in 0..sweeps {
        solve_block(
            &mut state,
            z.view(),
            y,
            &index,
            &settings,
            &mut rng,
            &mut ws,
        );
    }
    let secs = t.elapsed().as_secs_f64();
    let visits = (rows * sweeps) as f64;
    println!(
        "  block of {rows:>6} rows (D = 1,024, f64): {:>6.0} ns per row visit, {:.2} M visits/s",
        1e9 * secs / visits,
        visits / secs / 1e6
    );
}

struct Variant {
    name: &'static str,
    shrinking: bool,
    sweeps: usize,
    block: usize,
}

fn first_epoch_below(history: &[f64], tol: f64) -> String {
    match history.iter().position(|g| *g <= tol) {
        Some(k) => format!("{}", k + 1),
        None => format!(">{}", history.len()),
    }
}

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let (x, y) = ccpp();
    let (x, y) = if full {
        (x, y)
    } else {
        (
            x.slice(s![..1000, ..]).to_owned(),
            y.slice(s![..1000]).to_owned(),
        )
    };
    let n = x.nrows();
    println!(
        "dcd bench ({} run), CCPP rows = {n}",
        if full { "full" } else { "smoke" }
    );
    println!("coordinate-descent throughput:");
    visits_per_second(x.view(), &y, 256.min(n), if full { 400 } else { 4 });
    visits_per_second(x.view(), &y, n, if full { 20 } else { 1 });

    let dim = if full { 1000 } else { 200 };
    let z = rff(x.view(), dim, 42);
    let max_epochs = if full { 100 } else { 5 };
    let variants = [
        Variant {
            name: "plain (1 sweep, no shrinking)",
            shrinking: false,
            sweeps: 1,
            block: 1024,
        },
        Variant {
            name: "shrinking, 1 sweep/block",
            shrinking: true,
            sweeps: 1,
            block: 1024,
        },
        Variant {
            name: "shrinking, <= 20 sweeps/block",
            shrinking: true,
            sweeps: 20,
            block: 1024,
        },
        Variant {
            name: "shrinking, <= 20 sweeps, 1 block",
            shrinking: true,
            sweeps: 20,
            block: n,
        },
        Variant {
            name: "shrinking, <= 200 sweeps, 1 block",
            shrinking: true,
            sweeps: 200,
            block: n,
        },
    ];
    println!(
        "\nepochs to relative gap (D = {dim}, eps = 0.05, blocks of 1024 rows unless 1 block, at most {max_epochs} epochs)"
    );
    println!(
        "{:<5} {:>5}  {:<32} {:>8} {:>8} {:>10} {:>12} {:>8}",
        "loss", "C", "variant", "to 1e-3", "to 1e-6", "final gap", "updates", "seconds"
    );
    for (loss, c) in [
        (Loss::L2, 10.0),
        (Loss::L2, 100.0),
        (Loss::L1, 10.0),
        (Loss::L1, 100.0),
    ] {
        for v in &variants {
            let settings = DcdSettings {
                c,
                epsilon: 0.05,
                loss,
                shrinking: v.shrinking,
                sweeps_per_block: v.sweeps,
                tol: 1e-6,
                max_epochs,
                seed: 7,
            };
            let t = Instant::now();
            let f = fit(z.view(), y.view(), &settings, v.block).expect("fit");
            let secs = t.elapsed().as_secs_f64();
            let gaps: Vec<f64> = f.report.history.iter().map(|o| o.gap).collect();
            println!(
                "{:<5} {:>5}  {:<32} {:>8} {:>8} {:>10.2e} {:>12} {:>8.2}",
                format!("{loss:?}"),
                c,
                v.name,
                first_epoch_below(&gaps, 1e-3),
                first_epoch_below(&gaps, 1e-6),
                f.report.objective.gap,
                f.report.updates,
                secs
            );
        }
    }
}
