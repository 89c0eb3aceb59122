//! Batch scoring of data lakes: a fitted [`Model`] and Parquet or CSV sources in, one
//! Parquet file per input out (mirroring the input folders; a CSV input's output has its
//! extension changed to `.parquet`), with the prediction beside the columns the user
//! keeps, and a coverage value telling how close each row lies to the training data (see
//! [`crate::coverage`]).
//!
//! ```text
//! per file, files in parallel:  footer or header → contract check → read batches
//!   (projection) → inputs to f64 → predict + coverage, one pass over row blocks
//!   → write under a temporary name → stamp (input size + mtime, model CRC-32,
//!   settings, rows, CRC-32 of the bytes before the footer) → rename
//! ```
//!
//! CSV sources (header row, [`ScoreOptions::csv`] delimiter) are checked by column name
//! before any row is read; their cells are read as text: model inputs are parsed as
//! numbers with the same rules as fitting (a cell that is not a number is a missing
//! input: a null prediction, a skipped row, or under `fail` an error naming row and
//! column), kept columns are written as text (`Utf8`), exactly as in the file.
//!
//! * Contract first: a file whose schema breaks the model's input contract is refused
//!   before any row is read, naming file and column, and nothing is written for it.
//! * Restartable: outputs are written atomically (temporary name, then rename); a rerun skips an
//!   output whose footer reads, whose stamp matches the input, model and settings, and
//!   whose bytes before the footer still have the stamped CRC-32 (damaged data pages
//!   under an intact footer are rewritten), and removes temporary files left by a
//!   killed run.
//! * Bounded memory: `threads` workers each hold one file open and one batch of
//!   `batch_rows` rows; row groups are flushed every `batch_rows` rows. The map and the
//!   coverage run on a rayon pool of `threads`, row-wise, so results do not depend on
//!   the thread count or batch size.
//! * Library first: [`score_batch`] scores one Arrow batch for use inside other engines;
//!   [`predict_covered`] gives predictions and coverage of rows in memory;
//!   [`score_files`] scores files; [`score_stream`] and [`score_files_to_stream`] read or
//!   write Arrow IPC streams (pipes).

mod banded;
mod bandpredict;
mod batch;
mod covered;
mod files;
mod pipe;
mod plan;
mod stamp;
mod table;
mod writer;

use std::path::PathBuf;

use serde::{Deserialize, Serialize};

pub use banded::{
    check_band_options, format_time, BAND_HIGH_COLUMN, BAND_LOW_COLUMN, OUTSIDE_COLUMN,
    RESIDUAL_COLUMN,
};
pub use bandpredict::predict_with_band;
pub use batch::{score_batch, score_batch_at};
pub use covered::predict_covered;
pub use files::score_files;
pub use pipe::{score_files_to_stream, score_stream};
pub use stamp::STAMP_KEY;
pub use table::TableReport;

use crate::data::{CsvOptions, Format};
use crate::error::{Error, Result};
use crate::model::Model;

/// Name of the coverage column (Float64 in [0, 1]).
pub const COVERAGE_COLUMN: &str = "coverage";

/// Name of the flag column (Boolean: coverage at or above the model's threshold).
pub const COVERED_COLUMN: &str = "covered";

/// What to do with a row whose model inputs hold a null, NaN or infinity.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MissingRows {
    /// Keep the row; its prediction (and coverage) is null.
    #[default]
    Null,
    /// Leave the row out of the output (counted in the summary).
    Skip,
    /// Stop scoring the file, naming file, row and column.
    Fail,
}

/// How to score.
#[derive(Clone, Debug, PartialEq)]
pub struct ScoreOptions {
    /// Folder receiving one output file per input (used by [`score_files`]).
    pub out_dir: PathBuf,
    /// Name of the prediction column.
    pub prediction_name: String,
    /// Input columns copied to the output, in this order; `None` = every column that is
    /// not a model input, in file order.
    pub keep: Option<Vec<String>>,
    /// Also copy the model's input columns.
    pub with_inputs: bool,
    /// Write the `coverage` and `covered` columns (the model must store coverage).
    pub coverage: bool,
    /// Rows with missing inputs.
    pub missing: MissingRows,
    /// Rows per batch read, scored and written (also the output row-group size).
    pub batch_rows: usize,
    /// Threads (0 = all cores): files scored at once, and the pool mapping rows; at most
    /// the processors unless `oversubscribe`.
    pub threads: usize,
    /// Allow `threads` above the number of processors.
    pub oversubscribe: bool,
    /// Rewrite outputs even when they are complete.
    pub overwrite: bool,
    /// Go on with the other files after a file fails (the summary lists failures).
    pub keep_going: bool,
    /// How CSV sources are parsed (their delimiter).
    pub csv: CsvOptions,
    /// Band level in (0, 1): adds the band's low and high columns (and, where the input
    /// holds the model's target, the residual and the outside flag) and makes
    /// [`score_files`] return a deviation report. The model must store a band.
    pub band: Option<f64>,
    /// Column giving the time order of the deviation report's runs (else row order
    /// within each file).
    pub time_column: Option<String>,
    /// Column (or partition folder) whose values group the deviation report.
    pub group_column: Option<String>,
}

impl Default for ScoreOptions {
    fn default() -> Self {
        ScoreOptions {
            out_dir: PathBuf::from("scored"),
            prediction_name: "prediction".into(),
            keep: None,
            with_inputs: false,
            coverage: true,
            missing: MissingRows::Null,
            batch_rows: 65_536,
            threads: 0,
            overwrite: false,
            keep_going: false,
            oversubscribe: false,
            csv: CsvOptions::default(),
            band: None,
            time_column: None,
            group_column: None,
        }
    }
}

impl ScoreOptions {
    /// Checks the options on their own.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] for zero batch rows, an empty prediction name, a band
    /// level outside (0, 1), or more threads than processors without `oversubscribe`.
    pub fn validate(&self) -> Result<()> {
        crate::settings::check_threads(self.threads, self.oversubscribe)?;
        if self.batch_rows == 0 {
            return Err(Error::invalid("batch rows", "must be at least 1"));
        }
        if self.prediction_name.trim().is_empty() {
            return Err(Error::invalid("prediction name", "must not be empty"));
        }
        if let Some(level) = self.band {
            crate::band::check_level(level)?;
        }
        Ok(())
    }

    /// The settings that shape the output of a file of this format, as recorded in its
    /// stamp (the delimiter only for CSV sources).
    fn fingerprint(&self, format: Format) -> String {
        let mut v = serde_json::json!({
            "name": self.prediction_name,
            "keep": self.keep,
            "with_inputs": self.with_inputs,
            "coverage": self.coverage,
            "missing": self.missing,
        });
        if let Some(level) = self.band {
            v["band"] = serde_json::json!(level);
        }
        if format == Format::Csv {
            v["delimiter"] = serde_json::json!(self.csv.delimiter);
        }
        v.to_string()
    }

    /// A rayon pool of the asked size.
    fn pool(&self) -> Result<rayon::ThreadPool> {
        rayon::ThreadPoolBuilder::new()
            .num_threads(self.threads)
            .build()
            .map_err(|e| Error::invalid("threads", format!("could not start a thread pool ({e})")))
    }
}

/// One file that could not be scored.
#[derive(Clone, Debug, PartialEq)]
pub struct FileFailure {
    /// The input file.
    pub path: PathBuf,
    /// The error, as one sentence.
    pub message: String,
}

/// What a scoring run did.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct ScoreSummary {
    /// Input files given.
    pub files: usize,
    /// Files scored in this run.
    pub files_scored: usize,
    /// Files whose output was already complete (skipped).
    pub files_skipped: usize,
    /// Files that failed (only with `keep_going`; otherwise the run returns the error).
    pub failures: Vec<FileFailure>,
    /// Input rows read in this run.
    pub rows_read: u64,
    /// Rows written in this run.
    pub rows_written: u64,
    /// Rows with a missing input (null predictions, or left out under `skip`).
    pub rows_missing: u64,
    /// Rows scored with coverage below the model's threshold.
    pub rows_uncovered: u64,
    /// Wall-clock seconds.
    pub seconds: f64,
    /// With a band level: how the measured values sat against their bands, for the files
    /// scored in this run (files skipped as complete are not in it).
    pub deviation: Option<crate::band::DeviationReport>,
}

/// Receives progress while files are scored (called from worker threads).
pub trait ScoreObserver: Sync {
    /// `rows` more input rows are done (scored, or found complete and skipped).
    fn rows_done(&self, rows: u64) {
        let _ = rows;
    }
    /// One more file is finished (scored, skipped or failed).
    fn file_done(&self) {}
}

/// An observer that ignores progress.
#[derive(Clone, Copy, Debug, Default)]
pub struct Quiet;

impl ScoreObserver for Quiet {}

/// CRC-32 of the model's encoded bytes as 8 hex digits: ties outputs to the model that
/// made them.
///
/// # Errors
/// Those of encoding the model.
pub fn model_checksum(model: &Model) -> Result<String> {
    let bytes = model.to_model_file()?.to_bytes()?;
    Ok(format!("{:08x}", crc32fast::hash(&bytes)))
}
