//! Data sources: finding the files of a data lake, choosing columns, streaming blocks of
//! rows, and the survey pass that measures the data and draws a seeded sample.
//!
//! ```text
//! discover(inputs) → Vec<SourceFile>          files, folders, globs; key=value partitions
//! resolve_columns(files, selection, csv)     → ResolvedColumns (the input contract)
//! choose_columns(files, selection, csv)      → the same, and the columns left out, with why
//! TableReader::new(files, columns).blocks()  → Block, Block, …   (rows × features as f64)
//! survey(&reader, settings, progress)        → Survey (moments, missing counts, sample)
//! ```

mod block;
mod columns;
pub(crate) mod csv;
mod kind;
mod open;
mod reader;
mod sample;
mod sources;
mod survey;
mod survey_part;

pub use block::{block_of_batch, Block, MissingPolicy};
pub use columns::{
    choose_columns, resolve_columns, ColumnChoice, ColumnSelection, LeftOut, ResolvedColumns,
};
pub use reader::{Blocks, TableReader};
pub use sample::{sample_key, splitmix64, value_key};
pub use sources::{discover, discover_lenient, CsvOptions, Format, SourceFile};
pub use survey::{survey, ColumnStats, Survey, SurveySettings};
pub use survey_part::SurveyPart;
