//! Band columns in scoring (see [`crate::band`]): which input columns hold the measured
//! target, the time and the group, the prediction with its spread σ in one pass over
//! mapped rows, and the rows a deviation report tallies.

use std::path::Path;
use std::sync::Arc;

use arrow_array::{
    Array, ArrayRef, BooleanArray, Float64Array, Int64Array, RecordBatch, StringArray,
};
use arrow_schema::{DataType, Field, Schema};

use super::ScoreOptions;
use crate::band::{check_level, Band, BandRow, FileDeviation};
use crate::error::{Error, Result};
use crate::model::Model;

/// Name of the band's low end column (Float64).
pub const BAND_LOW_COLUMN: &str = "band_low";
/// Name of the band's high end column (Float64).
pub const BAND_HIGH_COLUMN: &str = "band_high";
/// Name of the residual column, measured − prediction (Float64; only when the scored
/// data holds the model's target column).
pub const RESIDUAL_COLUMN: &str = "residual";
/// Name of the flag column: the measured value lies outside the band (Boolean; only
/// when the scored data holds the target).
pub const OUTSIDE_COLUMN: &str = "outside_band";

/// Where a value of each row comes from.
#[derive(Clone, Debug, PartialEq)]
enum Source {
    Column(usize),
    /// A `key=value` partition folder's value.
    Constant(String),
}

/// The band part of a scoring plan.
#[derive(Clone, Debug)]
pub(crate) struct BandPlan {
    /// Score quantile at the asked level.
    q: f64,
    /// The measured target, if the input holds it.
    target: Option<usize>,
    /// The time column, and its type (for showing times).
    time: Option<(usize, DataType)>,
    /// The group column.
    group: Option<Source>,
}

/// Checks the band settings against the model before any data is read: the model
/// must store a band, the level must be in (0, 1) and within what its holdout supports,
/// and `--time`/`--by` need the band.
///
/// # Errors
/// [`Error::InvalidParameter`] with one sentence.
pub fn check_band_options(model: &Model, opts: &ScoreOptions) -> Result<()> {
    match (opts.band, &model.band) {
        (Some(level), Some(b)) => {
            b.quantile(level)?;
        }
        (Some(level), None) => {
            check_level(level)?;
            return Err(no_band());
        }
        (None, _) => {
            if opts.time_column.is_some() || opts.group_column.is_some() {
                return Err(Error::invalid(
                    "band",
                    "a time or group column only orders and groups the band's deviation report, so give a band level too",
                ));
            }
        }
    }
    Ok(())
}

/// The error for a band asked of a model that stores none.
pub(crate) fn no_band() -> Error {
    Error::invalid(
        "band",
        "the model stores no band (it was fitted without holdout rows, or before bands existed), so score without a band or refit with a holdout",
    )
}

fn column_error(path: &Path, column: &str, message: &str) -> Error {
    Error::Column {
        path: path.to_path_buf(),
        column: column.to_string(),
        message: message.to_string(),
    }
}

impl BandPlan {
    /// The band plan for `schema`, or `None` without a band level. Appends the output
    /// fields to `fields`.
    pub(crate) fn new(
        model: &Model,
        schema: &Schema,
        partitions: &[(String, String)],
        opts: &ScoreOptions,
        path: &Path,
        fields: &mut Vec<Field>,
    ) -> Result<Option<BandPlan>> {
        let Some(level) = opts.band else {
            return Ok(None);
        };
        check_band_options(model, opts)?;
        let band = model.band.as_ref().expect("checked above");
        let q = band.quantile(level)?;
        let target = model
            .columns
            .target
            .as_ref()
            .and_then(|t| schema.index_of(t).ok());
        let time = match &opts.time_column {
            Some(name) => {
                let i = schema.index_of(name).map_err(|_| {
                    column_error(
                        path,
                        name,
                        "no such column to order the band's report by time",
                    )
                })?;
                Some((i, schema.field(i).data_type().clone()))
            }
            None => None,
        };
        let group = match &opts.group_column {
            Some(name) => match schema.index_of(name) {
                Ok(i) => Some(Source::Column(i)),
                Err(_) => match partitions.iter().rev().find(|(k, _)| k == name) {
                    Some((_, v)) => Some(Source::Constant(v.clone())),
                    None => {
                        return Err(column_error(
                            path,
                            name,
                            "no such column or partition folder to group the band's report by",
                        ))
                    }
                },
            },
            None => None,
        };
        let mut added = vec![BAND_LOW_COLUMN, BAND_HIGH_COLUMN];
        if target.is_some() {
            added.extend([RESIDUAL_COLUMN, OUTSIDE_COLUMN]);
        }
        for name in &added {
            if fields.iter().any(|f| f.name() == name) {
                return Err(column_error(
                    path,
                    name,
                    "is already a column of the output; keep a list without it",
                ));
            }
        }
        fields.push(Field::new(BAND_LOW_COLUMN, DataType::Float64, true));
        fields.push(Field::new(BAND_HIGH_COLUMN, DataType::Float64, true));
        if target.is_some() {
            fields.push(Field::new(RESIDUAL_COLUMN, DataType::Float64, true));
            fields.push(Field::new(OUTSIDE_COLUMN, DataType::Boolean, true));
        }
        Ok(Some(BandPlan {
            q,
            target,
            time,
            group,
        }))
    }

    /// Input columns the band reads.
    pub(crate) fn needed(&self) -> Vec<usize> {
        let mut v: Vec<usize> = self.target.into_iter().collect();
        v.extend(self.time.as_ref().map(|(i, _)| *i));
        if let Some(Source::Column(i)) = self.group {
            v.push(i);
        }
        v
    }

    /// The plan with column indices mapped by `pos`.
    pub(crate) fn projected(&self, pos: &dyn Fn(usize) -> usize) -> BandPlan {
        BandPlan {
            q: self.q,
            target: self.target.map(pos),
            time: self.time.as_ref().map(|(i, t)| (pos(*i), t.clone())),
            group: match &self.group {
                Some(Source::Column(i)) => Some(Source::Column(pos(*i))),
                other => other.clone(),
            },
        }
    }

    /// The time column's type, if any (to show run times).
    pub(crate) fn time_type(&self) -> Option<&DataType> {
        self.time.as_ref().map(|(_, t)| t)
    }
}

/// The band's output columns of one batch, and its rows with a measured value for the
/// report. `pred` and `sigma` hold the usable rows (`ok`) in order; with `skip` the
/// output holds only those rows, else every row (nulls where inputs are missing).
/// `first_row` is the batch's first row within its file (the time key without a time
/// column). `covered` (per usable row, with coverage) keeps rows outside the training
/// data's coverage out of the report's judgement.
#[allow(clippy::too_many_arguments)]
pub(crate) fn band_columns(
    plan: &BandPlan,
    batch: &RecordBatch,
    ok: &[bool],
    pred: &[f64],
    sigma: &[f64],
    covered: Option<&[bool]>,
    skip: bool,
    first_row: u64,
    path: &Path,
    mut tally: Option<&mut FileDeviation>,
) -> Result<Vec<ArrayRef>> {
    let cast = |i: usize, to: &DataType, what: &str| -> Result<ArrayRef> {
        arrow_cast::cast(batch.column(i), to).map_err(|e| Error::File {
            path: path.to_path_buf(),
            message: format!("its {what} column could not be read ({e})"),
        })
    };
    let measured = match plan.target {
        Some(i) => Some(cast(i, &DataType::Float64, "target")?),
        None => None,
    };
    let measured = measured.as_ref().map(|a| {
        a.as_any()
            .downcast_ref::<Float64Array>()
            .expect("cast to f64")
            .clone()
    });
    let times = match &plan.time {
        Some((i, _)) => Some(cast(*i, &DataType::Int64, "time")?),
        None => None,
    };
    let times = times.as_ref().map(|a| {
        a.as_any()
            .downcast_ref::<Int64Array>()
            .expect("cast to i64")
            .clone()
    });
    let groups = match &plan.group {
        Some(Source::Column(i)) => Some(cast(*i, &DataType::Utf8, "group")?),
        _ => None,
    };
    let groups = groups.as_ref().map(|a| {
        a.as_any()
            .downcast_ref::<StringArray>()
            .expect("cast to text")
            .clone()
    });
    let constant_group = match &plan.group {
        Some(Source::Constant(v)) => v.as_str(),
        _ => "",
    };
    let rows_out = if skip { pred.len() } else { ok.len() };
    let mut low = Vec::with_capacity(rows_out);
    let mut high = Vec::with_capacity(rows_out);
    let mut resid = Vec::with_capacity(rows_out);
    let mut out = Vec::with_capacity(rows_out);
    let mut k = 0;
    for (r, &usable) in ok.iter().enumerate() {
        if !usable {
            if !skip {
                low.push(None);
                high.push(None);
                resid.push(None);
                out.push(None);
            }
            continue;
        }
        let (f, s) = (pred[k], sigma[k]);
        k += 1;
        let (lo, hi) = Band::interval(f, s, plan.q);
        low.push(Some(lo));
        high.push(Some(hi));
        let y = measured
            .as_ref()
            .and_then(|m| (!m.is_null(r) && m.value(r).is_finite()).then(|| m.value(r)));
        match y {
            Some(y) => {
                let row = BandRow {
                    time: match &times {
                        Some(t) if !t.is_null(r) => t.value(r),
                        Some(_) => i64::MIN,
                        None => (first_row + r as u64) as i64,
                    },
                    measured: y,
                    expected: f,
                    low: lo,
                    high: hi,
                };
                resid.push(Some(y - f));
                out.push(Some(row.outside()));
                if let Some(t) = tally.as_deref_mut() {
                    let g = match &groups {
                        Some(g) if !g.is_null(r) => g.value(r),
                        Some(_) => "(null)",
                        None => constant_group,
                    };
                    if covered.is_none_or(|c| c[k - 1]) {
                        t.add(g, row);
                    } else {
                        t.add_uncovered(g);
                    }
                }
            }
            None => {
                resid.push(None);
                out.push(None);
            }
        }
    }
    let mut cols: Vec<ArrayRef> = vec![
        Arc::new(Float64Array::from(low)),
        Arc::new(Float64Array::from(high)),
    ];
    if plan.target.is_some() {
        cols.push(Arc::new(Float64Array::from(resid)));
        cols.push(Arc::new(BooleanArray::from(out)));
    }
    Ok(cols)
}

/// Shows a time key as the time column's type does: timestamps and dates as UTC date
/// and time text, other types as the number ("row N" without a time column).
pub fn format_time(t: i64, ty: Option<&DataType>) -> String {
    use arrow_array::temporal_conversions::as_datetime;
    use arrow_array::types::{
        Date32Type, Date64Type, TimestampMicrosecondType, TimestampMillisecondType,
        TimestampNanosecondType, TimestampSecondType,
    };
    use arrow_schema::TimeUnit;
    let Some(ty) = ty else {
        return format!("row {}", t + 1);
    };
    let shown = match ty {
        DataType::Timestamp(TimeUnit::Second, _) => as_datetime::<TimestampSecondType>(t),
        DataType::Timestamp(TimeUnit::Millisecond, _) => as_datetime::<TimestampMillisecondType>(t),
        DataType::Timestamp(TimeUnit::Microsecond, _) => as_datetime::<TimestampMicrosecondType>(t),
        DataType::Timestamp(TimeUnit::Nanosecond, _) => as_datetime::<TimestampNanosecondType>(t),
        DataType::Date32 => as_datetime::<Date32Type>(t),
        DataType::Date64 => as_datetime::<Date64Type>(t),
        _ => None,
    };
    match shown {
        Some(d) => d.format("%Y-%m-%d %H:%M").to_string(),
        None => t.to_string(),
    }
}
