//! Pipes: scoring an Arrow IPC stream (for example standard input) into another, and
//! scoring files into one Arrow IPC stream (for example standard output).

use std::io::{Read, Write};
use std::path::Path;
use std::time::Instant;

use arrow_ipc::reader::StreamReader;
use arrow_ipc::writer::StreamWriter;
use arrow_schema::SchemaRef;

use super::batch::score_planned;
use super::files::open_checked;
use super::plan::Plan;
use super::{ScoreObserver, ScoreOptions, ScoreSummary};
use crate::data::SourceFile;
use crate::error::{Error, Result};
use crate::model::Model;

/// The name standard input goes by in messages.
const STDIN: &str = "<stdin>";

fn stream_error(what: &str, e: impl std::fmt::Display) -> Error {
    Error::File {
        path: Path::new(what).to_path_buf(),
        message: format!("is not a usable Arrow IPC stream ({e})"),
    }
}

/// Scores an Arrow IPC stream read from `input` into an Arrow IPC stream written to
/// `output`, batch by batch (batches longer than `opts.batch_rows` are split). The input
/// schema is checked against the model's contract before any row is scored. An empty
/// stream gives an empty stream with the output schema.
///
/// # Errors
/// An unreadable stream, a contract mismatch (naming the column), a missing input under
/// the `fail` policy, a write failure.
pub fn score_stream<R: Read, W: Write>(
    model: &Model,
    input: R,
    output: W,
    opts: &ScoreOptions,
) -> Result<ScoreSummary> {
    let t0 = Instant::now();
    opts.validate()?;
    let pool = opts.pool()?;
    let path = Path::new(STDIN);
    let reader = StreamReader::try_new_buffered(input, None).map_err(|e| stream_error(STDIN, e))?;
    let plan = Plan::new(model, reader.schema().as_ref(), &[], opts, path, false)?;
    let mut writer =
        StreamWriter::try_new(output, plan.schema()).map_err(|e| stream_error("<output>", e))?;
    let mut summary = ScoreSummary {
        files: 1,
        ..ScoreSummary::default()
    };
    for batch in reader {
        let batch = batch.map_err(|e| stream_error(STDIN, e))?;
        let mut offset = 0;
        while offset < batch.num_rows() {
            let len = opts.batch_rows.min(batch.num_rows() - offset);
            let part = batch.slice(offset, len);
            let first = summary.rows_read;
            let scored =
                pool.install(|| score_planned(model, &plan, &part, opts, path, first, None))?;
            writer
                .write(&scored.batch)
                .map_err(|e| stream_error("<output>", e))?;
            summary.rows_read += len as u64;
            summary.rows_written += scored.batch.num_rows() as u64;
            summary.rows_missing += scored.missing;
            summary.rows_uncovered += scored.uncovered;
            offset += len;
        }
    }
    writer.finish().map_err(|e| stream_error("<output>", e))?;
    summary.files_scored = 1;
    summary.seconds = t0.elapsed().as_secs_f64();
    Ok(summary)
}

/// Scores `files` in order into one Arrow IPC stream written to `output` (the output
/// schemas of all files must agree). Every file is checked against the contract before
/// its rows are read; the first failure stops the run.
///
/// # Errors
/// Those of [`super::score_files`] for a file, a file whose output schema differs from
/// the first file's (naming it), a write failure.
pub fn score_files_to_stream<W: Write>(
    model: &Model,
    files: &[SourceFile],
    opts: &ScoreOptions,
    output: W,
    progress: &dyn ScoreObserver,
) -> Result<ScoreSummary> {
    let t0 = Instant::now();
    opts.validate()?;
    let pool = opts.pool()?;
    let mut summary = ScoreSummary {
        files: files.len(),
        ..ScoreSummary::default()
    };
    let mut output = Some(output);
    let mut writer: Option<StreamWriter<W>> = None;
    let mut first_schema: Option<SchemaRef> = None;
    for file in files {
        let (reader, plan, _) = open_checked(model, file, opts)?;
        match &first_schema {
            Some(s) if s != plan.schema() => {
                return Err(Error::File {
                    path: file.path.clone(),
                    message: "gives output columns different from the first file's, so it cannot join the same stream".into(),
                });
            }
            Some(_) => {}
            None => {
                let out = output.take().expect("the output is used once");
                let w = StreamWriter::try_new(out, plan.schema())
                    .map_err(|e| stream_error("<output>", e))?;
                writer = Some(w);
                first_schema = Some(plan.schema().clone());
            }
        }
        let w = writer
            .as_mut()
            .expect("the writer starts with the first file");
        let mut read = 0u64;
        for batch in reader {
            let batch = batch?;
            let scored =
                pool.install(|| score_planned(model, &plan, &batch, opts, &file.path, read, None))?;
            w.write(&scored.batch)
                .map_err(|e| stream_error("<output>", e))?;
            read += batch.num_rows() as u64;
            summary.rows_written += scored.batch.num_rows() as u64;
            summary.rows_missing += scored.missing;
            summary.rows_uncovered += scored.uncovered;
            progress.rows_done(batch.num_rows() as u64);
        }
        summary.rows_read += read;
        summary.files_scored += 1;
        progress.file_done();
    }
    if let Some(mut w) = writer {
        w.finish().map_err(|e| stream_error("<output>", e))?;
    }
    summary.seconds = t0.elapsed().as_secs_f64();
    Ok(summary)
}
