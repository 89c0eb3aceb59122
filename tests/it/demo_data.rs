//! The demo scenario generator: layout, schema, row counts, dropouts, the hot site and
//! determinism. These are common-practice sanity checks of invented demo data, not
//! oracles for the model.

use std::collections::BTreeMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

use arrow_array::{
    Array, Float64Array, Int32Array, RecordBatch, StringArray, TimestampMillisecondArray,
};
use arrow_schema::{DataType, TimeUnit};
use kernlake::testing::{generate, months, DemoSpec};
use kernlake::Error;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;

const ROWS: u64 = 20_000;

fn spec(seed: u64) -> DemoSpec {
    DemoSpec {
        rows: ROWS,
        sites: 40,
        seed,
        start_year: 2024,
    }
}

/// Every file under `dir`, relative path → bytes, in sorted order.
fn all_files(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for entry in std::fs::read_dir(&d).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                stack.push(path);
            } else {
                let rel = path.strip_prefix(dir).unwrap().to_path_buf();
                out.insert(rel, std::fs::read(&path).unwrap());
            }
        }
    }
    out
}

/// Reads one Parquet file with the parquet crate into one batch.
fn read_parquet(path: &Path) -> RecordBatch {
    let reader = ParquetRecordBatchReaderBuilder::try_new(File::open(path).unwrap())
        .unwrap()
        .build()
        .unwrap();
    let batches: Vec<RecordBatch> = reader.map(|b| b.unwrap()).collect();
    arrow_select::concat::concat_batches(&batches[0].schema(), &batches).unwrap()
}

fn f64_col<'a>(batch: &'a RecordBatch, name: &str) -> &'a Float64Array {
    batch
        .column_by_name(name)
        .unwrap()
        .as_any()
        .downcast_ref::<Float64Array>()
        .unwrap()
}

fn i32_col<'a>(batch: &'a RecordBatch, name: &str) -> &'a Int32Array {
    batch
        .column_by_name(name)
        .unwrap()
        .as_any()
        .downcast_ref::<Int32Array>()
        .unwrap()
}

#[test]
fn generated_partitions_have_the_documented_layout_and_content() {
    let dir = tempfile::tempdir().unwrap();
    let spec = spec(11);
    let seen = AtomicU64::new(0);
    let summary = generate(dir.path(), &spec, &|n| {
        seen.fetch_max(n, Ordering::Relaxed);
    })
    .unwrap();
    let month_names = months(&spec);
    assert_eq!(month_names.len(), 12);
    assert_eq!(month_names[0], "2024-01");
    assert_eq!(month_names[11], "2024-12");
    assert_eq!(summary.months, month_names);
    assert_eq!(summary.rows, ROWS);
    assert_eq!(summary.files, 40 * 12);
    assert_eq!(seen.load(Ordering::Relaxed), ROWS);
    assert!((1..=40).contains(&summary.hot_site));

    let files = all_files(dir.path());
    assert_eq!(
        files.len(),
        40 * 12,
        "one file per site and month, no leftovers"
    );
    assert_eq!(
        files.values().map(|b| b.len() as u64).sum::<u64>(),
        summary.bytes
    );

    let mut total_rows = 0;
    let mut nulls = [0usize; 2];
    let mut training_max = f64::NEG_INFINITY;
    let mut hot_last_max = f64::NEG_INFINITY;
    let mut positive_slopes = 0;
    for site in 1..=40u32 {
        let mut temp_kw: Vec<(f64, f64)> = Vec::new();
        for (m, month) in month_names.iter().enumerate() {
            let rel = PathBuf::from(format!("site={site:02}/month={month}/part-0.parquet"));
            assert!(files.contains_key(&rel), "{}", rel.display());
            let batch = read_parquet(&dir.path().join(&rel));
            let n = batch.num_rows();
            // Rows spread evenly: 20,000 / 480 cells = 41 or 42 each.
            assert!(n == 41 || n == 42, "{} has {n} rows", rel.display());
            total_rows += n;

            let schema = batch.schema();
            let names: Vec<&str> = schema.fields().iter().map(|f| f.name().as_str()).collect();
            assert_eq!(
                names,
                [
                    "ts",
                    "outdoor_temp",
                    "outdoor_rh",
                    "room_setpoint",
                    "room_temp",
                    "door_open_min",
                    "product_load_t",
                    "defrost",
                    "hour",
                    "compressor_kw"
                ]
            );
            assert_eq!(
                schema.field(0).data_type(),
                &DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into()))
            );
            for f in schema.fields().iter().skip(1) {
                let expected = if matches!(f.name().as_str(), "defrost" | "hour") {
                    DataType::Int32
                } else {
                    DataType::Float64
                };
                assert_eq!(f.data_type(), &expected, "{}", f.name());
            }

            // reference library: arrow-cast renders the timestamps (as UTC instants; this
            // build has no time-zone database, so the zone is dropped first); each lies
            // in its month.
            let ts = batch
                .column(0)
                .as_any()
                .downcast_ref::<TimestampMillisecondArray>()
                .unwrap();
            let naive = TimestampMillisecondArray::new(ts.values().clone(), None);
            let ts = arrow_cast::cast(&naive, &DataType::Utf8).unwrap();
            let ts = ts.as_any().downcast_ref::<StringArray>().unwrap();
            let hour = i32_col(&batch, "hour");
            for i in 0..n {
                let text = ts.value(i);
                assert!(text.starts_with(month.as_str()), "{text} in {month}");
                let hh: i32 = text[11..13].parse().unwrap();
                assert_eq!(hour.value(i), hh, "hour column matches {text}");
            }

            let setpoint = f64_col(&batch, "room_setpoint");
            let room = f64_col(&batch, "room_temp");
            let rh = f64_col(&batch, "outdoor_rh");
            let temp = f64_col(&batch, "outdoor_temp");
            let door = f64_col(&batch, "door_open_min");
            let load = f64_col(&batch, "product_load_t");
            let defrost = i32_col(&batch, "defrost");
            let kw = f64_col(&batch, "compressor_kw");
            nulls[0] += rh.null_count();
            nulls[1] += room.null_count();
            for col in [
                "outdoor_temp",
                "room_setpoint",
                "door_open_min",
                "product_load_t",
            ] {
                assert_eq!(f64_col(&batch, col).null_count(), 0, "{col}");
            }
            assert_eq!(kw.null_count(), 0);
            for i in 0..n {
                // common practice: the scenario's documented ranges.
                let sp = setpoint.value(i);
                assert!(
                    (-25.0..=-18.0).contains(&sp) || (0.0..=4.0).contains(&sp),
                    "{sp}"
                );
                if room.is_valid(i) {
                    assert!((room.value(i) - sp).abs() <= 3.0 + 1e-12);
                }
                if rh.is_valid(i) {
                    assert!((20.0..=100.0).contains(&rh.value(i)));
                }
                assert!((0.0..=45.0).contains(&door.value(i)));
                assert!((0.0..=30.0).contains(&load.value(i)));
                assert!(matches!(defrost.value(i), 0 | 1));
                assert!(kw.value(i) > 0.0 && kw.value(i).is_finite());
                let t = temp.value(i);
                if m < 11 {
                    assert!((-15.0..=40.0).contains(&t), "{t}");
                    training_max = training_max.max(t);
                } else if site == summary.hot_site {
                    hot_last_max = hot_last_max.max(t);
                }
                temp_kw.push((t, kw.value(i)));
            }
        }
        // common practice: a refrigeration plant draws more power when it is hotter
        // outside (larger lift, lower COP, more envelope heat).
        positive_slopes += usize::from(correlation(&temp_kw) > 0.0);
    }
    println!(
        "nulls {nulls:?}, hot site {} last-month max {hot_last_max:.1} °C vs training max \
         {training_max:.1} °C, {positive_slopes}/40 sites with power rising with temperature",
        summary.hot_site
    );
    assert_eq!(total_rows as u64, ROWS);
    assert!(positive_slopes >= 36, "{positive_slopes} of 40 sites");
    for (col, n) in ["outdoor_rh", "room_temp"].iter().zip(nulls) {
        let share = n as f64 / ROWS as f64;
        // Scenario: dropouts in a few % of rows of one or two columns.
        assert!((0.005..=0.08).contains(&share), "{col}: null share {share}");
    }
    // Scenario: the hot site's last month lies beyond the range of every training month.
    assert!(
        hot_last_max > training_max,
        "hot site max {hot_last_max} vs training max {training_max}"
    );
}

/// Pearson correlation of the pairs.
fn correlation(pairs: &[(f64, f64)]) -> f64 {
    let n = pairs.len() as f64;
    let (mx, my) = pairs
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x / n, b + y / n));
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (x, y) in pairs {
        sxy += (x - mx) * (y - my);
        sxx += (x - mx) * (x - mx);
        syy += (y - my) * (y - my);
    }
    sxy / (sxx * syy).sqrt()
}

#[test]
fn same_seed_gives_identical_bytes_whatever_the_thread_count() {
    let small = DemoSpec {
        rows: 4_000,
        sites: 6,
        seed: 3,
        start_year: 2023,
    };
    let a = tempfile::tempdir().unwrap();
    let b = tempfile::tempdir().unwrap();
    let c = tempfile::tempdir().unwrap();
    generate(a.path(), &small, &|_| {}).unwrap();
    let one_thread = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    one_thread
        .install(|| generate(b.path(), &small, &|_| {}))
        .unwrap();
    let fa = all_files(a.path());
    assert_eq!(fa.len(), 6 * 12);
    assert_eq!(fa, all_files(b.path()));
    let other_seed = DemoSpec { seed: 4, ..small };
    generate(c.path(), &other_seed, &|_| {}).unwrap();
    assert_ne!(fa, all_files(c.path()));
}

#[test]
fn invalid_specs_are_typed_errors() {
    let dir = tempfile::tempdir().unwrap();
    for bad in [
        DemoSpec { rows: 0, ..spec(1) },
        DemoSpec {
            sites: 0,
            ..spec(1)
        },
        DemoSpec {
            start_year: 20_000,
            ..spec(1)
        },
    ] {
        assert!(matches!(
            generate(dir.path(), &bad, &|_| {}),
            Err(Error::InvalidParameter { .. })
        ));
    }
    // Fewer rows than site-months: only the first cells get a file.
    let tiny = DemoSpec {
        rows: 5,
        sites: 2,
        ..spec(1)
    };
    let summary = generate(dir.path(), &tiny, &|_| {}).unwrap();
    assert_eq!(summary.files, 5);
    assert_eq!(all_files(dir.path()).len(), 5);
}

/// Generates the full one-million-row demo and prints the time taken (no assertion on
/// speed; run with `cargo test --release --test it demo_data:: -- --ignored --nocapture`).
#[test]
#[ignore = "writes about 60 MB; run by hand to measure generation speed"]
fn one_million_rows_generation_speed() {
    let dir = tempfile::tempdir().unwrap();
    let spec = DemoSpec::default();
    let start = std::time::Instant::now();
    let summary = generate(dir.path(), &spec, &|_| {}).unwrap();
    let secs = start.elapsed().as_secs_f64();
    assert_eq!(summary.rows, 1_000_000);
    println!(
        "generated {} rows in {} files ({:.1} MB) in {secs:.2} s: {:.0} rows/s",
        summary.rows,
        summary.files,
        summary.bytes as f64 / 1e6,
        summary.rows as f64 / secs
    );
}
