//! What the trainer must know about the data before the first pass — column contract,
//! scaler, target scale, a uniform sample — from in-memory arrays or from a survey pass,
//! and the files as a block source.

use ndarray::{Array1, Array2, ArrayView1, ArrayView2, Axis};

use crate::data::{splitmix64, Block, ResolvedColumns, Survey, TableReader};
use crate::error::{Error, Result};
use crate::report::ColumnSkips;
use crate::scale::Standardizer;
use crate::solver::source::{BlockSource, Flow, TargetScale};

/// What the trainer needs to know about the data before the first epoch.
pub(super) struct Facts {
    pub columns: ResolvedColumns,
    pub scaler: Standardizer,
    pub target: TargetScale,
    /// Standardized sample rows in the order of their sample keys: every prefix is a
    /// uniform sample of all the rows.
    pub sample_x: Array2<f64>,
    pub sample_y: Array1<f64>,
    /// Global row id of each sample row (to tell training rows from holdout rows).
    pub sample_row_ids: Vec<u64>,
    pub rows_total: u64,
    pub rows_skipped: u64,
    pub skipped_by_column: Vec<ColumnSkips>,
    pub constant_columns: Vec<String>,
}

/// Facts of in-memory rows `x` (raw units) and targets `y`; checks every value first.
pub(super) fn facts_from_arrays(
    x: ArrayView2<f64>,
    y: ArrayView1<f64>,
    sample_rows: usize,
    seed: u64,
) -> Result<Facts> {
    if x.nrows() == 0 {
        return Err(Error::NoRows("the input has zero rows".into()));
    }
    for (row, xi) in x.rows().into_iter().enumerate() {
        if let Some(column) = xi.iter().position(|v| !v.is_finite()) {
            return Err(Error::NonFinite { row, column });
        }
    }
    if let Some(row) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::NonFiniteTarget { row });
    }
    let n = x.nrows() as u64;
    let scaler = Standardizer::fit(x);
    let mean = y.mean().unwrap_or(0.0);
    let variance = y.mapv(|v| (v - mean).powi(2)).mean().unwrap_or(0.0);
    let idx = sample_index(n, sample_rows, seed);
    let mut sample_x = x.select(Axis(0), &idx);
    scaler.apply(sample_x.view_mut());
    Ok(Facts {
        columns: ResolvedColumns {
            features: (0..x.ncols()).map(|j| format!("x{}", j + 1)).collect(),
            target: Some("y".into()),
        },
        scaler,
        target: TargetScale::from_moments("y", mean, variance)?,
        sample_x,
        sample_y: y.select(Axis(0), &idx),
        sample_row_ids: idx.iter().map(|&r| r as u64).collect(),
        rows_total: n,
        rows_skipped: 0,
        skipped_by_column: Vec::new(),
        constant_columns: Vec::new(),
    })
}

/// The rows of a seeded uniform sample of `k` of `n` rows: the `k` smallest keys of
/// [`splitmix64`], the same rule as the survey pass's bottom-k sample, in key order (so
/// every prefix is itself a uniform sample).
fn sample_index(n: u64, k: usize, seed: u64) -> Vec<usize> {
    let mut keyed: Vec<(u64, usize)> = (0..n).map(|r| (splitmix64(seed, r), r as usize)).collect();
    if keyed.len() > k {
        keyed.select_nth_unstable(k);
        keyed.truncate(k);
    }
    keyed.sort_unstable();
    keyed.into_iter().map(|(_, r)| r).collect()
}

/// Turns a survey into training facts, dropping constant input columns (and returning a
/// reader over the remaining columns).
pub(super) fn facts_from_survey(s: Survey, reader: &TableReader) -> Result<(Facts, TableReader)> {
    let facts = facts_of_survey(s)?;
    let reader = TableReader::new(reader.files().to_vec(), facts.columns.clone())
        .with_batch_rows(reader.batch_rows())
        .with_missing(reader.missing())
        .with_csv(reader.csv().clone());
    Ok((facts, reader))
}

/// Turns a survey into training facts, dropping constant input columns.
pub(super) fn facts_of_survey(s: Survey) -> Result<Facts> {
    let target = s.target.as_ref().ok_or(Error::NoTarget)?;
    if s.rows_used == 0 {
        return Err(Error::NoRows(format!(
            "all {} rows were skipped for missing values",
            s.rows_total
        )));
    }
    let keep: Vec<usize> = (0..s.features.len())
        .filter(|&j| !s.constant_features.contains(&s.features[j].name))
        .collect();
    if keep.is_empty() {
        return Err(Error::NoRows(format!(
            "every input column is constant ({})",
            s.constant_features.join(", ")
        )));
    }
    let columns = ResolvedColumns {
        features: keep.iter().map(|&j| s.features[j].name.clone()).collect(),
        target: s.columns.target.clone(),
    };
    let full = Standardizer::from_survey(&s);
    let scaler = Standardizer {
        mean: keep.iter().map(|&j| full.mean[j]).collect(),
        scale: keep.iter().map(|&j| full.scale[j]).collect(),
    };
    let mut sample_x = s.sample_x.select(Axis(1), &keep);
    scaler.apply(sample_x.view_mut());
    let sample_y = s.sample_y.clone().unwrap_or_else(|| Array1::zeros(0));
    let mut skipped_by_column: Vec<ColumnSkips> = s
        .features
        .iter()
        .map(|c| ColumnSkips {
            column: c.name.clone(),
            rows: c.missing,
        })
        .collect();
    skipped_by_column.push(ColumnSkips {
        column: target.name.clone(),
        rows: target.missing,
    });
    skipped_by_column.retain(|c| c.rows > 0);
    Ok(Facts {
        columns,
        scaler,
        target: TargetScale::from_moments(&target.name, target.mean, target.variance)?,
        sample_x,
        sample_y,
        sample_row_ids: s.sample_row_ids.clone(),
        rows_total: s.rows_total,
        rows_skipped: s.rows_skipped,
        skipped_by_column,
        constant_columns: s.constant_features.clone(),
    })
}

/// A [`TableReader`] as a block source: one unit per file.
pub(super) struct FileSource<'a> {
    pub reader: &'a TableReader,
}

impl BlockSource for FileSource<'_> {
    fn units(&self) -> usize {
        self.reader.files().len()
    }

    fn read_unit(&self, unit: usize, sink: &mut dyn FnMut(Block) -> Result<Flow>) -> Result<()> {
        for b in self.reader.file_blocks(unit)? {
            if sink(b?)?.is_break() {
                break;
            }
        }
        Ok(())
    }
}
