//! Dual coordinate descent for linear epsilon-SVR (Ho & Lin, JMLR 2012) with block
//! minimization (Yu, Hsieh, Chang & Lin, KDD 2010): row visits per second at D = 1,024,
//! and epochs (passes over the data) to reach relative duality gaps 1e-3 and 1e-6 on
//! CCPP (Tüfekci, Int. J. Electrical Power & Energy Systems 60, 2014) with D = 1,000
//! Gaussian random Fourier features (Rahimi & Recht, NIPS 2007), standardized target,
//! epsilon = 0.05, for both losses at C = 10 and C = 100, plain against accelerated.
//!
//! `cargo bench --bench dcd` runs everything (pass `--bench` to the binary to get the
//! full run under another profile); without `--bench` a small smoke run is made.

use kernlake::features::{FeatureMap, FourierMap, FourierVariant};
use kernlake::kernel::Kernel;
use kernlake::solver::dcd::{
    solve_block, BlockWorkspace, DcdSettings, DcdState, Loss, PrimalAccumulator,
};
use kernlake::solver::newton;
use ndarray::{s, Array1, Array2, ArrayView2, Axis};
use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::time::Instant;

/// CCPP inputs (standardized) and the standardized target.
fn ccpp() -> (Array2<f64>, Array1<f64>) {
    let (mut x, y_raw) = kernlake::testing::ccpp();
    for mut c in x.axis_iter_mut(Axis(1)) {
        let (m, sd) = (c.mean().unwrap(), c.std(0.0));
        c.mapv_inplace(|v| (v - m) / sd);
    }
    let y = y_raw;
    let (m, sd) = (y.mean().unwrap(), y.std(0.0));
    (x, y.mapv(|v| (v - m) / sd))
}

/// Gaussian random Fourier features from the library (cos + phase variant, Rahimi & Recht,
/// NIPS 2007), γ = 1/(2d) on standardized inputs.
fn rff(x: ArrayView2<f64>, dim: usize, seed: u64) -> Array2<f64> {
    let d = x.ncols();
    let kernel = Kernel::gaussian(1.0 / (2.0 * d as f64)).expect("positive gamma");
    FourierMap::new(kernel, d, dim, FourierVariant::CosPhase, seed)
        .expect("valid map")
        .transform(x)
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
    /// Free support vectors kept across blocks (None: the default 2·(D + 1)).
    cache: Option<usize>,
}

/// The streaming trainer's loop on in-memory data: epochs of `solve_block` over blocks in
/// a shuffled order, then a pass for the primal. Returns (gap per epoch, updates).
fn run(
    z: ArrayView2<f64>,
    y: &Array1<f64>,
    settings: &DcdSettings,
    v: &Variant,
) -> (Vec<f64>, u64) {
    let (n, d) = z.dim();
    let mut state = DcdState::new(d, n);
    let mut ws = match v.cache {
        Some(rows) => BlockWorkspace::with_cache_rows(rows),
        None => BlockWorkspace::new(),
    };
    let mut rng = ChaCha8Rng::seed_from_u64(settings.seed);
    let index: Vec<usize> = (0..n).collect();
    let blocks = n.div_ceil(v.block);
    let range = |b: usize| b * v.block..((b + 1) * v.block).min(n);
    let mut order: Vec<usize> = (0..blocks).collect();
    let (mut gaps, mut updates) = (Vec::new(), 0);
    for _ in 0..settings.max_epochs {
        order.shuffle(&mut rng);
        for &b in &order {
            let r = range(b);
            let st = solve_block(
                &mut state,
                z.slice(s![r.clone(), ..]),
                y.slice(s![r.clone()]),
                &index[r],
                settings,
                &mut rng,
                &mut ws,
            );
            updates += st.updates;
        }
        let mut acc = PrimalAccumulator::new();
        for b in 0..blocks {
            let r = range(b);
            acc.add_block(&state, z.slice(s![r.clone(), ..]), y.slice(s![r]), settings);
        }
        let gap = acc.finish(&state, settings).gap;
        gaps.push(gap);
        if gap <= settings.tol {
            break;
        }
    }
    (gaps, updates)
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
    let max_epochs = if full {
        std::env::var("DCD_BENCH_EPOCHS")
            .ok()
            .and_then(|v| v.parse().ok())
            .unwrap_or(100)
    } else {
        5
    };
    // Optional filter, e.g. DCD_BENCH_PROBLEMS="L1:10,L1:100".
    let only = std::env::var("DCD_BENCH_PROBLEMS").unwrap_or_default();
    let variants = [
        Variant {
            name: "plain: 1 sweep, no shrink, no cache",
            shrinking: false,
            sweeps: 1,
            block: 1024,
            cache: Some(0),
        },
        Variant {
            name: "block min.: 20 sweeps+shrink",
            shrinking: true,
            sweeps: 20,
            block: 1024,
            cache: Some(0),
        },
        Variant {
            name: "20 sweeps+shrink+free-SV cache",
            shrinking: true,
            sweeps: 20,
            block: 1024,
            cache: None,
        },
        Variant {
            name: "100 sweeps+shrink+free-SV cache (L1)",
            shrinking: true,
            sweeps: 100,
            block: 1024,
            cache: None,
        },
    ];
    println!(
        "\nepochs to relative gap (D = {dim}, eps = 0.05, blocks of 1024 rows unless 1 block, at most {max_epochs} epochs)"
    );
    println!(
        "{:<5} {:>5}  {:<36} {:>8} {:>8} {:>10} {:>12} {:>8}",
        "loss", "C", "variant", "to 1e-3", "to 1e-6", "final gap", "updates", "seconds"
    );
    for (loss, c) in [
        (Loss::L2, 10.0),
        (Loss::L2, 100.0),
        (Loss::L1, 10.0),
        (Loss::L1, 100.0),
    ] {
        if !only.is_empty() && !only.split(',').any(|p| p == format!("{loss:?}:{c}")) {
            continue;
        }
        if loss == Loss::L2 {
            // The primal Newton solver (one pass per iteration), exact and sampled Hessian.
            for hessian_rows in [usize::MAX, 2048] {
                let settings = DcdSettings {
                    c,
                    epsilon: 0.05,
                    loss,
                    tol: 1e-9,
                    max_epochs,
                    seed: 7,
                    ..DcdSettings::default()
                };
                let t = Instant::now();
                let fit = newton::fit(z.view(), y.view(), &settings, hessian_rows).expect("fit");
                let secs = t.elapsed().as_secs_f64();
                let gaps: Vec<f64> = fit.report.history.iter().map(|o| o.gap).collect();
                let name = if hessian_rows == usize::MAX {
                    "newton: exact Hessian".to_string()
                } else {
                    format!("newton: Hessian from {hessian_rows} rows")
                };
                println!(
                    "{:<5} {:>5}  {:<36} {:>8} {:>8} {:>10.2e} {:>12} {:>8.2}",
                    format!("{loss:?}"),
                    c,
                    name,
                    first_epoch_below(&gaps, 1e-3),
                    first_epoch_below(&gaps, 1e-6),
                    gaps.last().unwrap(),
                    "-",
                    secs
                );
            }
        }
        for v in &variants {
            if v.name.ends_with("(L1)") && loss != Loss::L1 {
                continue;
            }
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
            let (gaps, updates) = run(z.view(), &y, &settings, v);
            let secs = t.elapsed().as_secs_f64();
            println!(
                "{:<5} {:>5}  {:<36} {:>8} {:>8} {:>10.2e} {:>12} {:>8.2}",
                format!("{loss:?}"),
                c,
                v.name,
                first_epoch_below(&gaps, 1e-3),
                first_epoch_below(&gaps, 1e-6),
                gaps.last().unwrap(),
                updates,
                secs
            );
        }
    }
}
