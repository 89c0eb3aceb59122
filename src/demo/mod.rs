//! The demo scenario: compressor electrical power in a fleet of cold-storage warehouses.
//!
//! Invented data for the demo and the examples; no real site, company or product, and
//! not a test oracle. Each site logs, at a regular interval, its outdoor temperature
//! (°C) and relative humidity (%), room setpoint and room temperature (°C), minutes the
//! doors were open in the last hour (min), tonnes of product moved in the last hour (t),
//! whether a defrost cycle runs (0/1), the hour of day (UTC, 0–23) and the refrigeration
//! compressors' electrical power (kW), generated from the textbook relation
//! power = heat load / COP with COP = η · T_evap / (T_cond − T_evap) in kelvin (see
//! `site.rs`). A few % of the humidity and room-temperature readings are missing
//! (sensor dropouts), and one site in a hot climate meets a heat wave in the last month
//! that takes its outdoor temperature beyond anything seen in the earlier months.
//!
//! One other site develops a fault in the last month: over the last two weeks of the
//! year its condenser fouls, so its coefficient of performance falls gradually and its
//! compressor ends up drawing about 15 % more power for the same heat load. A model of
//! expected power fitted on the earlier months should see that site leave its band.
//!
//! A model of expected power is a monitoring aid; it does not replace the plant's
//! protective controls, alarms or a qualified refrigeration engineer.

mod calendar;
mod site;

use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use arrow_array::{ArrayRef, Float64Array, Int32Array, RecordBatch, TimestampMillisecondArray};
use arrow_schema::{DataType, Field, Schema, SchemaRef, TimeUnit};
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::properties::WriterProperties;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use crate::atomic::write_atomic;
use crate::error::{Error, Result};
use calendar::Month;
use site::{Rows, SiteParams, SiteSim};

/// Months in the demo year.
const MONTHS: u32 = 12;
/// Rows per record batch written to Parquet (bounds memory per file).
const BATCH_ROWS: u64 = 65_536;

/// What to generate.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DemoSpec {
    /// Total number of rows over all sites and months.
    pub rows: u64,
    /// Number of sites (the scenario has 40).
    pub sites: u32,
    /// Seed of every random draw: same seed, same files.
    pub seed: u64,
    /// The calendar year of the twelve months (January to December), 1900–9999.
    pub start_year: i32,
}

impl Default for DemoSpec {
    fn default() -> Self {
        DemoSpec {
            rows: 1_000_000,
            sites: 40,
            seed: 42,
            start_year: 2024,
        }
    }
}

/// What [`generate`] wrote.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DemoSummary {
    /// Rows written in all.
    pub rows: u64,
    /// Parquet files written.
    pub files: usize,
    /// Bytes written in all.
    pub bytes: u64,
    /// The month partition names, in order (`YYYY-MM`).
    pub months: Vec<String>,
    /// The site (1-based) in the hot climate, whose last month lies beyond the range of
    /// the earlier months.
    pub hot_site: u32,
    /// The site (1-based) whose compressor loses efficiency over the last two weeks (0
    /// when there is a single site, which is the hot one).
    pub fault_site: u32,
    /// When the fault starts, ms since the epoch (UTC): two weeks before the year ends.
    pub fault_start_ms: i64,
}

/// The scenario's model inputs, in the order the demo fits them (units in the column docs
/// of `schema`).
pub const FEATURES: [&str; 8] = [
    "outdoor_temp",
    "outdoor_rh",
    "room_setpoint",
    "room_temp",
    "door_open_min",
    "product_load_t",
    "defrost",
    "hour",
];

/// The scenario's target column: compressor electrical power, kW.
pub const TARGET: &str = "compressor_kw";

/// The list of month partition names in order (`YYYY-MM`), so callers can hold out the
/// last month.
pub fn months(spec: &DemoSpec) -> Vec<String> {
    (0..MONTHS)
        .map(|i| Month::nth(spec.start_year, i).name())
        .collect()
}

/// The Arrow schema of every demo file.
pub fn schema() -> SchemaRef {
    let f64_col = |name: &str, nullable: bool| Field::new(name, DataType::Float64, nullable);
    Arc::new(Schema::new(vec![
        Field::new(
            "ts",
            DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into())),
            false,
        ),
        f64_col("outdoor_temp", false),
        f64_col("outdoor_rh", true),
        f64_col("room_setpoint", false),
        f64_col("room_temp", true),
        f64_col("door_open_min", false),
        f64_col("product_load_t", false),
        Field::new("defrost", DataType::Int32, false),
        Field::new("hour", DataType::Int32, false),
        f64_col("compressor_kw", false),
    ]))
}

/// The sub-folder of `out` that holds one site's month: `site=NN/month=YYYY-MM`.
pub fn partition_dir(out: &Path, site: u32, month: &str) -> PathBuf {
    out.join(format!("site={site:02}"))
        .join(format!("month={month}"))
}

/// Writes Parquet partitioned `site=NN/month=YYYY-MM/part-0.parquet` under `out` (each
/// file written atomically, snappy-compressed), rows spread evenly over sites and the 12
/// months of `spec.start_year`, with each month's sampling interval chosen so the total
/// is exactly `spec.rows` (a site-month with no row gets no file).
///
/// Columns: `ts` (Timestamp ms, UTC), `outdoor_temp` (°C), `outdoor_rh` (%, nullable),
/// `room_setpoint` (°C), `room_temp` (°C, nullable), `door_open_min` (min in the last
/// hour), `product_load_t` (t moved in the last hour), `defrost` (Int32 0/1), `hour`
/// (Int32, UTC) and `compressor_kw` (kW). Deterministic for a seed whatever the thread
/// count: each site draws from its own random stream, and sites are generated in
/// parallel with rayon. `progress` receives the running total of rows written (it only
/// grows; it is called from worker threads).
///
/// # Errors
/// [`Error::InvalidParameter`] when `rows` or `sites` is 0 or `start_year` is outside
/// 1900–9999; [`Error::Io`] when `out` cannot be created or written.
pub fn generate(
    out: &Path,
    spec: &DemoSpec,
    progress: &(dyn Fn(u64) + Sync),
) -> Result<DemoSummary> {
    if spec.rows == 0 {
        return Err(Error::invalid("rows", "the demo needs at least one row"));
    }
    if spec.sites == 0 {
        return Err(Error::invalid("sites", "the demo needs at least one site"));
    }
    if !(1900..=9999).contains(&spec.start_year) {
        return Err(Error::invalid(
            "start_year",
            format!("{} is outside 1900-9999", spec.start_year),
        ));
    }
    let hot_site = hot_site(spec);
    let fault_site = fault_site(spec, hot_site);
    let months: Vec<Month> = (0..MONTHS)
        .map(|i| Month::nth(spec.start_year, i))
        .collect();
    let done = Mutex::new(0u64);
    let report = |n: u64| {
        let mut total = done.lock().unwrap_or_else(|e| e.into_inner());
        *total += n;
        progress(*total);
    };
    let per_site: Vec<(usize, u64)> = (1..=spec.sites)
        .into_par_iter()
        .map(|site| {
            let kind = SiteKind {
                hot: site == hot_site,
                faulty: site == fault_site,
            };
            write_site(out, spec, site, kind, &months, &report)
        })
        .collect::<Result<Vec<_>>>()?;
    Ok(DemoSummary {
        rows: spec.rows,
        files: per_site.iter().map(|(f, _)| f).sum(),
        bytes: per_site.iter().map(|(_, b)| b).sum(),
        months: months.iter().map(Month::name).collect(),
        hot_site,
        fault_site,
        fault_start_ms: fault_window(&months).0,
    })
}

/// What sets a site apart in the scenario.
#[derive(Clone, Copy, Debug)]
struct SiteKind {
    hot: bool,
    faulty: bool,
}

/// The faulty site for a spec (1-based), drawn from the seed; never the hot site (0 when
/// there is only one site).
fn fault_site(spec: &DemoSpec, hot: u32) -> u32 {
    if spec.sites < 2 {
        return 0;
    }
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(u64::MAX - 1);
    let s = rng.random_range(1..spec.sites);
    if s >= hot {
        s + 1
    } else {
        s
    }
}

/// The fault's two weeks: from 14 days before the year's end to its end, ms.
fn fault_window(months: &[Month]) -> (i64, i64) {
    let end = months.last().expect("twelve months").end_ms();
    (end - 14 * 86_400_000, end)
}

/// The hot-climate site for a spec (1-based), drawn from the seed.
fn hot_site(spec: &DemoSpec) -> u32 {
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(u64::MAX);
    rng.random_range(1..=spec.sites)
}

/// Rows of the `cell`-th site-month: the total split evenly, the remainder going to the
/// first cells.
fn cell_rows(spec: &DemoSpec, cell: u64) -> u64 {
    let cells = u64::from(spec.sites) * u64::from(MONTHS);
    spec.rows / cells + u64::from(cell < spec.rows % cells)
}

/// Generates and writes the twelve months of one site; returns (files, bytes).
fn write_site(
    out: &Path,
    spec: &DemoSpec,
    site: u32,
    kind: SiteKind,
    months: &[Month],
    report: &(dyn Fn(u64) + Sync),
) -> Result<(usize, u64)> {
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    rng.set_stream(u64::from(site));
    let params = SiteParams::draw(&mut rng, kind.hot);
    let last = months.last().expect("twelve months");
    let mut sim = SiteSim::new(params, rng, months[0].start_ms(), last.start_ms());
    if kind.faulty {
        let (a, b) = fault_window(months);
        sim = sim.with_fault(a, b);
    }
    let schema = schema();
    let mut files = 0;
    let mut bytes = 0;
    for (m, month) in months.iter().enumerate() {
        let cell = u64::from(site - 1) * u64::from(MONTHS) + m as u64;
        let n = cell_rows(spec, cell);
        if n == 0 {
            continue;
        }
        let dir = partition_dir(out, site, &month.name());
        crate::atomic::create_dir_durable(&dir)?;
        let path = dir.join("part-0.parquet");
        write_atomic(&path, |file| {
            let props = WriterProperties::builder()
                .set_compression(Compression::SNAPPY)
                .build();
            let parquet_err = |e: parquet::errors::ParquetError| Error::File {
                path: path.clone(),
                message: format!("cannot be written as Parquet ({e})"),
            };
            let mut writer = ArrowWriter::try_new(&mut *file, schema.clone(), Some(props))
                .map_err(parquet_err)?;
            let (start, end) = (month.start_ms(), month.end_ms());
            let step = (end - start) as f64 / n as f64;
            let mut first = 0;
            while first < n {
                let count = BATCH_ROWS.min(n - first);
                let mut rows = Rows::default();
                sim.simulate(start, step, first, count, &mut rows);
                writer
                    .write(&to_batch(&schema, rows))
                    .map_err(parquet_err)?;
                report(count);
                first += count;
            }
            writer.close().map_err(parquet_err)?;
            Ok(())
        })?;
        files += 1;
        bytes += std::fs::metadata(&path)
            .map_err(|e| Error::io(&path, e))?
            .len();
    }
    Ok((files, bytes))
}

/// Turns simulated columns into a record batch of [`schema`].
fn to_batch(schema: &SchemaRef, rows: Rows) -> RecordBatch {
    let columns: Vec<ArrayRef> = vec![
        Arc::new(TimestampMillisecondArray::from(rows.ts).with_timezone("UTC")),
        Arc::new(Float64Array::from(rows.outdoor_temp)),
        Arc::new(Float64Array::from(rows.outdoor_rh)),
        Arc::new(Float64Array::from(rows.room_setpoint)),
        Arc::new(Float64Array::from(rows.room_temp)),
        Arc::new(Float64Array::from(rows.door_open_min)),
        Arc::new(Float64Array::from(rows.product_load_t)),
        Arc::new(Int32Array::from(rows.defrost)),
        Arc::new(Int32Array::from(rows.hour)),
        Arc::new(Float64Array::from(rows.compressor_kw)),
    ];
    RecordBatch::try_new(schema.clone(), columns)
        .expect("the demo's columns match its schema by construction")
}
