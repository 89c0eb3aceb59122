//! The file-by-file driver: workers take files in turn, check each against the contract,
//! stream its batches through the model and write the output atomically.

use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::Mutex;
use std::time::Instant;

use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use parquet::arrow::ProjectionMask;

use super::batch::{score_planned, Plan};
use super::writer::{is_complete, plan_outputs, remove_stale_temps, OutputFile, Stamp};
use super::{model_checksum, FileFailure, ScoreObserver, ScoreOptions, ScoreSummary};
use crate::data::{Format, SourceFile};
use crate::error::{Error, Result};
use crate::model::Model;

/// What happened to one file.
enum Outcome {
    /// Scored now: rows read, rows written, rows missing, rows uncovered.
    Scored(u64, u64, u64, u64),
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

/// Opens a Parquet source, checks it against the contract and returns a batch reader
/// over the columns the plan needs, the plan for those batches and the file's rows.
pub(crate) fn open_checked(
    model: &Model,
    file: &SourceFile,
    opts: &ScoreOptions,
) -> Result<(
    parquet::arrow::arrow_reader::ParquetRecordBatchReader,
    Plan,
    u64,
)> {
    if file.format != Format::Parquet {
        return Err(Error::File {
            path: file.path.clone(),
            message: "is not a Parquet file; scoring reads Parquet files only".into(),
        });
    }
    let f = File::open(&file.path).map_err(|e| Error::io(&file.path, e))?;
    let builder =
        ParquetRecordBatchReaderBuilder::try_new(f).map_err(|e| unreadable(&file.path, e))?;
    let plan = Plan::new(model, builder.schema(), &file.partitions, opts, &file.path)?;
    let rows = u64::try_from(builder.metadata().file_metadata().num_rows()).unwrap_or(0);
    let needed = plan.needed();
    let mask = ProjectionMask::roots(builder.parquet_schema(), needed.iter().copied());
    let reader = builder
        .with_projection(mask)
        .with_batch_size(opts.batch_rows)
        .build()
        .map_err(|e| unreadable(&file.path, e))?;
    Ok((reader, plan.projected(&needed), rows))
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
    let settings = opts.fingerprint();
    let pool = opts.pool()?;
    let workers = pool.current_num_threads().min(files.len()).max(1);

    let next = AtomicUsize::new(0);
    let stop = AtomicBool::new(false);
    let results: Mutex<Vec<Option<Result<Outcome>>>> =
        Mutex::new((0..files.len()).map(|_| None).collect());
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
                    settings: &settings,
                    pool: &pool,
                    stop: &stop,
                    progress,
                };
                let r = job.run();
                if r.is_err() && !opts.keep_going {
                    stop.store(true, Ordering::SeqCst);
                }
                progress.file_done();
                results.lock().expect("results lock")[i] = Some(r);
            });
        }
    });

    let mut summary = ScoreSummary {
        files: files.len(),
        ..ScoreSummary::default()
    };
    let results = results.into_inner().expect("results lock");
    for (file, r) in files.iter().zip(results) {
        match r {
            None => {}
            Some(Ok(Outcome::Skipped)) => summary.files_skipped += 1,
            Some(Ok(Outcome::Scored(read, written, missing, uncovered))) => {
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
    settings: &'a str,
    pool: &'a rayon::ThreadPool,
    stop: &'a AtomicBool,
    progress: &'a dyn ScoreObserver,
}

impl FileJob<'_> {
    fn run(&self) -> Result<Outcome> {
        let path = &self.file.path;
        let rows = self.file.rows.unwrap_or(0);
        let stamp = Stamp::for_input(path, rows, self.crc, self.settings)?;
        if !self.opts.overwrite && is_complete(self.output, &stamp) {
            self.progress.rows_done(rows);
            return Ok(Outcome::Skipped);
        }
        let (reader, plan, rows) = open_checked(self.model, self.file, self.opts)?;
        let stamp = Stamp {
            input_rows: rows,
            ..stamp
        };
        let mut out = OutputFile::create(self.output, plan.schema().clone(), self.opts.batch_rows)?;
        let (mut read, mut missing, mut uncovered) = (0u64, 0u64, 0u64);
        for batch in reader {
            if self.stop.load(Ordering::SeqCst) {
                // Another file failed: drop the temporary file, leave the final name.
                return Err(Error::ScoreStopped);
            }
            let batch = batch.map_err(|e| unreadable(path, e))?;
            let scored = self
                .pool
                .install(|| score_planned(self.model, &plan, &batch, self.opts, path, read))?;
            out.write(&scored.batch, self.output)?;
            let n = batch.num_rows() as u64;
            read += n;
            missing += scored.missing;
            uncovered += scored.uncovered;
            self.progress.rows_done(n);
        }
        if read != rows {
            return Err(Error::File {
                path: path.clone(),
                message: format!("yielded {read} rows but its footer announces {rows}"),
            });
        }
        let written = out.commit(stamp, self.output)?;
        Ok(Outcome::Scored(read, written, missing, uncovered))
    }
}
