//! What a column holds as far as kernlake is concerned, shared by the CSV inference
//! ([`super::csv`]) and the column choice ([`super::columns`]) so that both depend on
//! this module and not on each other.

use arrow_schema::DataType;

/// What a column of a file holds.
#[derive(Clone, Debug, PartialEq)]
pub(crate) enum Kind {
    /// Integers, floats, decimals or booleans (a CSV column counts as numeric when most
    /// of its non-empty cells are numbers; the others are then missing values).
    Numeric,
    /// No value seen (an all-null column, or empty CSV cells in the inferred records).
    Unknown,
    /// Anything else, with a description for messages (a type, or a sample cell).
    Other(String),
}

/// Whether an Arrow type is read as `f64`.
pub(crate) fn is_numeric(dt: &DataType) -> bool {
    match dt {
        DataType::Dictionary(_, values) => is_numeric(values),
        dt => dt.is_numeric() || matches!(dt, DataType::Boolean),
    }
}

/// The kind of a Parquet column of type `dt`.
pub(crate) fn kind_of(dt: &DataType) -> Kind {
    match dt {
        DataType::Null => Kind::Unknown,
        dt if is_numeric(dt) => Kind::Numeric,
        dt => Kind::Other(format!("type {dt}")),
    }
}
