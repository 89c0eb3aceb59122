//! `kernlake score`: flags, wiring, progress bar and the closing summary; the work is
//! done by [`crate::score`].

use std::path::PathBuf;
use std::sync::atomic::{AtomicU64, Ordering};

use clap::{Args, ValueEnum};
use indicatif::{ProgressBar, ProgressStyle};

use std::io::Write;

use crate::atomic::write_atomic;
use crate::band::render_band_svg;
use crate::data::{discover, discover_lenient, CsvOptions};
use crate::error::{Error, Result};
use crate::model::Model;
use crate::score::{
    check_band_options, score_files, score_files_to_stream, score_stream, MissingRows,
    ScoreObserver, ScoreOptions, ScoreSummary,
};
use crate::settings::defaults;

/// `kernlake score`.
#[derive(Debug, Args)]
pub struct ScoreArgs {
    /// The model file (a path or an `s3://bucket/key` URL).
    #[arg(value_name = "MODEL")]
    pub model: PathBuf,
    /// Parquet or CSV files, folders (searched recursively) or glob patterns; `-` reads
    /// an Arrow IPC stream from standard input.
    ///
    /// Object stores: `s3://bucket/prefix/` URLs work the same way (credentials and
    /// endpoint from AWS_ACCESS_KEY_ID, AWS_SECRET_ACCESS_KEY, AWS_REGION,
    /// AWS_ENDPOINT_URL, AWS_ALLOW_HTTP; AWS_SKIP_SIGNATURE=true for anonymous access).

    #[arg(required = true, value_name = "SOURCE")]
    pub sources: Vec<String>,
    /// Output folder (one Parquet file per input, mirroring the input folders; a CSV
    /// input's output ends in .parquet), an `s3://bucket/prefix/` URL (each object
    /// uploaded whole, so it appears only complete), or `-` for an Arrow IPC stream on
    /// standard output.
    #[arg(long, short = 'o', value_name = "DIR")]
    pub out: String,
    /// Input columns copied to the output, comma separated (default: every column that
    /// is not a model input).
    #[arg(long, value_delimiter = ',', value_name = "COLS")]
    pub keep: Option<Vec<String>>,
    /// Name of the prediction column.
    #[arg(long, default_value = "prediction", value_name = "COL")]
    pub name: String,
    /// Also copy the model's input columns to the output.
    #[arg(long)]
    pub with_inputs: bool,
    /// Leave out the coverage and covered columns.
    #[arg(long)]
    pub no_coverage: bool,
    /// What to do with a row whose inputs hold a null, NaN or infinity.
    #[arg(long, value_enum, default_value = "null")]
    pub missing: MissingArg,
    /// Score the other files after one fails, and end with a list of failures.
    #[arg(long)]
    pub keep_going: bool,
    /// Rewrite outputs that are already complete.
    #[arg(long)]
    pub overwrite: bool,
    /// Threads (0 = all cores; at most the processors unless --oversubscribe).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Allow --threads above the number of processors.
    #[arg(long)]
    pub oversubscribe: bool,
    /// Field separator of CSV sources.
    #[arg(long, default_value = ",", value_name = "CHAR")]
    pub delimiter: char,
    /// Rows per batch (memory is about threads × batch rows × columns × 8 bytes).
    #[arg(long, default_value_t = 65_536)]
    pub batch_rows: usize,
    /// Band level in (0, 1): adds band_low and band_high (a calibrated interval around
    /// the prediction: it holds new rows like the fit's holdout with at least this
    /// probability, not rows from a changed plant) and, where the data holds the
    /// target, residual and outside_band, and prints a deviation report. Default 0.95
    /// when the model stores a band. Rows flagged outside the band are an aid for
    /// engineers deciding where to look, not a protective function.
    #[arg(long, value_name = "LEVEL")]
    pub band: Option<f64>,
    /// Score without the band columns and report.
    #[arg(long, conflicts_with = "band")]
    pub no_band: bool,
    /// Time column ordering the report's runs of consecutive rows outside the band
    /// (default: row order within each file).
    #[arg(long, value_name = "COL")]
    pub time: Option<String>,
    /// Column (or partition folder) grouping the deviation report, e.g. a site id.
    #[arg(long, value_name = "COL")]
    pub by: Option<String>,
    /// Writes the deviation report as JSON (atomically).
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    /// Writes an SVG of measured against expected values with the band, for the group
    /// the report ranks worst.
    #[arg(long, value_name = "FILE")]
    pub plot: Option<PathBuf>,
}

/// Missing-input policies on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum MissingArg {
    /// Keep the row with a null prediction.
    Null,
    /// Leave the row out.
    Skip,
    /// Stop at the first one, naming file, row and column.
    Fail,
}

/// The progress bar: rows, rows/s, ETA, and files in the message.
struct Bar {
    bar: ProgressBar,
    files: usize,
    done: AtomicU64,
}

impl ScoreObserver for Bar {
    fn rows_done(&self, rows: u64) {
        self.bar.inc(rows);
    }
    fn file_done(&self) {
        let d = self.done.fetch_add(1, Ordering::Relaxed) + 1;
        self.bar.set_message(format!("files {d}/{}", self.files));
    }
}

/// The progress bar; `rows` is `None` when some sources (CSV) have no row count before
/// they are read: then rows and rows/s are shown without a length or ETA.
fn bar(quiet: bool, rows: Option<u64>, files: usize) -> Bar {
    let bar = if quiet {
        ProgressBar::hidden()
    } else {
        let b = match rows {
            Some(rows) => {
                let b = ProgressBar::new(rows);
                b.set_style(
                    ProgressStyle::with_template(
                        "     score [{bar:32}] {human_pos}/{human_len} rows  {per_sec}  eta {eta}  {msg}",
                    )
                    .expect("valid template")
                    .progress_chars("=> "),
                );
                b
            }
            None => {
                let b = ProgressBar::no_length();
                b.set_style(
                    ProgressStyle::with_template("     score {human_pos} rows  {per_sec}  {msg}")
                        .expect("valid template"),
                );
                b
            }
        };
        b.set_message(format!("files 0/{files}"));
        b
    };
    Bar {
        bar,
        files,
        done: AtomicU64::new(0),
    }
}

fn print_summary(s: &ScoreSummary) {
    eprintln!(
        "kernlake: {} file(s): {} scored, {} already complete, {} failed; {} rows read, {} written, {} with missing inputs, {} out of coverage; {:.1}s",
        s.files,
        s.files_scored,
        s.files_skipped,
        s.failures.len(),
        s.rows_read,
        s.rows_written,
        s.rows_missing,
        s.rows_uncovered,
        s.seconds
    );
    for f in &s.failures {
        eprintln!("  failed: {}: {}", f.path.display(), f.message);
    }
}

/// Runs `kernlake score`; exits 1 when files failed under `--keep-going`.
pub fn run(a: ScoreArgs, quiet: bool) -> Result<i32> {
    if !a.delimiter.is_ascii() {
        return Err(Error::invalid(
            "delimiter",
            "must be a single ASCII character",
        ));
    }
    // Settings first (threads, batch rows, an explicit band level): before the model or
    // any data is read.
    let mut opts = ScoreOptions {
        out_dir: PathBuf::from(&a.out),
        prediction_name: a.name.clone(),
        keep: a.keep.clone(),
        with_inputs: a.with_inputs,
        coverage: !a.no_coverage,
        missing: match a.missing {
            MissingArg::Null => MissingRows::Null,
            MissingArg::Skip => MissingRows::Skip,
            MissingArg::Fail => MissingRows::Fail,
        },
        batch_rows: a.batch_rows,
        threads: a.threads,
        oversubscribe: a.oversubscribe,
        overwrite: a.overwrite,
        keep_going: a.keep_going,
        csv: CsvOptions {
            delimiter: a.delimiter as u8,
        },
        band: if a.no_band { None } else { a.band },
        time_column: a.time.clone(),
        group_column: a.by.clone(),
    };
    opts.validate()?;
    let model = Model::load(&a.model)?;
    if !a.no_band && a.band.is_none() {
        opts.band = model.band.as_ref().map(|_| defaults::BAND_LEVEL);
    }
    // A band the model cannot give fails before any file is listed or read.
    check_band_options(&model, &opts)?;
    if (a.report.is_some() || a.plot.is_some()) && opts.band.is_none() {
        return Err(Error::invalid(
            "report",
            "a deviation report needs a band: the model stores none, or --no-band was given",
        ));
    }
    for p in a.report.iter().chain(a.plot.iter()) {
        crate::atomic::check_writable(p)?;
    }
    let to_stdout = a.out == "-";
    let summary = if a.sources.iter().any(|s| s == "-") {
        if a.sources.len() != 1 || !to_stdout {
            return Err(Error::invalid(
                "sources",
                "standard input ('-') is scored alone and only into standard output (--out -)",
            ));
        }
        let stdin = std::io::stdin().lock();
        let stdout = std::io::BufWriter::new(std::io::stdout().lock());
        score_stream(&model, stdin, stdout, &opts)?
    } else {
        let files = if a.keep_going {
            discover_lenient(&a.sources)?
        } else {
            discover(&a.sources)?
        };
        let rows: Option<u64> = files.iter().map(|f| f.rows).sum();
        let progress = bar(quiet || to_stdout, rows, files.len());
        let s = if to_stdout {
            let stdout = std::io::BufWriter::new(std::io::stdout().lock());
            score_files_to_stream(&model, &files, &opts, stdout, &progress)?
        } else {
            score_files(&model, &files, &opts, &progress)?
        };
        progress.bar.finish_and_clear();
        s
    };
    if !quiet {
        print_summary(&summary);
    }
    if let Some(r) = &summary.deviation {
        if !quiet {
            eprint!("{}", r.to_text());
        }
        if let Some(p) = &a.report {
            write_atomic(p, |f| {
                f.write_all(r.to_json().as_bytes())
                    .map_err(|e| Error::io(p.clone(), e))
            })?;
        }
        if let Some(p) = &a.plot {
            let target = model.columns.target.as_deref().unwrap_or("target");
            write_atomic(p, |f| {
                f.write_all(render_band_svg(r, target).as_bytes())
                    .map_err(|e| Error::io(p.clone(), e))
            })?;
        }
    }
    Ok(if summary.failures.is_empty() { 0 } else { 1 })
}
