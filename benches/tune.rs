//! Wall time of the validation search with its defaults (issue 14) on CCPP (dataset:
//! Tüfekci, Int. J. Electrical Power & Energy Systems 60, 2014; tests/data), all 9,568
//! rows as the sample, as `kernlake tune` uses them; target: within 60 s on 2 cores.
//!
//! `cargo bench --bench tune` runs the measurement; without `--bench` (as `cargo test
//! --benches` runs it) a small smoke run on 1,000 rows is made.

use std::time::Instant;

use kernlake::tune::{tune, TuneOptions};

fn main() {
    let full = std::env::args().any(|a| a == "--bench");
    let (x, y) = kernlake::testing::ccpp();
    let n = if full { x.nrows() } else { 1_000 };
    let (x, y) = (x.slice(ndarray::s![..n, ..]), y.slice(ndarray::s![..n]));
    let opts = TuneOptions {
        exact_rows: if full {
            std::env::var("KL_EXACT_ROWS")
                .ok()
                .and_then(|v| v.parse().ok())
                .unwrap_or(TuneOptions::default().exact_rows)
        } else {
            300
        },
        max_dim: if full { 4_096 } else { 256 },
        rows_total: Some(n as u64),
        ..TuneOptions::default()
    };
    let t = Instant::now();
    let r = tune(x, y, &opts).expect("tune runs");
    let steps: Vec<u64> = r.candidates.iter().map(|c| c.steps).collect();
    println!(
        "Newton steps per candidate (largest over folds): mean {:.1}, max {}",
        steps.iter().sum::<u64>() as f64 / steps.len() as f64,
        steps.iter().max().unwrap_or(&0)
    );
    println!(
        "tune bench ({} run): CCPP, {n} rows, {} exact rows, {} threads: {:.2} s ({:.2} s on the grid); {} candidates, {} edge moves; chosen gamma ×{}, C ×{}, epsilon ×{}, D = {}; val. RMSE exact {:.4}, on the map {:.4}; defaults {:.4} ± {:.4}",
        if full { "full" } else { "smoke" },
        r.exact_rows,
        rayon::current_num_threads(),
        t.elapsed().as_secs_f64(),
        r.grid_seconds,
        r.candidates.len(),
        r.extensions,
        r.best.factors[0],
        r.best.factors[1],
        r.best.factors[2],
        r.chosen_dim,
        r.best.error,
        r.chosen_error,
        r.default.error,
        r.default.se
    );
}
