//! The streamed fit over Parquet files against the in-memory fit of the same rows.

use crate::common::{self, ccpp, friedman1, write_parts};
use kernlake::data::{discover, resolve_columns, ColumnSelection, CsvOptions, TableReader};
use kernlake::fit::Fitter;
use kernlake::model::Model;
use kernlake::solver::blocks::Silent;
use ndarray::{s, Axis};

fn names(d: usize) -> Vec<String> {
    let mut v: Vec<String> = (1..=d).map(|j| format!("x{j}")).collect();
    v.push("y".into());
    v
}

fn reader_for(dir: &std::path::Path, block_rows: usize) -> TableReader {
    let files = discover(&[dir.display().to_string()]).unwrap();
    let sel = ColumnSelection {
        target: Some("y".into()),
        ..Default::default()
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    TableReader::new(files, cols).with_batch_rows(block_rows)
}

fn fitter() -> Fitter {
    Fitter::new()
        .with_dim(128)
        .with_gamma(0.08)
        .with_c(10.0)
        .with_epsilon(0.1)
        .with_seed(4)
        .with_max_epochs(30)
}

#[test]
fn ten_parquet_files_give_the_in_memory_model() {
    // common practice (block minimization is a deterministic function of the block
    // layout and seed, Yu et al. KDD 2010): same rows, same blocks ⇒ same weights.
    // Data: Friedman #1 (published: Friedman 1991).
    let (x, y, _) = friedman1(2_000, 31);
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &names(10), &x, &y, 10);
    let streamed = fitter()
        .with_block_rows(200)
        .fit_files(&reader_for(dir.path(), 200), &Silent, &|_| {})
        .unwrap();
    let memory = fitter()
        .with_block_rows(200)
        .fit(x.view(), y.view())
        .unwrap();
    let diff = (&streamed.weights - &memory.weights)
        .mapv(f64::abs)
        .fold(0.0f64, |a, &b| a.max(b));
    assert!(diff <= 1e-10, "weights differ by {diff}");
    assert!((streamed.intercept - memory.intercept).abs() <= 1e-10);
}

#[test]
fn same_seed_gives_identical_model_bytes_with_one_and_two_threads() {
    // common practice (our determinism contract).
    let (x, y, _) = friedman1(1_500, 32);
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &names(10), &x, &y, 4);
    let fit = |t: usize| {
        fitter()
            .with_threads(t)
            .with_holdout(0.1)
            .fit_files(&reader_for(dir.path(), 256), &Silent, &|_| {})
            .unwrap()
    };
    let (a, b) = (fit(1), fit(2));
    let bytes = |m: &Model| m.to_model_file().unwrap().to_bytes().unwrap();
    assert_eq!(bytes(&a), bytes(&b));
}

#[test]
fn two_block_sizes_converge_to_the_same_predictions() {
    // published (Ho & Lin 2012): the L2-loss dual is strictly convex, so its optimum is
    // unique whatever the visiting order; run both for a fixed, large number of epochs
    // (tolerance 0) so both reach the optimum to machine precision.
    let (x, y, _) = friedman1(400, 33);
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &names(10), &x, &y, 3);
    let fit = |rows: usize| {
        fitter()
            .with_tol(0.0)
            .with_max_epochs(600)
            .fit_files(&reader_for(dir.path(), rows), &Silent, &|_| {})
            .unwrap()
    };
    let (a, b) = (fit(50), fit(160));
    let xs = x.slice(s![..200, ..]);
    let diff = (&a.predict(xs) - &b.predict(xs))
        .mapv(f64::abs)
        .fold(0.0f64, |m, &v| m.max(v));
    assert!(diff <= 1e-9, "predictions differ by {diff}");
}

#[test]
fn ccpp_streamed_holdout_matches_the_in_memory_fit() {
    // dataset: Tüfekci (2014), CCPP, written to Parquet in six files. The streamed fit's
    // holdout RMSE must be within 2% of the in-memory fit on the same holdout rows.
    let (header, x, y) = ccpp();
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &header, &x, &y, 6);
    let files = discover(&[dir.path().display().to_string()]).unwrap();
    let sel = ColumnSelection {
        target: Some("PE".into()),
        ..Default::default()
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    let reader = TableReader::new(files, cols);
    // gamma = 1 as in tests/accuracy.rs; C = 3 (squared loss) so that both fits reach
    // the gap tolerance and are compared at their optimum, not mid-way.
    let f = Fitter::new()
        .with_dim(1_000)
        .with_gamma(1.0)
        .with_c(3.0)
        .with_seed(2)
        .with_holdout(0.2)
        .with_tol(1e-3)
        .with_max_epochs(300);
    let streamed = f.clone().fit_files(&reader, &Silent, &|_| {}).unwrap();
    let m = streamed.report.holdout.unwrap();
    // The same split in memory: rows the trainer holds out, by its own hash rule.
    let hold: Vec<usize> = (0..x.nrows())
        .filter(|&i| kernlake::solver::blocks::is_holdout(i as u64, 2, 0.2))
        .collect();
    let train: Vec<usize> = (0..x.nrows()).filter(|i| !hold.contains(i)).collect();
    let mem = f
        .with_holdout(0.0)
        .fit(
            x.select(Axis(0), &train).view(),
            y.select(Axis(0), &train).view(),
        )
        .unwrap();
    let e_mem = common::rmse(
        &mem.predict(x.select(Axis(0), &hold).view()),
        &y.select(Axis(0), &hold),
    );
    eprintln!(
        "ccpp streamed holdout {:.4} MW, in-memory {:.4} MW",
        m.rmse, e_mem
    );
    assert_eq!(m.n as usize, hold.len());
    assert!(
        (m.rmse - e_mem).abs() <= 0.02 * e_mem,
        "{} vs {}",
        m.rmse,
        e_mem
    );
}

#[test]
fn newton_gives_identical_model_bytes_whether_rows_are_kept_mapped_or_mapped_on_each_pass() {
    // common practice (our determinism contract): the mapped rows depend only on their
    // input rows, so a Newton pass that maps rows a few at a time while it reads them
    // (blocks that do not stay resident) must give the very bytes of one that reads rows
    // mapped once and kept (blocks within the memory budget), whatever the thread count
    // and whatever share of the blocks the budget keeps. The Hessian is sampled (300 rows
    // a pass), so the leverage sketch and the row sample run on both paths.
    // Data: Friedman #1 (published: Friedman 1991).
    let (x, y, _) = friedman1(1_500, 35);
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &names(10), &x, &y, 4);
    let fit = |memory: usize, threads: usize| {
        fitter()
            .with_hessian_rows(Some(300))
            .with_memory_bytes(memory)
            .with_threads(threads)
            .with_holdout(0.1)
            .fit_files(&reader_for(dir.path(), 256), &Silent, &|_| {})
            .unwrap()
    };
    // The report records how many blocks each pass read from memory; everything else
    // must match byte for byte.
    let bytes = |mut m: Model| {
        for h in &mut m.report.history {
            h.resident_blocks = 0;
        }
        m.to_model_file().unwrap().to_bytes().unwrap()
    };
    let from_memory = |m: &Model| m.report.history.last().unwrap().resident_blocks;
    let resident = fit(1 << 30, 2);
    assert!(
        resident.report.epochs >= 3,
        "the fit should take several passes"
    );
    assert_eq!(from_memory(&resident), 8, "every block resident");
    let reference = bytes(resident);
    // Four files of 375 rows read in batches of 256: eight blocks. 128 features × 8 bytes
    // × ~340 training rows a file: 700,000 bytes keep some of them but not all; 0 none.
    for (memory, threads, kept) in [
        (0, 1, 0..1),
        (0, 2, 0..1),
        (700_000, 2, 1..8),
        (1 << 30, 1, 8..9),
    ] {
        let other = fit(memory, threads);
        assert!(
            kept.contains(&from_memory(&other)),
            "memory {memory}: {} blocks from memory",
            from_memory(&other)
        );
        assert!(
            bytes(other) == reference,
            "memory {memory} bytes, {threads} threads: the model differs"
        );
    }
}

/// The linear loss with its default solver (the barrier method of
/// `kernlake::solver::barrier`).
fn barrier_fitter() -> Fitter {
    fitter()
        .with_loss(kernlake::solver::dcd::Loss::L1)
        .with_tol(1e-6)
        .with_max_epochs(200)
}

#[test]
fn barrier_streams_ten_parquet_files_as_in_memory_and_thread_count_keeps_the_bytes() {
    // common practice (our determinism contract): the barrier pass sums fixed chunks of
    // rows in block order, so the streamed fit over ten files equals the in-memory fit
    // of the same rows up to the rounding of regrouped sums (the in-memory blocks need
    // not end where the files do), and the thread count and the memory budget (blocks
    // kept mapped or mapped again each pass) change no bit of the model.
    // Data: Friedman #1 (published: Friedman 1991).
    let (x, y, _) = friedman1(2_000, 31);
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &names(10), &x, &y, 10);
    let streamed = barrier_fitter()
        .with_block_rows(200)
        .fit_files(&reader_for(dir.path(), 200), &Silent, &|_| {})
        .unwrap();
    assert_eq!(
        streamed.report.method,
        kernlake::solver::blocks::Method::Barrier
    );
    assert!(
        streamed.report.objective.gap <= 1e-6,
        "{:?}",
        streamed.report.objective
    );
    let memory = barrier_fitter()
        .with_block_rows(200)
        .fit(x.view(), y.view())
        .unwrap();
    let xs = x.slice(s![..500, ..]);
    let diff = (&streamed.predict(xs) - &memory.predict(xs))
        .mapv(f64::abs)
        .fold(0.0f64, |a, &b| a.max(b));
    assert!(diff <= 1e-9 * y.std(0.0), "predictions differ by {diff}");

    let fit = |threads: usize, memory: usize| {
        barrier_fitter()
            .with_threads(threads)
            .with_memory_bytes(memory)
            .with_holdout(0.1)
            .fit_files(&reader_for(dir.path(), 256), &Silent, &|_| {})
            .unwrap()
    };
    let bytes = |mut m: Model| {
        for h in &mut m.report.history {
            h.resident_blocks = 0;
        }
        m.to_model_file().unwrap().to_bytes().unwrap()
    };
    let reference = bytes(fit(1, 1 << 30));
    assert!(
        bytes(fit(2, 1 << 30)) == reference,
        "2 threads: the model differs"
    );
    assert!(
        bytes(fit(2, 0)) == reference,
        "mapped each pass: the model differs"
    );
}
