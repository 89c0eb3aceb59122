//! The file-by-file driver: workers take files in turn, check each against the contract,
//! stream its batches through the model and write the output atomically.

use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use arrow_array::RecordBatch;
use arrow_schema::{DataType, Field, Schema};
use parquet::arrow::ProjectionMask;

use super::banded::{check_band_options, format_time};
use super::batch::score_planned;
use super::plan::Plan;
use super::stamp::{complete_stamp, Stamp};
use super::writer::{plan_outputs, OutputFile};
use super::{model_checksum, FileFailure, ScoreObserver, ScoreOptions, ScoreSummary};
use crate::atomic::remove_stale_temps;
use crate::band::{DeviationTallies, FileDeviation};
use crate::data::csv::{self, CsvBatches};
use crate::data::{Format, SourceFile};
use crate::error::{Error, Result};
use crate::model::Model;

/// What happened to one file.
enum Outcome {
    /// Scored now: rows read, rows written, rows missing, rows uncovered, and with a
    /// band the file's deviation tally and the time column's type.
    Scored(
        u64,
        u64,
        u64,
        u64,
        Option<Box<(FileDeviation, Option<DataType>)>>,
    ),
    /// Output already complete.
    Skipped,
}

/// The error for a Parquet file that cannot be read.
pub(crate) fn unreadable(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::File {
        path: path.to_path_buf(),
        message: format!("is not a readable Parquet file ({e})"),
    }
}

/// The batches of one open source file (only the columns a plan needs), with read errors
/// worded for the file's format.
pub(crate) struct SourceBatches {
    inner: Inner,
    path: PathBuf,
}

enum Inner {
    Parquet(crate::store::parquet::Batches),
    Csv(Box<CsvBatches>),
}

impl Iterator for SourceBatches {
    type Item = Result<RecordBatch>;

    fn next(&mut self) -> Option<Result<RecordBatch>> {
        match &mut self.inner {
            Inner::Parquet(r) => r.next().map(|b| b.map_err(|e| unreadable(&self.path, e))),
            Inner::Csv(r) => r.next().map(|b| {
                b.map_err(|e| Error::File {
                    path: self.path.clone(),
                    message: format!("could not be parsed as CSV ({e})"),
                })
            }),
        }
    }
}

/// Opens a source file (Parquet, or CSV with a header row), checks its columns against
/// the contract and returns a batch reader over the columns the plan needs, the plan for
/// those batches and the file's row count (from the Parquet footer; `None` for CSV,
/// whose rows are known once read).
///
/// CSV cells are read as text: the model's inputs are parsed as numbers batch by batch
/// (a cell that is not a number is a missing input and follows the missing-row policy),
/// copied columns stay text.
pub(crate) fn open_checked(
    model: &Model,
    file: &SourceFile,
    opts: &ScoreOptions,
) -> Result<(SourceBatches, Plan, Option<u64>)> {
    let path = &file.path;
    match file.format {
        Format::Parquet => {
            let footer = crate::store::parquet::footer(path)?;
            let plan = Plan::new(
                model,
                footer.meta.schema(),
                &file.partitions,
                opts,
                path,
                false,
            )?;
            let rows = footer.rows().unwrap_or(0);
            let needed = plan.needed();
            let mask = ProjectionMask::roots(footer.meta.parquet_schema(), needed.iter().copied());
            let reader = footer.batches(mask, opts.batch_rows)?;
            let batches = SourceBatches {
                inner: Inner::Parquet(reader),
                path: path.clone(),
            };
            Ok((batches, plan.projected(&needed), Some(rows)))
        }
        Format::Csv => {
            let header = csv::header(path, &opts.csv)?;
            if header.is_empty() {
                return Err(Error::File {
                    path: path.clone(),
                    message: "is empty (no header row), so its columns cannot be checked against the model".into(),
                });
            }
            if csv::delimiter_hint(&header, &opts.csv).is_some() {
                return Err(Error::File {
                    path: path.clone(),
                    message: format!(
                        "has a single column{}",
                        csv::delimiter_advice(&header, &opts.csv)
                    ),
                });
            }
            let schema = Schema::new(
                header
                    .iter()
                    .map(|n| Field::new(n, DataType::Utf8, true))
                    .collect::<Vec<_>>(),
            );
            let plan = Plan::new(model, &schema, &file.partitions, opts, path, true)?;
            let needed = plan.needed();
            let reader = csv::open(path, &header, needed.clone(), &opts.csv, opts.batch_rows)?;
            let batches = SourceBatches {
                inner: Inner::Csv(Box::new(reader)),
                path: path.clone(),
            };
            Ok((batches, plan.projected(&needed), None))
        }
    }
}

/// Scores every file of `files` into `opts.out_dir`, one output per input at the input's
/// path relative to the inputs' common folder. Files run on `opts.threads` workers; a
/// rerun skips complete outputs (unless `opts.overwrite`) and first removes temporary
/// files left by killed runs. `progress` sees rows and files as they finish.
///
/// Without `keep_going`, the first failing file (in file order among those started)
/// stops the run and its error is returned; outputs already complete stay. With it,
/// failures are listed in the summary.
///
/// # Errors
/// The output folder inside the inputs' folder or not writable; an invalid option;
/// without `keep_going`, any file's error (contract, corrupt input, missing input under
/// the `fail` policy, write failure).
pub fn score_files(
    model: &Model,
    files: &[SourceFile],
    opts: &ScoreOptions,
    progress: &dyn ScoreObserver,
) -> Result<ScoreSummary> {
    let t0 = Instant::now();
    opts.validate()?;
    check_band_options(model, opts)?;
    if opts.coverage && model.coverage.is_none() {
        return Err(Error::invalid(
            "coverage",
            "the model stores no coverage landmarks, so score with coverage switched off",
        ));
    }
    let paths: Vec<PathBuf> = files.iter().map(|f| f.path.clone()).collect();
    let outputs = if files.is_empty() {
        Vec::new()
    } else {
        plan_outputs(&paths, &opts.out_dir)?
    };
    remove_stale_temps(&opts.out_dir)?;
    let crc = model_checksum(model)?;
    let pool = opts.pool()?;
    let workers = pool.current_num_threads().min(files.len()).max(1);

    let next = AtomicUsize::new(0);
    let stop = AtomicBool::new(false);
    // Results by file; the deviation tallies are taken out of them in file order as
    // soon as every earlier file is done, so the report's state stays bounded.
    let results: Mutex<Gathered> = Mutex::new(Gathered {
        results: (0..files.len()).map(|_| None).collect(),
        cursor: 0,
        tallies: opts.band.map(|level| {
            DeviationTallies::new(
                level,
                opts.group_column.clone(),
                opts.time_column.clone(),
                files.len(),
            )
        }),
        time_type: None,
    });
    let plot_points = results
        .lock()
        .expect("results lock")
        .tallies
        .as_ref()
        .map_or(0, DeviationTallies::plot_points);
    std::thread::scope(|s| {
        for _ in 0..workers {
            s.spawn(|| loop {
                if stop.load(Ordering::SeqCst) {
                    break;
                }
                let i = next.fetch_add(1, Ordering::SeqCst);
                if i >= files.len() {
                    break;
                }
                let job = FileJob {
                    model,
                    file: &files[i],
                    output: &outputs[i],
                    opts,
                    crc: &crc,
                    pool: &pool,
                    stop: &stop,
                    progress,
                    plot_points,
                };
                let r = job.run();
                if r.is_err() && !opts.keep_going {
                    stop.store(true, Ordering::SeqCst);
                }
                progress.file_done();
                results.lock().expect("results lock").put(i, r);
            });
        }
    });

    let mut summary = ScoreSummary {
        files: files.len(),
        ..ScoreSummary::default()
    };
    let Gathered {
        results,
        tallies,
        time_type,
        ..
    } = results.into_inner().expect("results lock");
    for (file, r) in files.iter().zip(results) {
        match r {
            None => {}
            Some(Ok(Outcome::Skipped)) => summary.files_skipped += 1,
            Some(Ok(Outcome::Scored(read, written, missing, uncovered, _))) => {
                summary.files_scored += 1;
                summary.rows_read += read;
                summary.rows_written += written;
                summary.rows_missing += missing;
                summary.rows_uncovered += uncovered;
            }
            Some(Err(Error::ScoreStopped)) => {}
            Some(Err(e)) => {
                if !opts.keep_going {
                    return Err(e);
                }
                summary.failures.push(FileFailure {
                    path: file.path.clone(),
                    message: e.to_string(),
                });
            }
        }
    }
    if let Some(tallies) = tallies {
        let mut report = tallies.build();
        let ty = time_type.as_ref();
        let ty = if opts.time_column.is_some() { ty } else { None };
        report.format_times(&|t| format_time(t, ty));
        summary.deviation = Some(report);
    }
    summary.seconds = t0.elapsed().as_secs_f64();
    Ok(summary)
}

/// One file to score and everything it needs.
struct FileJob<'a> {
    model: &'a Model,
    file: &'a SourceFile,
    output: &'a Path,
    opts: &'a ScoreOptions,
    crc: &'a str,
    pool: &'a rayon::ThreadPool,
    stop: &'a AtomicBool,
    progress: &'a dyn ScoreObserver,
    /// Plot points a file's deviation tally keeps per group.
    plot_points: usize,
}

/// The files' results as they finish, and the deviation tallies taken from them in
/// file order.
struct Gathered {
    results: Vec<Option<Result<Outcome>>>,
    /// Files before this one have had their tallies taken.
    cursor: usize,
    tallies: Option<DeviationTallies>,
    time_type: Option<DataType>,
}

impl Gathered {
    /// Stores file `i`'s result, then moves every tally now in file order into the
    /// report's tallies.
    fn put(&mut self, i: usize, r: Result<Outcome>) {
        self.results[i] = Some(r);
        while let Some(Some(r)) = self.results.get_mut(self.cursor) {
            if let (Ok(Outcome::Scored(.., tally)), Some(all)) = (r, self.tallies.as_mut()) {
                if let Some(t) = tally.take() {
                    let (t, ty) = *t;
                    all.push(t);
                    self.time_type = self.time_type.take().or(ty);
                }
            }
            self.cursor += 1;
        }
    }
}

impl FileJob<'_> {
    fn run(&self) -> Result<Outcome> {
        let path = &self.file.path;
        let known = self.file.rows;
        let settings = self.opts.fingerprint(self.file.format);
        let stamp = Stamp::for_input(path, known.unwrap_or(0), self.crc, &settings)?;
        if !self.opts.overwrite {
            if let Some(done) = complete_stamp(self.output, &stamp, known.is_some()) {
                self.progress.rows_done(done.input_rows);
                return Ok(Outcome::Skipped);
            }
        }
        let (reader, plan, rows) = open_checked(self.model, self.file, self.opts)?;
        let mut out = OutputFile::create(self.output, plan.schema().clone(), self.opts.batch_rows)?;
        let (mut read, mut missing, mut uncovered) = (0u64, 0u64, 0u64);
        let mut tally = plan.band().map(|_| {
            FileDeviation::new(path.display().to_string()).with_plot_points(self.plot_points)
        });
        for batch in reader {
            if self.stop.load(Ordering::SeqCst) {
                // Another file failed: drop the temporary file, leave the final name.
                return Err(Error::ScoreStopped);
            }
            let batch = batch?;
            let scored = self.pool.install(|| {
                score_planned(
                    self.model,
                    &plan,
                    &batch,
                    self.opts,
                    path,
                    read,
                    tally.as_mut(),
                )
            })?;
            out.write(&scored.batch, self.output)?;
            let n = batch.num_rows() as u64;
            read += n;
            missing += scored.missing;
            uncovered += scored.uncovered;
            self.progress.rows_done(n);
        }
        if let Some(rows) = rows {
            if read != rows {
                return Err(Error::File {
                    path: path.clone(),
                    message: format!("yielded {read} rows but its footer announces {rows}"),
                });
            }
        }
        let stamp = Stamp {
            input_rows: read,
            ..stamp
        };
        let written = out.commit(stamp, self.output)?;
        let tally = tally.map(|mut t| {
            t.finish();
            Box::new((t, plan.band().and_then(|b| b.time_type().cloned())))
        });
        Ok(Outcome::Scored(read, written, missing, uncovered, tally))
    }
}
