//! Scoring one table batch by batch with a deviation report (the Python binding's
//! `Model.score_report`, and any program that holds its rows as Arrow batches): the
//! same band columns as [`super::score_files`] and one report over the whole table.

use std::path::Path;

use arrow_array::RecordBatch;
use arrow_schema::DataType;

use super::banded::{check_band_options, format_time};
use super::batch::score_planned;
use super::plan::Plan;
use super::ScoreOptions;
use crate::band::{DeviationReport, FileDeviation};
use crate::error::{Error, Result};
use crate::model::Model;

/// A table scored slice by slice, tallied for one deviation report.
#[derive(Debug)]
pub struct TableReport {
    tally: FileDeviation,
    time_type: Option<DataType>,
}

impl TableReport {
    /// An empty report for a table called `name` in it.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] without a band level in `opts`, for a model without a
    /// band, or a level outside (0, 1).
    pub fn new(model: &Model, opts: &ScoreOptions, name: &str) -> Result<TableReport> {
        opts.validate()?;
        if opts.band.is_none() {
            return Err(Error::invalid(
                "band",
                "a deviation report needs a band level, such as 0.95",
            ));
        }
        check_band_options(model, opts)?;
        Ok(TableReport {
            tally: FileDeviation::new(name),
            time_type: None,
        })
    }

    /// Scores the next slice of the table (rows from `first_row`, zero-based, in
    /// messages and as the time order without a time column) and tallies it. Runs on the
    /// current rayon pool.
    ///
    /// # Errors
    /// Those of [`super::score_batch`].
    pub fn score(
        &mut self,
        model: &Model,
        batch: &RecordBatch,
        opts: &ScoreOptions,
        first_row: u64,
    ) -> Result<RecordBatch> {
        let path = Path::new("<record batch>");
        let plan = Plan::new(model, batch.schema().as_ref(), &[], opts, path, false)?;
        if self.time_type.is_none() {
            self.time_type = plan.band().and_then(|b| b.time_type().cloned());
        }
        Ok(score_planned(
            model,
            &plan,
            batch,
            opts,
            path,
            first_row,
            Some(&mut self.tally),
        )?
        .batch)
    }

    /// The report over every slice scored.
    pub fn finish(self, opts: &ScoreOptions) -> DeviationReport {
        let level = opts.band.unwrap_or(crate::settings::defaults::BAND_LEVEL);
        let mut r = DeviationReport::build(
            level,
            opts.group_column.clone(),
            opts.time_column.clone(),
            vec![self.tally],
        );
        let ty = self
            .time_type
            .as_ref()
            .filter(|_| opts.time_column.is_some());
        r.format_times(&|t| format_time(t, ty));
        r
    }
}
