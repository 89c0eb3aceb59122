//! The survey pass and the standardizer, checked against two-pass statistics computed
//! directly from the CCPP dataset, and the seeded sample for determinism and uniformity.

use std::cell::Cell;
use std::fs::{self, File};
use std::path::Path;
use std::sync::Arc;

use arrow_array::{ArrayRef, Float64Array, Int32Array, RecordBatch};
use kernlake::data::{
    discover, resolve_columns, sample_key, survey, ColumnSelection, CsvOptions, Survey,
    SurveySettings, TableReader,
};
use kernlake::scale::Standardizer;
use ndarray::Array2;
use parquet::arrow::ArrowWriter;

const NAMES: [&str; 5] = ["AT", "V", "AP", "RH", "PE"];

use crate::common::{ccpp_path, ccpp_rows as ccpp};

fn write_parquet(path: &Path, rows: &[[f64; 5]], constant: bool) {
    fs::create_dir_all(path.parent().unwrap()).unwrap();
    let mut cols: Vec<(&str, ArrayRef)> = NAMES
        .iter()
        .enumerate()
        .map(|(j, n)| {
            let a: ArrayRef = Arc::new(Float64Array::from(
                rows.iter().map(|r| r[j]).collect::<Vec<_>>(),
            ));
            (*n, a)
        })
        .collect();
    if constant {
        cols.push(("unit", Arc::new(Int32Array::from(vec![7; rows.len()]))));
    }
    let batch = RecordBatch::try_from_iter(cols).unwrap();
    let mut w = ArrowWriter::try_new(File::create(path).unwrap(), batch.schema(), None).unwrap();
    w.write(&batch).unwrap();
    w.close().unwrap();
}

/// The dataset split over `parts` Parquet files in partition folders, in path order.
fn lake(root: &Path, data: &[[f64; 5]], parts: usize, constant: bool) -> String {
    let per = data.len().div_ceil(parts);
    for (k, chunk) in data.chunks(per).enumerate() {
        let p = root.join(format!("site={}/part-{k:03}.parquet", k % 2 + 10 * (k / 2)));
        write_parquet(&p, chunk, constant);
    }
    root.to_string_lossy().into_owned()
}

fn reader(input: &str, batch: usize) -> TableReader {
    let files = discover(&[input.to_string()]).unwrap();
    let sel = ColumnSelection {
        target: Some("PE".into()),
        ..Default::default()
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    TableReader::new(files, cols).with_batch_rows(batch)
}

fn run(r: &TableReader, sample_rows: usize, seed: u64, threads: usize) -> Survey {
    let settings = SurveySettings {
        sample_rows,
        seed,
        threads,
    };
    survey(r, &settings, &|_| {}).unwrap()
}

/// Two-pass mean and population variance of column `j`.
fn two_pass(data: &[[f64; 5]], j: usize) -> (f64, f64) {
    let n = data.len() as f64;
    let m = data.iter().map(|r| r[j]).sum::<f64>() / n;
    let v = data.iter().map(|r| (r[j] - m).powi(2)).sum::<f64>() / n;
    (m, v)
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(f64::MIN_POSITIVE)
}

#[test]
fn moments_match_two_pass_values_and_do_not_depend_on_threads() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let input = lake(dir.path(), &data, 10, false);
    let r = reader(&input, 1_000);
    assert_eq!(r.files().len(), 10);
    let seen = Cell::new(0u64);
    let settings = SurveySettings {
        sample_rows: 500,
        seed: 7,
        threads: 1,
    };
    let one = survey(&r, &settings, &|n| {
        assert!(n >= seen.get());
        seen.set(n);
    })
    .unwrap();
    assert_eq!(seen.get(), 9_568);
    let two = run(&r, 500, 7, 2);
    assert_eq!(
        (one.rows_total, one.rows_used, one.rows_skipped),
        (9_568, 9_568, 0)
    );
    let stats: Vec<_> = one.features.iter().chain(one.target.as_ref()).collect();
    let stats2: Vec<_> = two.features.iter().chain(two.target.as_ref()).collect();
    assert_eq!(stats.len(), 5);
    for (j, (s, s2)) in stats.iter().zip(&stats2).enumerate() {
        assert_eq!(s.name, NAMES[j]);
        let (m, v) = two_pass(&data, j);
        // dataset: Tüfekci 2014 — two-pass moments computed from the CSV
        assert!(rel(s.mean, m) < 1e-12, "{}: mean {} vs {m}", s.name, s.mean);
        assert!(
            rel(s.variance, v) < 1e-12,
            "{}: var {} vs {v}",
            s.name,
            s.variance
        );
        let min = data.iter().map(|r| r[j]).fold(f64::INFINITY, f64::min);
        let max = data.iter().map(|r| r[j]).fold(f64::NEG_INFINITY, f64::max);
        assert_eq!((s.min, s.max, s.count, s.missing), (min, max, 9_568, 0));
        // identical bits with 1 and 2 threads
        assert_eq!(s.mean.to_bits(), s2.mean.to_bits());
        assert_eq!(s.variance.to_bits(), s2.variance.to_bits());
    }
    assert_eq!(one.sample_row_ids, two.sample_row_ids);
    assert_eq!(one.sample_x, two.sample_x);
    assert!(one.constant_features.is_empty());
}

#[test]
fn sample_is_deterministic_and_independent_of_split_and_batch_size() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let ten = lake(&dir.path().join("ten"), &data, 10, false);
    let three = lake(&dir.path().join("three"), &data, 3, false);
    let base = run(&reader(&ten, 65_536), 1_000, 42, 2);
    assert_eq!(base.sample_row_ids.len(), 1_000);
    assert_eq!(base.sample_x.dim(), (1_000, 4));
    // The sample comes in the order of its keys, so any prefix is a uniform sample
    // (bottom-k sketches: Cohen & Kaplan, PODC 2007).
    let key = |id: u64| (sample_key(42, id), id);
    assert!(base
        .sample_row_ids
        .windows(2)
        .all(|w| key(w[0]) < key(w[1])));
    for (input, batch, threads) in [
        (&ten, 333, 1),
        (&three, 65_536, 2),
        (&three, 1_024, 1),
        (&ccpp_path(), 4_096, 2),
    ] {
        let s = run(&reader(input, batch), 1_000, 42, threads);
        assert_eq!(
            s.sample_row_ids, base.sample_row_ids,
            "{input} batch {batch}"
        );
        assert_eq!(s.sample_x, base.sample_x);
        assert_eq!(s.sample_y, base.sample_y);
    }
    // dataset: Tüfekci 2014 — sample rows are the dataset's rows at those indices
    let y = base.sample_y.as_ref().unwrap();
    for (r, &id) in base.sample_row_ids.iter().enumerate() {
        let row = &data[id as usize];
        assert_eq!(base.sample_x.row(r).to_vec(), row[..4].to_vec());
        assert_eq!(y[r], row[4]);
    }
    // another seed gives another sample
    let other = run(&reader(&ten, 65_536), 1_000, 43, 2);
    assert_ne!(other.sample_row_ids, base.sample_row_ids);
    // a sample larger than the data holds every row
    let all = run(&reader(&three, 2_000), 20_000, 1, 2);
    let mut ids = all.sample_row_ids.clone();
    ids.sort_unstable();
    assert_eq!(ids, (0..9_568).collect::<Vec<u64>>());
}

#[test]
fn sample_row_ids_are_uniform() {
    // common practice: the mean of k ids drawn without replacement from 0..N has
    // expectation (N−1)/2 and variance (N²−1)/12 · (N−k)/(k(N−1)).
    let r = reader(&ccpp_path(), 65_536);
    let (n, k, seeds) = (9_568f64, 500usize, 40u64);
    let var_one = (n * n - 1.0) / 12.0 * (n - k as f64) / (k as f64 * (n - 1.0));
    let mut means = Vec::new();
    let mut quarters = [0usize; 4];
    for seed in 0..seeds {
        let s = run(&r, k, seed, 1);
        assert_eq!(s.sample_row_ids.len(), k);
        let m = s.sample_row_ids.iter().map(|&i| i as f64).sum::<f64>() / k as f64;
        // each sample within 4 standard deviations
        assert!(
            (m - (n - 1.0) / 2.0).abs() < 4.0 * var_one.sqrt(),
            "seed {seed}: {m}"
        );
        means.push(m);
        for &i in &s.sample_row_ids {
            quarters[(i as f64 * 4.0 / n) as usize] += 1;
        }
    }
    // the average over seeds within 4 standard deviations of the average
    let avg = means.iter().sum::<f64>() / seeds as f64;
    let sd_avg = (var_one / seeds as f64).sqrt();
    assert!((avg - (n - 1.0) / 2.0).abs() < 4.0 * sd_avg, "{avg}");
    // each quarter of the rows gets a quarter of the draws: binomial sd sqrt(t·¼·¾)
    let t = (k as u64 * seeds) as f64;
    for q in quarters {
        assert!(
            (q as f64 - t / 4.0).abs() < 4.0 * (t * 0.1875).sqrt(),
            "{quarters:?}"
        );
    }
}

#[test]
fn standardizer_from_survey_matches_in_memory_fit() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let input = lake(dir.path(), &data, 4, true);
    let r = reader(&input, 2_048);
    assert_eq!(r.columns().features, vec!["AT", "V", "AP", "RH", "unit"]);
    let s = run(&r, 100, 3, 2);
    assert_eq!(s.constant_features, vec!["unit".to_string()]);
    assert_eq!(s.features[4].variance, 0.0);
    let streaming = Standardizer::from_survey(&s);
    let mut x = Array2::from_shape_fn(
        (data.len(), 5),
        |(i, j)| {
            if j < 4 {
                data[i][j]
            } else {
                7.0
            }
        },
    );
    let fitted = Standardizer::fit(x.view());
    assert_eq!(streaming.dim(), 5);
    for j in 0..5 {
        // dataset: Tüfekci 2014 — two-pass statistics of the CSV
        assert!(rel(streaming.mean[j], fitted.mean[j]) < 1e-12);
        assert!(rel(streaming.scale[j], fitted.scale[j]) < 1e-12);
    }
    // common practice: a constant column keeps scale 1 and maps to 0
    assert_eq!((streaming.scale[4], fitted.scale[4]), (1.0, 1.0));
    streaming.apply(x.view_mut());
    let n = data.len() as f64;
    for j in 0..4 {
        let col = x.column(j);
        let m = col.sum() / n;
        let v = col.iter().map(|v| (v - m).powi(2)).sum::<f64>() / n;
        // common practice: standardized columns have mean 0 and variance 1
        assert!(m.abs() < 1e-12, "column {j} mean {m}");
        assert!((v - 1.0).abs() < 1e-12, "column {j} variance {v}");
    }
    assert!(x.column(4).iter().all(|&v| v == 0.0));
    let back = {
        let mut b = x.clone();
        streaming.unapply(b.view_mut());
        b
    };
    for i in (0..data.len()).step_by(97) {
        for j in 0..4 {
            assert!((back[[i, j]] - data[i][j]).abs() <= 1e-12 * data[i][j].abs().max(1.0));
        }
    }
}

#[test]
fn survey_counts_missing_values_and_refuses_no_rows() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("m.csv");
    fs::write(&p, "a,y\n1,1\n,2\nNaN,3\n4,\n5,5\ninf,6\n").unwrap();
    let s = run(&reader_xy(&p), 10, 0, 1);
    assert_eq!((s.rows_total, s.rows_used, s.rows_skipped), (6, 2, 4));
    assert_eq!(s.features[0].missing, 3);
    assert_eq!(s.target.as_ref().unwrap().missing, 1);
    // common practice: mean and population variance of {1, 5} are 3 and 4
    assert_eq!((s.features[0].mean, s.features[0].variance), (3.0, 4.0));
    let mut ids = s.sample_row_ids.clone();
    ids.sort_unstable();
    assert_eq!(ids, vec![0, 4]);

    let q = dir.path().join("none.csv");
    fs::write(&q, "a,y\n,1\nNaN,2\n").unwrap();
    let e = survey(&reader_xy(&q), &SurveySettings::default(), &|_| {}).unwrap_err();
    assert!(matches!(e, kernlake::Error::NoRows(_)), "{e}");
}

fn reader_xy(p: &Path) -> TableReader {
    let files = discover(&[p.to_string_lossy().into_owned()]).unwrap();
    let sel = ColumnSelection {
        target: Some("y".into()),
        ..Default::default()
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    TableReader::new(files, cols)
}

#[test]
fn sample_key_is_splitmix64() {
    // from memory: the first outputs of SplitMix64 (Steele, Lea & Flood, OOPSLA 2014;
    // Vigna's reference splitmix64.c) from state 0
    assert_eq!(kernlake::data::splitmix64(0, 0), 0xE220_A839_7B1D_CDAF);
    assert_eq!(kernlake::data::splitmix64(0, 1), 0x6E78_9E6A_A1B9_65F4);
    assert_eq!(kernlake::data::sample_key(0, 2), 0x06C4_5D18_8009_454F);
}

/// The survey (100 sample rows, seed 0, one thread) of one Parquet file of `cols` named
/// `names` written in `dir`, with PE as the target.
fn survey_one_file(
    dir: &std::path::Path,
    names: &[String],
    cols: &[Vec<f64>],
) -> kernlake::Result<Survey> {
    let path = dir.join("part.parquet");
    crate::common::write_parquet(&path, names, cols);
    let files = discover(&[path.to_string_lossy().into_owned()]).unwrap();
    let sel = ColumnSelection {
        target: Some("PE".into()),
        ..Default::default()
    };
    let columns = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    let reader = TableReader::new(files, columns);
    let settings = SurveySettings {
        sample_rows: 100,
        seed: 0,
        threads: 1,
    };
    survey(&reader, &settings, &|_| {})
}

#[test]
fn a_column_with_no_value_at_all_is_named() {
    // Issue 20: an all-NaN input chosen by the default input set must be named, not
    // reported as "no row has a value in every chosen column". Data: CCPP (dataset:
    // Tüfekci 2014) with a fifth input that is NaN in every row.
    let dir = tempfile::tempdir().unwrap();
    let rows = ccpp();
    let names: Vec<String> = ["AT", "V", "AP", "RH", "dead", "PE"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let mut cols: Vec<Vec<f64>> = (0..5)
        .map(|j| rows[..300].iter().map(|r| r[j]).collect())
        .collect();
    cols.insert(4, vec![f64::NAN; 300]);
    let err = survey_one_file(dir.path(), &names, &cols)
        .unwrap_err()
        .to_string();
    assert!(err.contains("'dead'") && err.contains("300"), "{err}");
}

#[test]
fn an_input_whose_values_overflow_is_an_error_naming_it() {
    // Issue 20: AT = 1e308 in every other row made the survey's sd infinite and AT
    // silently useless. Its sum of squares overflows f64 (about 1.8e308, IEEE 754), so
    // the survey must fail naming the column. Data: CCPP (dataset: Tüfekci 2014).
    let dir = tempfile::tempdir().unwrap();
    let rows = ccpp();
    let names: Vec<String> = ["AT", "V", "AP", "RH", "PE"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let mut cols: Vec<Vec<f64>> = (0..5)
        .map(|j| rows[..400].iter().map(|r| r[j]).collect())
        .collect();
    for (i, v) in cols[0].iter_mut().enumerate() {
        if i % 2 == 0 {
            *v = 1e308;
        }
    }
    let err = survey_one_file(dir.path(), &names, &cols).unwrap_err();
    assert!(matches!(err, kernlake::Error::Overflow { .. }), "{err:?}");
    let text = err.to_string();
    assert!(text.contains("'AT'"), "{text}");
    assert_eq!(text.lines().count(), 1, "{text}");
}
