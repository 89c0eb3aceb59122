//! Throughput of the exact SMO solver (Fan, Chen & Lin, JMLR 2005) on a smooth synthetic
//! function of 20 inputs, next to the bare kernel-block throughput of
//! `Kernel::block_into` measured in the same run, and the fit time of an approximate
//! machine (random Fourier features, Rahimi & Recht, NIPS 2007, D = 2,048, and linear
//! epsilon-SVR by dual coordinate descent with the L1 loss, as the audit fits it) on the
//! same rows. Prints one table; run with `cargo bench --bench smo`, or
//! `cargo bench --bench smo -- 20000` for other sizes.

use std::time::Instant;

use kernlake::features::{build_map, MapKind, MapSpec};
use kernlake::kernel::Kernel;
use kernlake::solver::dcd::{self, DcdSettings, Loss};
use kernlake::solver::smo::{fit, SmoSettings};
use ndarray::{s, Array1, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;

const D: usize = 20;

/// x ~ U[−√3, √3]^20 (unit variance), y = Σ_k sin(x_k)/k + ½ x₁x₂ + 0.1·N(0,1).
fn data(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let h = 3f64.sqrt();
    let x = Array2::from_shape_fn((n, D), |_| rng.random_range(-h..h));
    let y = Array1::from_shape_fn(n, |i| {
        let r = x.row(i);
        let smooth: f64 = r
            .iter()
            .enumerate()
            .map(|(k, v)| v.sin() / (k + 1) as f64)
            .sum();
        let noise: f64 = rng.sample(StandardNormal);
        smooth + 0.5 * r[0] * r[1] + 0.1 * noise
    });
    (x, y)
}

/// Resets the peak resident set size (Linux: writing 5 to `/proc/self/clear_refs`), so
/// that each size reports its own peak; ignored where unsupported.
fn reset_peak_rss() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

/// Seconds to fit the approximate machine: the Fourier map with D = 2,048, the features
/// of every row and DCD (L1 loss, the audit's default tolerance and epochs).
fn approx_seconds(kernel: Kernel, x: &Array2<f64>, y: &Array1<f64>, s: &SmoSettings) -> f64 {
    let t = Instant::now();
    let spec = MapSpec {
        kind: MapKind::Fourier,
        components: 2048,
        seed: 1,
        ..MapSpec::default()
    };
    let map = build_map(&spec, kernel, x.ncols(), Some(x.view())).unwrap();
    let z = map.transform(x.view());
    let settings = DcdSettings {
        c: s.c,
        epsilon: s.epsilon,
        loss: Loss::L1,
        seed: 1,
        ..DcdSettings::default()
    };
    let f = dcd::fit(z.view(), y.view(), &settings, z.nrows()).unwrap();
    std::hint::black_box(&f);
    t.elapsed().as_secs_f64()
}

/// Peak resident set size of this process since the last reset, in MiB (VmHWM).
fn peak_rss_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find(|l| l.starts_with("VmHWM:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse::<f64>().ok())
        .map_or(f64::NAN, |kb| kb / 1024.0)
}

/// Kernel values per second of `Kernel::block_into` on a 1,024 × n block (median of 5:
/// the machine is shared, so the best run would flatter the bare kernel).
fn block_rate(kernel: &Kernel, x: &Array2<f64>) -> f64 {
    let a = x.slice(s![..1024, ..]);
    let mut out = Array2::zeros((1024, x.nrows()));
    let mut times: Vec<f64> = (0..5)
        .map(|_| {
            let t = Instant::now();
            kernel.block_into(a, x.view(), out.view_mut());
            t.elapsed().as_secs_f64()
        })
        .collect();
    std::hint::black_box(&out);
    times.sort_by(f64::total_cmp);
    (1024 * x.nrows()) as f64 / times[2]
}

fn main() {
    // Sizes from the command line (e.g. `-- 20000`), else 5,000 and 10,000.
    let mut sizes: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    // `exact-only` skips the approximate fit.
    let exact_only = std::env::args().any(|a| a == "exact-only");
    if sizes.is_empty() {
        sizes = vec![5_000, 10_000];
    }
    let kernel = Kernel::gaussian(1.0 / (2.0 * D as f64)).unwrap();
    let settings = SmoSettings {
        c: 10.0,
        epsilon: 0.1,
        cache_bytes: 4 << 30,
        ..SmoSettings::default()
    };
    println!(
        "threads: {}; Gaussian kernel gamma = {}, C = {}, epsilon = {}, tol = {}",
        rayon::current_num_threads(),
        kernel.gamma,
        settings.c,
        settings.epsilon,
        settings.tol
    );
    println!(
        "| n | seconds | kernel s | iterations | SVs | kernel evals | SMO evals/s (kernel time) | SMO evals/s (wall) | block_into evals/s | ratio | converged | SMO peak RSS MiB | approx D=2048 s | exact / approx |"
    );
    println!("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|");
    for &n in &sizes {
        let (x, y) = data(n, 7);
        let bare = block_rate(&kernel, &x);
        reset_peak_rss();
        let f = fit(x.view(), y.view(), kernel, &settings).unwrap();
        let rss = peak_rss_mib();
        let approx = if exact_only {
            f64::NAN
        } else {
            approx_seconds(kernel, &x, &y, &settings)
        };
        let r = &f.report;
        let in_rows = r.kernel_evaluations as f64 / r.kernel_seconds.max(1e-12);
        println!(
            "| {n} | {:.2} | {:.2} | {} | {} | {:.3e} | {:.3e} | {:.3e} | {:.3e} | {:.2} | {} | {:.0} | {:.2} | {:.1} |",
            r.seconds,
            r.kernel_seconds,
            r.iterations,
            r.support_vectors,
            r.kernel_evaluations as f64,
            in_rows,
            r.kernel_evaluations as f64 / r.seconds,
            bare,
            in_rows / bare,
            r.converged,
            rss,
            approx,
            r.seconds / approx
        );
    }
}
