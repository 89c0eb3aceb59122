//! The survey pass: one streaming pass over the data that measures each chosen column
//! (count, mean, variance, range, missing values) and draws a seeded uniform sample of
//! rows, whatever the number of threads.
//!
//! Statistics are taken over kept rows (rows with no missing chosen value). Each file is
//! accumulated row by row with Welford's update (Welford, Technometrics 4(3), 1962) and
//! the per-file results are merged in file order with the pairwise formula of Chan,
//! Golub & LeVeque ("Updating formulae and a pairwise algorithm for computing sample
//! variances", COMPSTAT 1982 / Stanford report 1979). Files may be surveyed in parallel;
//! since each file's result depends only on that file and the merge order is fixed, the
//! result is bit-identical for any thread count.
//!
//! The sample is bottom-k sampling: each kept row gets the key splitmix64(seed, global
//! row index) and the `sample_rows` rows with the smallest keys are kept (ties broken by
//! row index). With a random hash this is a uniform sample without replacement, and it
//! depends neither on the batch size, the file split, nor the parallelism. It is returned
//! in key order, so that any prefix is a uniform sample too.

use std::sync::mpsc;

use ndarray::{Array1, Array2};
use rayon::prelude::*;

use super::block::Block;
use super::columns::ResolvedColumns;
use super::reader::TableReader;
use super::sample::BottomK;
use crate::error::{Error, Result};

/// Settings of the survey pass.
#[derive(Clone, Debug)]
pub struct SurveySettings {
    /// Rows in the uniform sample (default 10,000).
    pub sample_rows: usize,
    /// Seed of the sample's row keys.
    pub seed: u64,
    /// Worker threads surveying files in parallel; 0 means one per core.
    pub threads: usize,
}

impl Default for SurveySettings {
    fn default() -> Self {
        SurveySettings {
            sample_rows: crate::settings::defaults::SAMPLE,
            seed: 0,
            threads: crate::settings::defaults::THREADS,
        }
    }
}

/// Summary of one chosen column over the kept rows.
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ColumnStats {
    /// The column's name.
    pub name: String,
    /// Values counted (the kept rows).
    pub count: u64,
    /// Mean of the values.
    pub mean: f64,
    /// Population variance (divided by `count`).
    pub variance: f64,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
    /// Missing values (null, NaN, ±inf) of this column in the skipped rows.
    pub missing: u64,
}

/// What the survey pass found.
#[derive(Clone, Debug)]
pub struct Survey {
    /// The columns surveyed.
    pub columns: ResolvedColumns,
    /// One summary per feature, in column order.
    pub features: Vec<ColumnStats>,
    /// The target's summary, if there is a target.
    pub target: Option<ColumnStats>,
    /// Rows read, skipped ones included.
    pub rows_total: u64,
    /// Rows kept.
    pub rows_used: u64,
    /// Rows skipped for a missing value.
    pub rows_skipped: u64,
    /// Features whose kept values are all equal.
    pub constant_features: Vec<String>,
    /// The sample's features, in raw units, in the order of the rows' sample keys: every
    /// prefix is a uniform sample of all the kept rows (estimates may use the first
    /// rows only without favouring the start of the data).
    pub sample_x: Array2<f64>,
    /// The sample's targets.
    pub sample_y: Option<Array1<f64>>,
    /// Global row index of each sample row, in the same order.
    pub sample_row_ids: Vec<u64>,
}

/// Running moments of one column (Welford's update, Chan et al.'s merge).
#[derive(Clone, Copy, Debug)]
pub(super) struct Moments {
    pub n: u64,
    pub mean: f64,
    pub m2: f64,
    pub min: f64,
    pub max: f64,
}

impl Moments {
    pub(super) const EMPTY: Moments = Moments {
        n: 0,
        mean: 0.0,
        m2: 0.0,
        min: f64::INFINITY,
        max: f64::NEG_INFINITY,
    };

    /// Welford (1962): one value.
    #[inline]
    fn push(&mut self, v: f64) {
        self.n += 1;
        let d = v - self.mean;
        self.mean += d / self.n as f64;
        self.m2 += d * (v - self.mean);
        self.min = self.min.min(v);
        self.max = self.max.max(v);
    }

    /// Chan, Golub & LeVeque (1979): merge two disjoint parts.
    pub(super) fn merge(&mut self, o: &Moments) {
        if o.n == 0 {
            return;
        }
        if self.n == 0 {
            *self = *o;
            return;
        }
        let (na, nb) = (self.n as f64, o.n as f64);
        let n = na + nb;
        let d = o.mean - self.mean;
        self.mean += d * (nb / n);
        self.m2 += o.m2 + d * d * (na * nb / n);
        self.n += o.n;
        self.min = self.min.min(o.min);
        self.max = self.max.max(o.max);
    }
}

/// Everything one file contributes.
pub(super) struct Part {
    pub moments: Vec<Moments>,
    pub missing: Vec<u64>,
    pub rows: u64,
    pub used: u64,
    pub sample: BottomK,
}

impl Part {
    pub(super) fn new(cols: usize, k: usize, seed: u64) -> Self {
        Part {
            moments: vec![Moments::EMPTY; cols],
            missing: vec![0; cols],
            rows: 0,
            used: 0,
            sample: BottomK::new(k, cols, seed),
        }
    }

    /// Adds the rows of a later, disjoint part (Chan, Golub & LeVeque merge).
    pub(super) fn merge(&mut self, p: Part) {
        for (m, o) in self.moments.iter_mut().zip(&p.moments) {
            m.merge(o);
        }
        for (m, o) in self.missing.iter_mut().zip(&p.missing) {
            *m += o;
        }
        self.rows += p.rows;
        self.used += p.used;
        self.sample.absorb(p.sample);
    }

    pub(super) fn add(&mut self, b: &Block, row: &mut [f64]) {
        let d = b.x.ncols();
        for (r, &id) in b.row_ids.iter().enumerate() {
            for (j, v) in b.x.row(r).iter().enumerate() {
                row[j] = *v;
            }
            if let Some(y) = &b.y {
                row[d] = y[r];
            }
            for (m, &v) in self.moments.iter_mut().zip(row.iter()) {
                m.push(v);
            }
            self.sample.offer(id, row);
        }
        for (m, s) in self.missing.iter_mut().zip(&b.skipped) {
            *m += s;
        }
        self.rows += b.rows as u64;
        self.used += b.kept() as u64;
    }
}

fn survey_file(
    reader: &TableReader,
    file: usize,
    settings: &SurveySettings,
    tx: &mpsc::Sender<u64>,
) -> Result<Part> {
    let cols = reader.columns().all().count();
    let mut part = Part::new(cols, settings.sample_rows, settings.seed);
    let mut row = vec![0.0; cols];
    for b in reader.file_blocks(file)? {
        let b = b?;
        part.add(&b, &mut row);
        let _ = tx.send(b.rows as u64);
    }
    Ok(part)
}

/// One streaming pass over the reader's files: column statistics over the kept rows and
/// a seeded uniform sample of `sample_rows` kept rows (all of them if there are fewer).
/// `progress` is called on the calling thread with the rows read so far.
///
/// Errors: any read error of the files (the first in file order); [`Error::NoRows`]
/// when no row is kept; [`Error::Overflow`] when a column's values overflow;
/// [`Error::Threads`] when the thread pool cannot start.
pub fn survey(
    reader: &TableReader,
    settings: &SurveySettings,
    progress: &dyn Fn(u64),
) -> Result<Survey> {
    let files = reader.selected_files();
    // learn CSV row counts first so that every file knows its global row offset
    reader.row_offsets()?;
    let pool = crate::settings::thread_pool(settings.threads)?;
    let cols = reader.columns().all().count();
    let (tx, rx) = mpsc::channel::<u64>();
    let total: Result<Part> = std::thread::scope(|scope| {
        let worker = scope.spawn(move || {
            // Files are surveyed a group at a time so that at most one group of
            // per-file samples is held; results merge in file order.
            let group = pool.current_num_threads().max(1) * 4;
            let mut total = Part::new(cols, settings.sample_rows, settings.seed);
            for files in files.chunks(group) {
                let parts: Vec<Result<Part>> = pool.install(|| {
                    files
                        .par_iter()
                        .map_with(tx.clone(), |tx, &f| survey_file(reader, f, settings, tx))
                        .collect()
                });
                for p in parts {
                    total.merge(p?);
                }
            }
            Ok(total)
        });
        let mut done = 0u64;
        for n in rx {
            done += n;
            progress(done);
        }
        worker.join().expect("a survey worker panicked")
    });
    finish(reader.columns().clone(), total?)
}

/// The survey of the merged parts `total` of the columns `columns`.
pub(super) fn finish(columns: ResolvedColumns, total: Part) -> Result<Survey> {
    if total.used == 0 {
        return Err(Error::NoRows(no_rows_reason(&columns, &total)));
    }
    let stats: Vec<ColumnStats> = columns
        .all()
        .zip(total.moments.iter().zip(&total.missing))
        .map(|(name, (m, &missing))| ColumnStats {
            name: name.to_string(),
            count: m.n,
            mean: m.mean,
            variance: m.m2 / m.n as f64,
            min: m.min,
            max: m.max,
            missing,
        })
        .collect();
    if let Some(s) = stats
        .iter()
        .find(|s| !(s.mean.is_finite() && s.variance.is_finite()))
    {
        return Err(Error::Overflow {
            column: s.name.clone(),
        });
    }
    let d = columns.features.len();
    let cols = columns.all().count();
    let (sample_row_ids, values) = total.sample.into_key_order();
    let sample_all = Array2::from_shape_vec((sample_row_ids.len(), cols), values)
        .expect("the sample holds one value per column per row");
    let sample_x = sample_all.slice(ndarray::s![.., ..d]).to_owned();
    let sample_y = columns
        .target
        .as_ref()
        .map(|_| sample_all.column(d).to_owned());
    let mut features = stats;
    let target = columns.target.as_ref().and_then(|_| features.pop());
    let constant_features = features
        .iter()
        .filter(|s| s.min == s.max)
        .map(|s| s.name.clone())
        .collect();
    Ok(Survey {
        columns,
        features,
        target,
        rows_total: total.rows,
        rows_used: total.used,
        rows_skipped: total.rows - total.used,
        constant_features,
        sample_x,
        sample_y,
        sample_row_ids,
    })
}

/// Why no row survived: the columns with no value at all (every cell empty, null or
/// NaN) are named, else the column with the most missing cells.
fn no_rows_reason(columns: &ResolvedColumns, total: &Part) -> String {
    let names: Vec<&str> = columns.all().collect();
    let empty: Vec<&str> = names
        .iter()
        .zip(&total.missing)
        .filter(|&(_, &m)| total.rows > 0 && m == total.rows)
        .map(|(n, _)| *n)
        .collect();
    if !empty.is_empty() {
        let list = empty.iter().map(|n| format!("'{n}'")).collect::<Vec<_>>();
        return format!(
            "column(s) {} have no value in any of the {} rows read (every cell is empty, null \
             or NaN); leave them out of the chosen columns",
            list.join(", "),
            total.rows
        );
    }
    match names.iter().zip(&total.missing).max_by_key(|&(_, &m)| m) {
        Some((name, &m)) if m > 0 => format!(
            "none of the {} rows read has a value in every chosen column (column '{name}' \
             misses {m} of them)",
            total.rows
        ),
        _ => format!(
            "none of the {} rows read has a value in every chosen column",
            total.rows
        ),
    }
}

#[cfg(test)]
mod tests {
    use super::Moments;

    /// Welford's update and Chan, Golub & LeVeque's merge over any split agree with the
    /// two-pass mean and population variance (common practice: the two-pass formula is
    /// the accurate reference), on values with a large mean relative to their spread.
    #[test]
    fn welford_and_pairwise_merge_match_two_pass() {
        let values: Vec<f64> = (0..5_000u64)
            .map(|i| 1.0e6 + ((i * 7_919) % 1_009) as f64 * 0.013)
            .collect();
        let n = values.len() as f64;
        let mean = values.iter().sum::<f64>() / n;
        let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
        for cuts in [vec![], vec![1], vec![17, 2_500], vec![999, 1_000, 4_321]] {
            let mut total = Moments::EMPTY;
            let mut start = 0;
            for end in cuts.iter().copied().chain([values.len()]) {
                let mut part = Moments::EMPTY;
                for &v in &values[start..end] {
                    part.push(v);
                }
                total.merge(&part);
                start = end;
            }
            assert_eq!(total.n, 5_000);
            assert!((total.mean - mean).abs() <= 1e-12 * mean.abs(), "{cuts:?}");
            assert!((total.m2 / n - var).abs() <= 1e-9 * var, "{cuts:?}");
        }
    }
}
