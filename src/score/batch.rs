//! Scoring one Arrow record batch into another under a [`Plan`] (the schema's contract
//! check, in `plan.rs`): cast inputs to `f64`, find rows with missing inputs, predict,
//! coverage and band, assemble the output columns.

use std::path::Path;
use std::sync::Arc;

use arrow_array::{Array, ArrayRef, BooleanArray, Float64Array, RecordBatch};
use arrow_schema::DataType;
use ndarray::{Array1, Array2};

use super::banded::band_columns;
use super::bandpredict::predict_band;
use super::covered::predict_covered;
use super::plan::{column_error, Input, Plan};
use super::{MissingRows, ScoreOptions};
use crate::data::csv;
use crate::error::{Error, Result};
use crate::model::Model;

/// Figures of one scored batch.
#[derive(Clone, Debug)]
pub(crate) struct Scored {
    /// The output batch.
    pub batch: RecordBatch,
    /// Rows with a missing model input (null, NaN or ±inf).
    pub missing: u64,
    /// Rows scored and flagged as outside the training data's coverage.
    pub uncovered: u64,
}

/// Scores one batch following `plan` (built for this batch's schema). `first_row` is the
/// zero-based row within the source of the batch's first row (for messages); `path`
/// names the source. Runs its parallel parts on the current rayon pool.
///
/// Errors: a missing input under [`MissingRows::Fail`] (naming source, 1-based row and
/// column); an input column that cannot be converted to `f64`.
pub(crate) fn score_planned(
    model: &Model,
    plan: &Plan,
    batch: &RecordBatch,
    opts: &ScoreOptions,
    path: &Path,
    first_row: u64,
    tally: Option<&mut crate::band::FileDeviation>,
) -> Result<Scored> {
    let n = batch.num_rows();
    let names = &model.columns.features;
    // Inputs as f64 columns (None for constants).
    let mut cols: Vec<Option<Float64Array>> = Vec::with_capacity(plan.inputs.len());
    for (j, inp) in plan.inputs.iter().enumerate() {
        match *inp {
            Input::Column(i) if plan.text => {
                let a = batch.column(i);
                cols.push(Some(csv::to_f64(
                    a.as_ref(),
                    path,
                    &names[j],
                    first_row + 1,
                    opts.missing == MissingRows::Fail,
                )?));
            }
            Input::Column(i) => {
                let cast = arrow_cast::cast(batch.column(i), &DataType::Float64).map_err(|e| {
                    column_error(
                        path,
                        &names[j],
                        format!("could not be read as numbers ({e})"),
                    )
                })?;
                let f = cast
                    .as_any()
                    .downcast_ref::<Float64Array>()
                    .expect("cast to Float64 gives a Float64Array")
                    .clone();
                cols.push(Some(f));
            }
            Input::Constant(_) => cols.push(None),
        }
    }
    // Rows with every input present and finite.
    let mut ok = vec![true; n];
    for (j, c) in cols.iter().enumerate() {
        let bad_const = matches!(plan.inputs[j], Input::Constant(v) if !v.is_finite());
        for (r, flag) in ok.iter_mut().enumerate() {
            let bad = match c {
                Some(a) => a.is_null(r) || !a.value(r).is_finite(),
                None => bad_const,
            };
            if bad {
                *flag = false;
            }
        }
    }
    let missing = ok.iter().filter(|&&o| !o).count();
    if missing > 0 && opts.missing == MissingRows::Fail {
        let r = ok.iter().position(|&o| !o).expect("a row is missing");
        let j = (0..cols.len())
            .find(|&j| match &cols[j] {
                Some(a) => a.is_null(r) || !a.value(r).is_finite(),
                None => true,
            })
            .expect("a column is missing");
        return Err(Error::Cell {
            path: path.to_path_buf(),
            row: first_row + r as u64 + 1,
            column: names[j].clone(),
            message: "is missing (null, NaN or infinite) and the missing-row policy is fail".into(),
        });
    }
    // Compact the usable rows into x (rows × inputs, contract order).
    let m = n - missing;
    let kept: Vec<usize> = (0..n).filter(|&r| ok[r]).collect();
    let mut x = Array2::<f64>::zeros((m, plan.inputs.len()));
    for (j, c) in cols.iter().enumerate() {
        let mut col = x.column_mut(j);
        match (c, &plan.inputs[j]) {
            (Some(a), _) => {
                let vals = a.values();
                for (dst, &r) in col.iter_mut().zip(&kept) {
                    *dst = vals[r];
                }
            }
            (None, Input::Constant(v)) => col.fill(*v),
            (None, Input::Column(_)) => unreachable!("columns are cast above"),
        }
    }
    let mut pred = Array1::<f64>::zeros(m);
    let mut sigma = Array1::<f64>::zeros(if plan.band.is_some() { m } else { 0 });
    let cov = if let (Some(_), Some(b)) = (&plan.band, &model.band) {
        let mut v = Array1::<f64>::zeros(if plan.coverage { m } else { 0 });
        let c = plan.coverage.then(|| v.view_mut());
        predict_band(model, b, x.view(), pred.view_mut(), sigma.view_mut(), c);
        model
            .coverage
            .as_ref()
            .filter(|_| plan.coverage)
            .map(|c| (v, c.threshold))
    } else if plan.coverage {
        let c = model.coverage.as_ref().expect("plan checked coverage");
        let mut v = Array1::<f64>::zeros(m);
        predict_covered(model, x.view(), pred.view_mut(), v.view_mut());
        Some((v, c.threshold))
    } else {
        model.predict_into(x.view(), pred.view_mut());
        None
    };
    let uncovered = cov
        .as_ref()
        .map(|(v, t)| v.iter().filter(|&&c| c < *t).count() as u64)
        .unwrap_or(0);

    // Assemble the output.
    let skip = opts.missing == MissingRows::Skip && missing > 0;
    let mask = skip.then(|| BooleanArray::from(ok.clone()));
    let mut out: Vec<ArrayRef> = Vec::with_capacity(plan.schema.fields().len());
    for &i in &plan.copied {
        let col = batch.column(i);
        out.push(match &mask {
            Some(mk) => arrow_select::filter::filter(col, mk).map_err(|e| Error::File {
                path: path.to_path_buf(),
                message: format!("could not filter the rows to keep ({e})"),
            })?,
            None => col.clone(),
        });
    }
    // Scatter a per-usable-row vector onto all rows (nulls where inputs are missing).
    let spread = |v: &Array1<f64>| -> Float64Array {
        if missing == 0 || skip {
            Float64Array::from(v.to_vec())
        } else {
            let mut it = v.iter();
            ok.iter()
                .map(|&o| if o { it.next().copied() } else { None })
                .collect()
        }
    };
    out.push(Arc::new(spread(&pred)));
    if let Some((v, t)) = &cov {
        out.push(Arc::new(spread(v)));
        let flags = spread(v);
        let covered: BooleanArray = flags.iter().map(|c| c.map(|c| c >= *t)).collect();
        out.push(Arc::new(covered));
    }
    if let Some(bp) = &plan.band {
        let covered: Option<Vec<bool>> = cov
            .as_ref()
            .map(|(v, t)| v.iter().map(|&c| c >= *t).collect());
        out.extend(band_columns(
            bp,
            batch,
            &ok,
            pred.as_slice().expect("contiguous"),
            sigma.as_slice().expect("contiguous"),
            covered.as_deref(),
            skip,
            first_row,
            path,
            tally,
        )?);
    }
    let batch = RecordBatch::try_new(plan.schema.clone(), out).map_err(|e| Error::File {
        path: path.to_path_buf(),
        message: format!("could not assemble the scored rows ({e})"),
    })?;
    Ok(Scored {
        batch,
        missing: missing as u64,
        uncovered,
    })
}

/// Scores one Arrow record batch: checks its schema against the model's input contract,
/// then returns the kept columns, the prediction and (if asked) the coverage columns, as
/// [`score_files`](super::score_files) writes them. Predictions equal
/// [`Model::predict`] on the same rows bit for bit. Runs on the current rayon pool.
///
/// # Errors
/// [`Error::Column`] when the schema breaks the contract (naming the column);
/// [`Error::Cell`] for a missing input under [`MissingRows::Fail`]; an invalid option.
pub fn score_batch(model: &Model, batch: &RecordBatch, opts: &ScoreOptions) -> Result<RecordBatch> {
    score_batch_at(model, batch, opts, 0)
}

/// [`score_batch`] for a batch that is one slice of a longer table: rows are numbered
/// from `first_row` (zero-based) in messages, so a missing input under
/// [`MissingRows::Fail`] names its row in the whole table.
///
/// # Errors
/// Those of [`score_batch`].
pub fn score_batch_at(
    model: &Model,
    batch: &RecordBatch,
    opts: &ScoreOptions,
    first_row: u64,
) -> Result<RecordBatch> {
    opts.validate()?;
    let path = Path::new("<record batch>");
    let plan = Plan::new(model, batch.schema().as_ref(), &[], opts, path, false)?;
    Ok(score_planned(model, &plan, batch, opts, path, first_row, None)?.batch)
}
