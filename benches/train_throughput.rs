//! Throughput harness for out-of-core training (run by `scripts/bench`).
//!
//! Generates the demo scenario (default 10 million rows) as partitioned Parquet in a
//! temporary folder, then measures in one run:
//! 1. a bare read-and-map pass, run twice and the faster kept: read every block,
//!    standardize, map to D features;
//! 2. streamed training epochs from disk with a memory budget too small to keep mapped
//!    blocks resident, so every epoch reads and maps again;
//!
//! and prints rows/s for each, the ratio of one training epoch to the bare pass, the
//! epochs and wall time to the gap tolerance, and the peak resident set size.
//!
//! `cargo bench --bench train_throughput -- [--rows N] [--dim D] [--epochs E]
//! [--tol T] [--memory BYTES] [--dir PATH] [--solver auto|dual|newton|barrier] [--hessian-rows N]`.
//! Without `--bench` (as under `cargo test`) it
//! runs a tiny smoke configuration.

use std::time::Instant;

use kernlake::data::{discover, survey, ResolvedColumns, SurveySettings, TableReader};
use kernlake::features::{build_map, MapSpec};
use kernlake::fit::{FitOptions, Fitter};
use kernlake::kernel::Kernel;
use kernlake::scale::Standardizer;
use kernlake::solver::blocks::{piece_rows, EpochRecord, Method, TrainObserver};
use kernlake::testing::{generate, DemoSpec, FEATURES, TARGET};
use ndarray::{s, Array2};

#[path = "support/rss.rs"]
mod rss;
use rss::{peak_rss_mib, reset_peak_rss};

struct Epochs;
impl TrainObserver for Epochs {
    fn epoch_finished(&self, r: &EpochRecord) {
        eprintln!(
            "  epoch {:>3}: {:.2} s, primal {:.6e}, gap {:.3e}, step {:?}, from memory {} blocks, holdout rmse {:?}",
            r.epoch,
            r.seconds,
            r.objective.primal,
            r.objective.gap,
            r.step,
            r.resident_blocks,
            r.holdout.map(|m| m.rmse)
        );
    }
}

fn arg<T: std::str::FromStr>(args: &[String], name: &str, default: T) -> T {
    args.iter()
        .position(|a| a == name)
        .and_then(|i| args.get(i + 1))
        .and_then(|v| v.parse().ok())
        .unwrap_or(default)
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let bench = args.iter().any(|a| a == "--bench");
    let rows: u64 = arg(&args, "--rows", if bench { 10_000_000 } else { 20_000 });
    let d_out: usize = arg(&args, "--dim", if bench { 1024 } else { 64 });
    let epochs: usize = arg(&args, "--epochs", if bench { 10 } else { 2 });
    let tol: f64 = arg(&args, "--tol", 1e-3);
    let memory: usize = arg(&args, "--memory", 64 << 20);
    let solver: String = arg(&args, "--solver", "auto".to_string());
    let method = match solver.as_str() {
        "dual" => Method::Dual,
        "newton" => Method::Newton,
        "barrier" => Method::Barrier,
        _ => Method::Auto,
    };
    let hessian_rows: Option<usize> = args
        .iter()
        .position(|a| a == "--hessian-rows")
        .and_then(|i| args.get(i + 1))
        .and_then(|v| v.parse().ok());
    let tmp = tempfile::tempdir().expect("temporary folder");
    let dir = args
        .iter()
        .position(|a| a == "--dir")
        .and_then(|i| args.get(i + 1))
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|| tmp.path().to_path_buf());

    let t = Instant::now();
    if discover(&[dir.display().to_string()]).is_err() {
        let spec = DemoSpec {
            rows,
            sites: 40,
            seed: 7,
            start_year: 2025,
        };
        generate(&dir, &spec, &|_| {}).expect("demo data");
        eprintln!(
            "generated {rows} rows in {:.1} s",
            t.elapsed().as_secs_f64()
        );
    }
    let files = discover(&[dir.display().to_string()]).expect("files");
    let columns = ResolvedColumns {
        features: FEATURES.iter().map(|s| s.to_string()).collect(),
        target: Some(TARGET.into()),
    };
    let reader = TableReader::new(files, columns);

    // 1. Bare read-and-map pass.
    let s = survey(
        &reader,
        &SurveySettings {
            sample_rows: 2_000,
            seed: 1,
            threads: 0,
        },
        &|_| {},
    )
    .expect("survey");
    let scaler = Standardizer::from_survey(&s);
    let kernel = Kernel::gaussian(0.1).expect("kernel");
    let spec = MapSpec {
        dim: d_out,
        ..MapSpec::default()
    };
    let map = build_map(&spec, kernel, FEATURES.len(), None).expect("map");
    // Mapped in pieces of the size training maps, so both passes do the same work.
    let piece = piece_rows(d_out);
    let mut z = Array2::zeros((piece, d_out));
    // Two bare passes; the faster one is the baseline (the first also warms the page
    // cache and the thread pool, which the training's later epochs find warm too).
    let mut bare = f64::INFINITY;
    let mut n = 0u64;
    for _ in 0..2 {
        let t = Instant::now();
        n = 0;
        for b in reader.blocks().expect("blocks") {
            let mut b = b.expect("block");
            scaler.apply(b.x.view_mut());
            let kept = b.x.nrows();
            for lo in (0..kept).step_by(piece) {
                let hi = (lo + piece).min(kept);
                map.transform_into(b.x.slice(s![lo..hi, ..]), z.slice_mut(s![..hi - lo, ..]));
            }
            n += b.rows as u64;
        }
        let secs = t.elapsed().as_secs_f64();
        eprintln!("bare read+map pass: {secs:.2} s");
        bare = bare.min(secs);
    }
    let peak_before_training = peak_rss_mib();
    reset_peak_rss();
    eprintln!(
        "bare read+map: {n} rows in {bare:.2} s = {:.0} rows/s",
        n as f64 / bare
    );

    // 2. Streamed training from disk.
    let opts = FitOptions {
        gamma: Some(0.1),
        map: spec,
        max_epochs: epochs,
        tol,
        memory_bytes: memory,
        holdout: 0.01,
        patience: 0,
        sweeps_per_block: 3, // as `kernlake fit` does by default
        method,
        hessian_rows,
        seed: 3,
        ..FitOptions::default()
    };
    let t = Instant::now();
    let model = Fitter::from_options(opts)
        .fit_files(&reader, &Epochs, &|_| {})
        .expect("fit");
    let total = t.elapsed().as_secs_f64();
    let r = &model.report;
    let per_epoch: Vec<f64> = r.history.iter().map(|h| h.seconds).collect();
    let mean_epoch = per_epoch.iter().sum::<f64>() / per_epoch.len().max(1) as f64;
    println!("solver                     {:?}", r.method);
    println!("rows                       {n}");
    println!("D                          {d_out}");
    println!(
        "bare read+map              {:.0} rows/s ({bare:.2} s)",
        n as f64 / bare
    );
    println!(
        "training epoch (mean)      {:.0} rows/s ({mean_epoch:.2} s)",
        n as f64 / mean_epoch
    );
    println!("epoch / bare pass          {:.2}x", mean_epoch / bare);
    println!(
        "fit                        {} epochs, stop {:?}, gap {:.2e}, {total:.1} s wall",
        r.epochs, r.stop, r.objective.gap
    );
    println!(
        "peak RSS                   {:.0} MiB in training ({peak_before_training:.0} MiB up to the bare pass)",
        peak_rss_mib()
    );
}
