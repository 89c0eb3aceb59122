//! The foundation's contracts: estimates from an unbiased sample, one guard for a constant
//! target, a bounded holdout, settings checked before any data is read, errors in the
//! right variant, and one set of defaults.

use std::process::Command;

use crate::common::{ccpp, friedman1, write_parts};
use kernlake::data::{discover, resolve_columns, ColumnSelection, CsvOptions, TableReader};
use kernlake::features::MapSpec;
use kernlake::fit::{FitOptions, Fitter};
use kernlake::heuristics::median_gamma;
use kernlake::model::Model;
use kernlake::settings::defaults;
use kernlake::solver::blocks::{Silent, TrainSettings};
use kernlake::solver::dcd::DcdSettings;
use kernlake::Error;
use ndarray::{s, Array1, Array2, Axis};

/// CCPP (dataset: Tüfekci 2014) with its rows sorted by ambient temperature AT: a table
/// whose file order is anything but random.
fn ccpp_sorted_by_at() -> (Vec<String>, Array2<f64>, Array1<f64>) {
    let (header, x, y) = ccpp();
    let mut order: Vec<usize> = (0..x.nrows()).collect();
    order.sort_by(|&a, &b| x[[a, 0]].total_cmp(&x[[b, 0]]).then(a.cmp(&b)));
    (header, x.select(Axis(0), &order), y.select(Axis(0), &order))
}

/// The checks on a model fitted to sorted CCPP: its coverage landmarks span the range of
/// AT, it covers the hottest decile, and its default gamma is the median heuristic of the
/// whole table (Gretton et al. 2012; the heuristic is defined on all rows, here measured
/// on 2,000 rows spread evenly over the table).
fn assert_unbiased(model: &Model, x: &Array2<f64>) {
    let n = x.nrows();
    let mut z = x.clone();
    model.scaler.apply(z.view_mut());
    let at: Vec<f64> = z.column(0).to_vec();
    let decile = |q: f64| at[((n - 1) as f64 * q) as usize];
    let cov = model.coverage.as_ref().expect("coverage is fitted");
    let lm = cov.landmarks.column(0);
    let lo = lm.iter().cloned().fold(f64::INFINITY, f64::min);
    let hi = lm.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
    assert!(
        lo <= decile(0.1) && hi >= decile(0.9),
        "landmarks span [{lo:.3}, {hi:.3}] of AT, deciles {:.3} .. {:.3}",
        decile(0.1),
        decile(0.9)
    );
    let last = z.slice(s![n - n / 10.., ..]);
    let values = cov.values(last);
    let covered = values.iter().filter(|&&v| v >= cov.threshold).count();
    assert!(
        covered as f64 >= 0.95 * last.nrows() as f64,
        "{covered} of {} rows of the hottest decile are covered",
        last.nrows()
    );
    let step = n / 2_000;
    let spread: Vec<usize> = (0..2_000).map(|i| i * step).collect();
    let reference = median_gamma(z.select(Axis(0), &spread).view()).unwrap();
    let gamma = model.report.gamma.value;
    assert!(
        (gamma / reference - 1.0).abs() < 0.15,
        "default gamma {gamma} against the whole table's median heuristic {reference}"
    );
}

#[test]
fn in_memory_sample_is_uniform_whatever_the_row_order() {
    let (_, x, y) = ccpp_sorted_by_at();
    let model = Fitter::new()
        .with_dim(128)
        .with_holdout(0.0)
        .with_max_epochs(3)
        .fit(x.view(), y.view())
        .unwrap();
    assert_unbiased(&model, &x);
}

#[test]
fn file_sample_is_uniform_whatever_the_file_order() {
    let (header, x, y) = ccpp_sorted_by_at();
    let dir = tempfile::tempdir().unwrap();
    write_parts(dir.path(), &header, &x, &y, 4);
    let files = discover(&[dir.path().to_string_lossy().into_owned()]).unwrap();
    let sel = ColumnSelection {
        target: Some("PE".into()),
        features: None,
        exclude: Vec::new(),
    };
    let columns = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    let reader = TableReader::new(files, columns);
    let model = Fitter::new()
        .with_dim(128)
        .with_max_epochs(3)
        .fit_files(&reader, &Silent, &|_| {})
        .unwrap();
    assert_unbiased(&model, &x);
}

/// Common practice: the best model of a constant target is that constant; every fit path
/// must return it, with given or default settings.
#[test]
fn a_constant_target_gives_the_constant_model() {
    let (_, x, _) = ccpp();
    let x = x.slice(s![..300, ..]).to_owned();
    let y = Array1::from_elem(300, 450.0);
    let given = Fitter::new()
        .with_dim(64)
        .with_gamma(0.5)
        .with_c(10.0)
        .with_epsilon(0.1);
    for fitter in [given, Fitter::new().with_dim(64)] {
        let model = fitter.fit(x.view(), y.view()).unwrap();
        let p = model.predict(x.view());
        assert!(
            p.iter().all(|v| (v - 450.0).abs() < 1e-9),
            "predictions {:?}",
            &p.as_slice().unwrap()[..3]
        );
    }
}

/// The holdout is a share of every row, but only a bounded sample of it is kept in
/// memory (Friedman #1, published: Friedman 1991, as a table large enough to need it).
#[test]
fn the_kept_holdout_is_bounded() {
    let (x, y, _) = friedman1(240_000, 5);
    let model = Fitter::new()
        .with_dim(16)
        .with_holdout(0.5)
        .with_max_epochs(1)
        .fit(x.view(), y.view())
        .unwrap();
    let r = &model.report;
    assert!(r.rows_holdout > 115_000, "holdout {}", r.rows_holdout);
    assert!(
        r.holdout_kept > 90_000 && r.holdout_kept < 110_000,
        "kept {} of {}",
        r.holdout_kept,
        r.rows_holdout
    );
}

fn kernlake(args: &[&str]) -> (i32, String) {
    let o = Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(args)
        .output()
        .expect("the binary runs");
    (
        o.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&o.stderr).into_owned(),
    )
}

/// Common practice: a mistyped setting fails before any data is read. The source named
/// here does not exist, so an error about a setting proves that no file was opened.
#[test]
fn settings_are_checked_before_any_file_is_opened() {
    let cases: &[(&[&str], &str)] = &[
        (&["--loss", "l1", "--solver", "newton"], "solver"),
        (&["--loss", "l2", "--solver", "barrier"], "solver"),
        (&["--c", "-1"], "C"),
        (&["--tol", "-1"], "tol"),
        (&["--epochs", "0"], "epochs"),
        (&["--sweeps", "0"], "sweeps"),
        (&["--hessian-rows", "0"], "hessian rows"),
        (&["-D", "1001"], "even"),
        (
            &["--map", "orthogonal", "--kernel", "laplacian"],
            "Gaussian",
        ),
        (&["--block-rows", "0"], "block rows"),
        (&["-D", "1000000"], "memory"),
        (&["--threads", "100000"], "threads"),
        (&["--sample", "2"], "sample"),
        (&["--holdout", "0.7"], "holdout"),
        (&["--components", "64"], "--dim"),
    ];
    for (flags, word) in cases {
        let mut args = vec!["fit", "/nonexistent/lake", "--target", "PE", "--quiet"];
        args.extend_from_slice(flags);
        let (code, err) = kernlake(&args);
        assert_eq!(code, 2, "{flags:?}: {err}");
        assert!(err.contains(word), "{flags:?} should name '{word}': {err}");
        assert!(
            !err.contains("nonexistent"),
            "{flags:?} read data first: {err}"
        );
        // Issue 20: flag names, never the library's field names.
        for internal in [
            "max_epochs",
            "sweeps_per_block",
            "hessian_rows",
            "block_rows",
            "sample_rows",
            "memory_bytes",
        ] {
            assert!(!err.contains(internal), "{flags:?} names a field: {err}");
        }
    }
}

/// Every command refuses more threads than processors (thousands of threads made runs
/// hang), before it reads anything, and says how to insist; `--oversubscribe` is the
/// override (common practice: a pool no larger than the processors).
#[test]
fn every_command_caps_threads_at_the_processors_before_reading() {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let over = (cores + 1).to_string();
    let commands: &[&[&str]] = &[
        &["fit", "/nonexistent/lake", "--target", "PE", "--quiet"],
        &[
            "score",
            "/nonexistent/m.klm",
            "/nonexistent/lake",
            "--out",
            "/nonexistent/o",
            "--quiet",
        ],
        &["audit", "/nonexistent/lake", "--target", "PE", "--quiet"],
        &["tune", "/nonexistent/lake", "--target", "PE", "--quiet"],
    ];
    for cmd in commands {
        for threads in ["100000", over.as_str()] {
            let mut args = cmd.to_vec();
            args.extend_from_slice(&["--threads", threads]);
            let (code, err) = kernlake(&args);
            assert_eq!(code, 2, "{args:?}: {err}");
            assert!(err.contains("threads"), "{args:?}: {err}");
            assert!(
                !err.contains("nonexistent"),
                "{args:?} read data first: {err}"
            );
            assert_eq!(err.trim().lines().count(), 1, "{args:?}: {err}");
        }
        let mut args = cmd.to_vec();
        args.extend_from_slice(&["--threads", over.as_str()]);
        let (_, err) = kernlake(&args);
        assert!(err.contains("--oversubscribe"), "{args:?}: {err}");
        args.push("--oversubscribe");
        let (code, err) = kernlake(&args);
        assert_ne!(code, 0);
        assert!(
            err.contains("nonexistent"),
            "{args:?}: the override is honoured: {err}"
        );
    }
}

/// Score, tune and audit check their numbers before reading (issue 20): zero batch rows,
/// a sample too small to estimate anything, and a search whose largest D cannot fit in
/// this machine's memory (refused with the estimate and the flag to change).
#[test]
fn score_tune_and_audit_check_their_numbers_before_reading() {
    let cases: &[(&[&str], &[&str])] = &[
        (
            &[
                "score",
                "/nonexistent/m.klm",
                "/nonexistent/lake",
                "--out",
                "/nonexistent/o",
                "--batch-rows",
                "0",
            ],
            &["batch rows"],
        ),
        (
            &[
                "tune",
                "/nonexistent/lake",
                "--target",
                "PE",
                "--sample",
                "2",
            ],
            &["sample"],
        ),
        (
            &[
                "tune",
                "/nonexistent/lake",
                "--target",
                "PE",
                "-D",
                "100000",
                "--max-dim",
                "100000",
            ],
            &["memory", "GiB", "--max-dim"],
        ),
        (
            &[
                "audit",
                "/nonexistent/lake",
                "--target",
                "PE",
                "--sample",
                "0",
            ],
            &["--sample"],
        ),
        (
            &[
                "audit",
                "/nonexistent/lake",
                "--target",
                "PE",
                "--dims",
                "100000",
            ],
            &["memory", "GiB", "--dims"],
        ),
        (
            &[
                "fit",
                "/nonexistent/lake",
                "--target",
                "PE",
                "-D",
                "1000000",
            ],
            &["memory", "GiB", "-D"],
        ),
    ];
    for (args, words) in cases {
        let mut args = args.to_vec();
        args.push("--quiet");
        let (code, err) = kernlake(&args);
        assert_eq!(code, 2, "{args:?}: {err}");
        for w in *words {
            assert!(err.contains(w), "{args:?} should name '{w}': {err}");
        }
        assert!(
            !err.contains("nonexistent"),
            "{args:?} read data first: {err}"
        );
        assert_eq!(err.trim().lines().count(), 1, "{args:?}: {err}");
    }
}

/// Errors name what went wrong in the right variant (common practice: a typed error a
/// program can match on).
#[test]
fn errors_come_in_the_right_variant() {
    let (_, x, mut y) = ccpp();
    y[17] = f64::NAN;
    match Fitter::new().with_dim(16).fit(x.view(), y.view()) {
        Err(Error::NonFiniteTarget { row: 17 }) => {}
        other => panic!("expected a non-finite target in row 17, got {other:?}"),
    }
    let (_, x, mut y) = ccpp();
    y[3] = 1e300;
    y[4] = -1e300;
    match Fitter::new().with_dim(16).fit(x.view(), y.view()) {
        Err(Error::Overflow { column }) => assert_eq!(column, "y"),
        other => panic!("expected an overflowing target, got {other:?}"),
    }
}

/// One set of defaults: the library's options, the trainer's and the solver's settings
/// and the command line's help all show the same values (common practice: one source of
/// truth).
#[test]
fn the_defaults_are_written_once() {
    let o = FitOptions::default();
    let t = TrainSettings::default();
    let d = DcdSettings::default();
    assert_eq!(o.sweeps_per_block, defaults::SWEEPS);
    assert_eq!(t.dcd.sweeps_per_block, defaults::SWEEPS);
    assert_eq!(d.sweeps_per_block, defaults::SWEEPS);
    assert_eq!(o.holdout, defaults::HOLDOUT);
    assert_eq!(t.holdout, defaults::HOLDOUT);
    assert_eq!(o.max_epochs, d.max_epochs);
    assert_eq!(o.map.dim, defaults::DIM);
    let help = Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(["fit", "--help"])
        .output()
        .unwrap();
    let help = String::from_utf8_lossy(&help.stdout).into_owned();
    for (flag, value) in [
        ("--sweeps", defaults::SWEEPS.to_string()),
        ("--holdout", defaults::HOLDOUT.to_string()),
        ("--dim", defaults::DIM.to_string()),
        ("--epochs", defaults::EPOCHS.to_string()),
        ("--sample", defaults::SAMPLE.to_string()),
    ] {
        let at = help
            .find(&format!("{flag} "))
            .unwrap_or_else(|| panic!("{flag} in help"));
        let rest = &help[at..];
        let shown = rest.find("[default: ").map(|i| &rest[i + 10..]).unwrap();
        assert!(
            shown.starts_with(&value),
            "{flag}: help shows {}",
            &shown[..10]
        );
    }
}

/// The map's seed is the fit's seed, whatever the order of the builder's calls.
#[test]
fn with_map_keeps_the_seed() {
    let (_, x, y) = ccpp();
    let (x, y) = (x.slice(s![..500, ..]), y.slice(s![..500]));
    let spec = MapSpec {
        dim: 64,
        ..MapSpec::default()
    };
    let a = Fitter::new()
        .with_seed(7)
        .with_map(spec.clone())
        .fit(x, y)
        .unwrap();
    let b = Fitter::new().with_map(spec).with_seed(7).fit(x, y).unwrap();
    assert_eq!(a.map_spec.seed, 7);
    assert_eq!(a.predict(x), b.predict(x));
}
