//! `kernlake fit`: discover sources, resolve columns, stream the fit, save the model.

use crate::atomic::write_atomic;
use crate::data::{choose_columns, discover, TableReader};
use crate::error::{Error, Result};
use crate::fit::Fitter;
use crate::report::render_training;

use super::args::FitArgs;
use super::progress::{rows_bar, EpochBars};

/// Runs `kernlake fit`.
pub fn run(a: FitArgs, quiet: bool) -> Result<i32> {
    // Every setting is checked before any file is opened.
    let opts = a.model.options()?;
    let csv = a.src.csv()?;
    // The outputs can be written (folder exists, takes files, the path is not a folder)
    // before hours of training, not after.
    super::args::check_output(&a.out)?;
    if let Some(path) = &a.report {
        super::args::check_output(path)?;
    }
    let files = discover(&a.src.sources)?;
    let choice = choose_columns(&files, &a.src.selection(Some(&a.target)), &csv)?;
    let notes = choice.left_out.iter().filter(|_| !quiet);
    notes.for_each(|l| eprintln!("kernlake: {l}"));
    let columns = choice.columns;
    let known_rows: u64 = files.iter().filter_map(|f| f.rows).sum();
    if !quiet {
        eprintln!(
            "kernlake: {} file(s), {} input column(s), target '{}'",
            files.len(),
            columns.features.len(),
            a.target
        );
    }
    let reader = TableReader::new(files, columns)
        .with_batch_rows(opts.block_rows)
        .with_missing(a.src.missing())
        .with_csv(csv);
    let survey_bar = rows_bar(quiet, known_rows, "survey");
    let epochs = EpochBars::new(quiet, known_rows);
    let fitter = Fitter::from_options(opts);
    let model = fitter.fit_files(&reader, &epochs, &|rows| survey_bar.set_position(rows))?;
    survey_bar.finish_and_clear();
    model.save(&a.out)?;
    if let Some(path) = &a.report {
        let mut doc = serde_json::to_value(&model.report).map_err(|source| Error::Encode {
            what: "the training report",
            source,
        })?;
        doc["seconds"] = serde_json::json!(model.report.seconds);
        doc["threads"] = serde_json::json!(model.report.threads);
        doc["epoch_seconds"] = serde_json::json!(model
            .report
            .history
            .iter()
            .map(|r| r.seconds)
            .collect::<Vec<_>>());
        let json = serde_json::to_vec_pretty(&doc).map_err(|source| Error::Encode {
            what: "the training report",
            source,
        })?;
        write_atomic(path, |f| {
            std::io::Write::write_all(f, &json).map_err(|e| Error::io(path, e))
        })?;
    }
    if !quiet {
        print!("{}", render_training(&model.report));
        println!("model written to {}", a.out.display());
        // A quick check on a sample for a clearly better gamma (issue 14).
        if let Ok(Some(hint)) = crate::tune::gamma_hint_for_model(&reader, &model) {
            println!("{}", hint.message());
        }
    }
    Ok(0)
}
