//! The contract check of one input schema (a [`Plan`]): where each model input comes
//! from (a column, cast to `f64`, or a `key=value` partition constant), which columns are
//! copied, the band's part, and the output schema it leads to.

use std::path::Path;
use std::sync::Arc;

use arrow_schema::{DataType, Field, Schema, SchemaRef};

use super::banded::BandPlan;
use super::{ScoreOptions, COVERAGE_COLUMN, COVERED_COLUMN};
use crate::error::{Error, Result};
use crate::model::Model;

/// Where one model input comes from in a batch.
#[derive(Clone, Debug, PartialEq)]
pub(super) enum Input {
    /// A column of the batch, by index.
    Column(usize),
    /// A constant from a `key=value` partition folder.
    Constant(f64),
}

/// The contract check of one input schema, and the output schema it leads to.
#[derive(Clone, Debug)]
pub(crate) struct Plan {
    /// One entry per model input, in the model's order.
    pub(super) inputs: Vec<Input>,
    /// Input columns copied to the output, in output order.
    pub(super) copied: Vec<usize>,
    /// Whether coverage columns are written.
    pub(super) coverage: bool,
    /// Whether input columns hold text to parse as numbers (CSV sources).
    pub(super) text: bool,
    /// The band's part, with a band level.
    pub(super) band: Option<BandPlan>,
    /// The output schema.
    pub(super) schema: SchemaRef,
}

/// Whether an Arrow type is accepted as a model input (read as `f64`).
fn is_numeric(dt: &DataType) -> bool {
    dt.is_numeric() || matches!(dt, DataType::Boolean)
}

pub(super) fn column_error(path: &Path, column: &str, message: impl Into<String>) -> Error {
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
