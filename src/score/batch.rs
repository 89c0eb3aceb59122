//! Scoring one Arrow record batch into another: the contract check on a schema (a
//! [`Plan`]) and the per-batch work (cast inputs to `f64`, find rows with missing
//! inputs, predict, coverage, assemble the output columns).

use std::path::Path;
use std::sync::Arc;

use arrow_array::{Array, ArrayRef, BooleanArray, Float64Array, RecordBatch};
use arrow_schema::{DataType, Field, Schema, SchemaRef};
use ndarray::{Array1, Array2};

use super::banded::{band_columns, BandPlan};
use super::bandpredict::predict_band;
use super::covered::predict_covered;
use super::{MissingRows, ScoreOptions, COVERAGE_COLUMN, COVERED_COLUMN};
use crate::data::csv;
use crate::error::{Error, Result};
use crate::model::Model;

/// Where one model input comes from in a batch.
#[derive(Clone, Debug, PartialEq)]
enum Input {
    /// A column of the batch, by index.
    Column(usize),
    /// A constant from a `key=value` partition folder.
    Constant(f64),
}

/// The contract check of one input schema, and the output schema it leads to.
#[derive(Clone, Debug)]
pub(crate) struct Plan {
    /// One entry per model input, in the model's order.
    inputs: Vec<Input>,
    /// Input columns copied to the output, in output order.
    copied: Vec<usize>,
    /// Whether coverage columns are written.
    coverage: bool,
    /// Whether input columns hold text to parse as numbers (CSV sources).
    text: bool,
    /// The band's part, with a band level.
    band: Option<BandPlan>,
    /// The output schema.
    schema: SchemaRef,
}

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

/// Whether an Arrow type is accepted as a model input (read as `f64`).
fn is_numeric(dt: &DataType) -> bool {
    dt.is_numeric() || matches!(dt, DataType::Boolean)
}

fn column_error(path: &Path, column: &str, message: impl Into<String>) -> Error {
    Error::Column {
        path: path.to_path_buf(),
        column: column.to_string(),
        message: message.into(),
    }
}

impl Plan {
    /// Checks `schema` against the model's input contract and the options, and builds
    /// the output schema. `partitions` supplies inputs missing from the schema (from
    /// `key=value` folders); `path` names the source in messages.
    ///
    /// With `text` (CSV sources, every column `Utf8`), inputs are parsed cell by cell
    /// when scored instead of being checked for a numeric type here.
    ///
    /// Errors: a model input absent from the schema (and not a numeric partition value)
    /// or not numeric; a `keep` column absent; an output name that collides with a
    /// copied column; coverage asked of a model without coverage landmarks.
    pub(crate) fn new(
        model: &Model,
        schema: &Schema,
        partitions: &[(String, String)],
        opts: &ScoreOptions,
        path: &Path,
        text: bool,
    ) -> Result<Plan> {
        let mut inputs = Vec::with_capacity(model.columns.features.len());
        for name in &model.columns.features {
            match schema.index_of(name) {
                Ok(i) => {
                    let dt = schema.field(i).data_type();
                    if !text && !is_numeric(dt) {
                        return Err(column_error(
                            path,
                            name,
                            format!("has type {dt}, but the model needs a numeric input here"),
                        ));
                    }
                    inputs.push(Input::Column(i));
                }
                Err(_) => {
                    let part = partitions.iter().rev().find(|(k, _)| k == name);
                    match part.map(|(_, v)| v.parse::<f64>()) {
                        Some(Ok(v)) => inputs.push(Input::Constant(v)),
                        Some(Err(_)) => {
                            return Err(column_error(
                                path,
                                name,
                                "comes from a partition folder whose value is not a number",
                            ))
                        }
                        None => {
                            return Err(column_error(
                                path,
                                name,
                                "no such column, but the model needs it as an input",
                            ))
                        }
                    }
                }
            }
        }
        let is_input = |i: usize| inputs.contains(&Input::Column(i));
        let mut copied: Vec<usize> = match &opts.keep {
            Some(list) => {
                let mut v = Vec::with_capacity(list.len());
                for name in list {
                    let i = schema.index_of(name).map_err(|_| {
                        column_error(path, name, "no such column to keep in the output")
                    })?;
                    if !v.contains(&i) {
                        v.push(i);
                    }
                }
                v
            }
            None => (0..schema.fields().len())
                .filter(|&i| !is_input(i))
                .collect(),
        };
        if opts.with_inputs {
            for inp in &inputs {
                if let Input::Column(i) = *inp {
                    if !copied.contains(&i) {
                        copied.push(i);
                    }
                }
            }
        }
        let coverage = opts.coverage;
        if coverage && model.coverage.is_none() {
            return Err(Error::invalid(
                "coverage",
                "the model stores no coverage landmarks, so score with coverage switched off",
            ));
        }
        let mut fields: Vec<Field> = copied.iter().map(|&i| schema.field(i).clone()).collect();
        let mut added = vec![opts.prediction_name.clone()];
        if coverage {
            added.push(COVERAGE_COLUMN.to_string());
            added.push(COVERED_COLUMN.to_string());
        }
        for name in &added {
            if fields.iter().any(|f| f.name() == name) {
                return Err(column_error(
                    path,
                    name,
                    "is already a column of the input; choose another prediction name or a --keep list without it",
                ));
            }
        }
        fields.push(Field::new(&opts.prediction_name, DataType::Float64, true));
        if coverage {
            fields.push(Field::new(COVERAGE_COLUMN, DataType::Float64, true));
            fields.push(Field::new(COVERED_COLUMN, DataType::Boolean, true));
        }
        let band = BandPlan::new(model, schema, partitions, opts, path, &mut fields)?;
        Ok(Plan {
            band,
            inputs,
            copied,
            coverage,
            text,
            schema: Arc::new(Schema::new(fields)),
        })
    }

    /// The band's part, with a band level.
    pub(crate) fn band(&self) -> Option<&BandPlan> {
        self.band.as_ref()
    }

    /// The output schema.
    pub(crate) fn schema(&self) -> &SchemaRef {
        &self.schema
    }

    /// Sorted indices of the input columns this plan reads (for a column projection).
    pub(crate) fn needed(&self) -> Vec<usize> {
        let mut v: Vec<usize> = self.copied.clone();
        if let Some(b) = &self.band {
            v.extend(b.needed());
        }
        for inp in &self.inputs {
            if let Input::Column(i) = *inp {
                v.push(i);
            }
        }
        v.sort_unstable();
        v.dedup();
        v
    }

    /// The same plan for batches holding only the columns `needed` (sorted, from
    /// [`Plan::needed`]), in that order.
    pub(crate) fn projected(&self, needed: &[usize]) -> Plan {
        let pos = |i: usize| {
            needed
                .binary_search(&i)
                .expect("column is in the projection")
        };
        Plan {
            inputs: self
                .inputs
                .iter()
                .map(|inp| match *inp {
                    Input::Column(i) => Input::Column(pos(i)),
                    Input::Constant(v) => Input::Constant(v),
                })
                .collect(),
            copied: self.copied.iter().map(|&i| pos(i)).collect(),
            coverage: self.coverage,
            text: self.text,
            band: self.band.as_ref().map(|b| b.projected(&pos)),
            schema: self.schema.clone(),
        }
    }
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
