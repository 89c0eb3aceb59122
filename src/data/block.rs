//! One batch of rows as the rest of kernlake sees it, and the missing-value policy that
//! decides which rows of a batch are kept.

use std::path::Path;

use arrow_array::{Array, Float64Array};
use ndarray::{Array1, Array2};

use crate::error::{Error, Result};

/// What to do with a row holding a missing value (null, NaN, +inf or -inf) in a chosen
/// column.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum MissingPolicy {
    /// Leave the row out and count its missing values per column.
    Skip,
    /// Stop at the first such value with [`Error::Cell`] naming file, row and column.
    Fail,
}

/// One batch of usable rows, in file order.
#[derive(Clone, Debug)]
pub struct Block {
    /// Numbers the blocks of one iterator 0, 1, 2, … so that parallel consumers can
    /// restore their order.
    pub seq: u64,
    /// Index of the file in [`super::TableReader::files`].
    pub file_index: usize,
    /// Global index of the batch's first row: rows are counted over all files in order,
    /// skipped rows included, so the index is the same whatever the batch size.
    pub first_row: u64,
    /// Rows read in this batch, skipped ones included.
    pub rows: usize,
    /// Global index of each kept row.
    pub row_ids: Vec<u64>,
    /// Kept rows × features, in [`super::ResolvedColumns`] order, in raw units.
    pub x: Array2<f64>,
    /// The target of each kept row, when a target column was chosen.
    pub y: Option<Array1<f64>>,
    /// Per chosen column (features, then target): missing values in the skipped rows.
    pub skipped: Vec<u64>,
}

impl Block {
    /// Number of kept rows.
    pub fn kept(&self) -> usize {
        self.row_ids.len()
    }
}

/// Whether a value is missing: null, NaN or infinite.
#[inline]
fn missing(a: &Float64Array, i: usize) -> bool {
    a.is_null(i) || !a.value(i).is_finite()
}

fn describe(a: &Float64Array, i: usize) -> String {
    if a.is_null(i) {
        "missing value (null)".into()
    } else if a.value(i).is_nan() {
        "value is NaN".into()
    } else {
        format!("value is {}", a.value(i))
    }
}

/// Where the values of a batch came from, for messages and row numbering.
pub(crate) struct BatchPlace<'a> {
    pub path: &'a Path,
    pub file_index: usize,
    pub seq: u64,
    /// Global index of the batch's first row.
    pub first_row: u64,
    /// Zero-based index of the batch's first row within its file.
    pub local_row: u64,
}

/// Builds a block from the chosen columns of an Arrow batch (`names`: features then the
/// target, each read as numbers) that has no file: `place` names it in messages (row
/// numbers count from `first_row` + 1), and each kept row's id is its
/// [`super::sample::value_key`] instead of a position, so that the holdout split and the
/// samples depend only on the rows' values and the seed.
///
/// # Errors
/// [`Error::Column`] when a column is absent or cannot be read as numbers;
/// [`Error::Cell`] for a missing value under [`MissingPolicy::Fail`].
pub fn block_of_batch(
    batch: &arrow_array::RecordBatch,
    names: &[&str],
    has_target: bool,
    policy: MissingPolicy,
    place: &Path,
    first_row: u64,
) -> Result<Block> {
    use arrow_array::cast::AsArray;
    let cols = names
        .iter()
        .map(|name| {
            let col = batch.column_by_name(name).ok_or_else(|| Error::Column {
                path: place.to_path_buf(),
                column: name.to_string(),
                message: "no such column".into(),
            })?;
            let f = arrow_cast::cast(col, &arrow_schema::DataType::Float64).map_err(|e| {
                Error::Column {
                    path: place.to_path_buf(),
                    column: name.to_string(),
                    message: format!("could not be read as numbers ({e})"),
                }
            })?;
            Ok(f.as_primitive::<arrow_array::types::Float64Type>().clone())
        })
        .collect::<Result<Vec<Float64Array>>>()?;
    let n_features = names.len() - usize::from(has_target);
    let at = BatchPlace {
        path: place,
        file_index: 0,
        seq: 0,
        first_row,
        local_row: first_row,
    };
    let mut block = build_block(&at, &cols, names, n_features, has_target, policy)?;
    let mut row = vec![0.0; names.len()];
    for (r, id) in block.row_ids.iter_mut().enumerate() {
        for (j, v) in block.x.row(r).iter().enumerate() {
            row[j] = *v;
        }
        if let Some(y) = &block.y {
            row[n_features] = y[r];
        }
        *id = super::sample::value_key(&row);
    }
    Ok(block)
}

/// Builds a block from the chosen columns of one batch (`cols`: features then target,
/// each of the batch's length), applying the missing-value policy.
pub(crate) fn build_block(
    place: &BatchPlace<'_>,
    cols: &[Float64Array],
    names: &[&str],
    n_features: usize,
    has_target: bool,
    policy: MissingPolicy,
) -> Result<Block> {
    let n = cols.first().map_or(0, Array::len);
    let mut keep = vec![true; n];
    let mut skipped = vec![0u64; cols.len()];
    let mut first_bad: Option<(usize, usize)> = None;
    for (c, a) in cols.iter().enumerate() {
        if a.null_count() == 0 && a.values().iter().all(|v| v.is_finite()) {
            continue;
        }
        for (i, k) in keep.iter_mut().enumerate() {
            if missing(a, i) {
                *k = false;
                skipped[c] += 1;
                if first_bad.is_none_or(|(r, _)| i < r) {
                    first_bad = Some((i, c));
                }
            }
        }
    }
    if policy == MissingPolicy::Fail {
        if let Some((i, c)) = first_bad {
            return Err(Error::Cell {
                path: place.path.to_path_buf(),
                row: place.local_row + i as u64 + 1,
                column: names[c].to_string(),
                message: describe(&cols[c], i),
            });
        }
    }
    let kept: Vec<usize> = (0..n).filter(|&i| keep[i]).collect();
    let m = kept.len();
    let mut x = Array2::<f64>::zeros((m, n_features));
    {
        let out = x
            .as_slice_mut()
            .expect("a freshly allocated array is contiguous");
        // Column-to-row transpose in tiles of rows, so that the tile of `x` being
        // written stays in cache while each column is gathered into it.
        const TILE: usize = 256;
        let values: Vec<&[f64]> = cols[..n_features].iter().map(|a| &a.values()[..]).collect();
        for (t, rows) in kept.chunks(TILE).enumerate() {
            let tile = &mut out[t * TILE * n_features..(t * TILE + rows.len()) * n_features];
            for (j, v) in values.iter().enumerate() {
                for (dst, &i) in tile.iter_mut().skip(j).step_by(n_features).zip(rows) {
                    *dst = v[i];
                }
            }
        }
    }
    let y = has_target.then(|| {
        let v = cols[n_features].values();
        kept.iter().map(|&i| v[i]).collect::<Array1<f64>>()
    });
    Ok(Block {
        seq: place.seq,
        file_index: place.file_index,
        first_row: place.first_row,
        rows: n,
        row_ids: kept.iter().map(|&i| place.first_row + i as u64).collect(),
        x,
        y,
        skipped,
    })
}
