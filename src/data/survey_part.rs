//! The survey pass computed in parts where the rows are (for example one part per
//! partition of a cluster), carried as bytes and merged on the driver.
//!
//! Each part holds, for its rows, the same statistics the survey of a file holds:
//! Welford moments per column (Welford 1962), missing counts, rows read and kept, and its
//! bottom-k share of the seeded sample (Cohen & Kaplan, PODC 2007). Parts merge with the
//! pairwise formula of Chan, Golub & LeVeque (1979) in the order given, and
//! [`SurveyPart::finish`] makes the same [`Survey`] as the file survey does from its
//! merged parts. Rows come as blocks from [`super::block_of_batch`], whose row ids are
//! value keys, so the sample is the same however the rows are partitioned.

use super::block::Block;
use super::columns::ResolvedColumns;
use super::sample::BottomK;
use super::survey::{finish, Moments, Part, Survey};
use crate::error::{Error, Result};

/// Tag and version of the byte form.
const TAG: &[u8; 8] = b"KLSURV01";

/// One part of a survey (see the module docs).
pub struct SurveyPart {
    columns: ResolvedColumns,
    k: usize,
    seed: u64,
    part: Part,
}

impl SurveyPart {
    /// An empty part over `columns` (features, then the target) keeping up to
    /// `sample_rows` sample rows under `seed`.
    pub fn new(columns: ResolvedColumns, sample_rows: usize, seed: u64) -> Self {
        let cols = columns.all().count();
        SurveyPart {
            part: Part::new(cols, sample_rows, seed),
            columns,
            k: sample_rows,
            seed,
        }
    }

    /// Adds a block of this part's rows (in the columns' order).
    ///
    /// # Panics
    /// If the block's columns differ from the part's.
    pub fn add(&mut self, block: &Block) {
        let cols = self.columns.all().count();
        assert_eq!(
            block.x.ncols() + usize::from(block.y.is_some()),
            cols,
            "SurveyPart::add: columns of the block"
        );
        let mut row = vec![0.0; cols];
        self.part.add(block, &mut row);
    }

    /// Rows read so far, skipped ones included.
    pub fn rows(&self) -> u64 {
        self.part.rows
    }

    /// Adds `other`, a part of later rows of the same survey.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if `other` surveys other columns or another sample.
    pub fn merge(&mut self, other: SurveyPart) -> Result<()> {
        if other.columns != self.columns || other.k != self.k || other.seed != self.seed {
            return Err(Error::invalid(
                "survey parts",
                "parts of different surveys cannot be merged",
            ));
        }
        self.part.merge(other.part);
        Ok(())
    }

    /// The survey of every row added and merged.
    ///
    /// # Errors
    /// As [`super::survey`]: [`Error::NoRows`] when no row was kept,
    /// [`Error::Overflow`] when a column's values overflow.
    pub fn finish(self) -> Result<Survey> {
        finish(self.columns, self.part)
    }

    /// The part as bytes (its size: a few numbers per column plus the sample rows).
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut out = Vec::new();
        out.extend_from_slice(TAG);
        let names: Vec<&str> = self.columns.all().collect();
        put_u64(&mut out, names.len() as u64);
        for n in &names {
            put_u64(&mut out, n.len() as u64);
            out.extend_from_slice(n.as_bytes());
        }
        put_u64(&mut out, u64::from(self.columns.target.is_some()));
        put_u64(&mut out, self.k as u64);
        put_u64(&mut out, self.seed);
        for (m, miss) in self.part.moments.iter().zip(&self.part.missing) {
            put_u64(&mut out, m.n);
            for v in [m.mean, m.m2, m.min, m.max] {
                out.extend_from_slice(&v.to_le_bytes());
            }
            put_u64(&mut out, *miss);
        }
        put_u64(&mut out, self.part.rows);
        put_u64(&mut out, self.part.used);
        let entries = self.part.sample.entries();
        put_u64(&mut out, entries.len() as u64);
        for (key, id, values) in entries {
            put_u64(&mut out, key);
            put_u64(&mut out, id);
            for v in values {
                out.extend_from_slice(&v.to_le_bytes());
            }
        }
        out
    }

    /// A part from [`SurveyPart::to_bytes`].
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if the bytes are not a survey part of this format.
    pub fn from_bytes(bytes: &[u8]) -> Result<SurveyPart> {
        let mut r = Reader { bytes, at: 0 };
        if r.take(8)? != TAG {
            return Err(bad());
        }
        let cols = r.count()?;
        let mut names = Vec::with_capacity(cols);
        for _ in 0..cols {
            let len = r.count()?;
            let text = std::str::from_utf8(r.take(len)?).map_err(|_| bad())?;
            names.push(text.to_string());
        }
        let has_target = r.u64()? == 1;
        if has_target && names.is_empty() {
            return Err(bad());
        }
        let target = has_target.then(|| names.pop().unwrap_or_default());
        let columns = ResolvedColumns {
            features: names,
            target,
        };
        let k = r.u64()?;
        if k > u64::from(u32::MAX) {
            return Err(bad());
        }
        let k = k as usize;
        let seed = r.u64()?;
        let mut part = Part::new(cols, k, seed);
        for j in 0..cols {
            let n = r.u64()?;
            let (mean, m2, min, max) = (r.f64()?, r.f64()?, r.f64()?, r.f64()?);
            part.moments[j] = Moments {
                n,
                mean,
                m2,
                min,
                max,
            };
            part.missing[j] = r.u64()?;
        }
        part.rows = r.u64()?;
        part.used = r.u64()?;
        let m = r.count()?;
        let mut sample = BottomK::new(k, cols, seed);
        let mut row = vec![0.0; cols];
        for _ in 0..m {
            let (key, id) = (r.u64()?, r.u64()?);
            for v in row.iter_mut() {
                *v = r.f64()?;
            }
            sample.insert_keyed(key, id, &row);
        }
        part.sample = sample;
        if r.at != bytes.len() {
            return Err(bad());
        }
        Ok(SurveyPart {
            columns,
            k,
            seed,
            part,
        })
    }
}

fn put_u64(out: &mut Vec<u8>, v: u64) {
    out.extend_from_slice(&v.to_le_bytes());
}

fn bad() -> Error {
    Error::invalid(
        "survey part",
        "the bytes are not a survey part of this version (damaged or truncated)",
    )
}

struct Reader<'a> {
    bytes: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    fn take(&mut self, n: usize) -> Result<&'a [u8]> {
        let end = self.at.checked_add(n).ok_or_else(bad)?;
        let s = self.bytes.get(self.at..end).ok_or_else(bad)?;
        self.at = end;
        Ok(s)
    }
    fn u64(&mut self) -> Result<u64> {
        let b = self.take(8)?;
        Ok(u64::from_le_bytes(b.try_into().map_err(|_| bad())?))
    }
    fn f64(&mut self) -> Result<f64> {
        Ok(f64::from_bits(self.u64()?))
    }
    /// A length, bounded by the bytes left (so damaged input cannot ask for huge memory).
    fn count(&mut self) -> Result<usize> {
        let v = self.u64()?;
        if v > self.bytes.len() as u64 {
            return Err(bad());
        }
        Ok(v as usize)
    }
}

#[cfg(test)]
mod tests {
    use std::path::Path;
    use std::sync::Arc;

    use arrow_array::{Float64Array, RecordBatch};
    use arrow_schema::{DataType, Field, Schema};

    use super::*;
    use crate::data::{block_of_batch, MissingPolicy};

    fn batch(rows: std::ops::Range<u64>) -> RecordBatch {
        let a: Vec<f64> = rows
            .clone()
            .map(|i| ((i * 7_919) % 1_009) as f64 * 0.013)
            .collect();
        let y: Vec<f64> = rows.map(|i| ((i * 104_729) % 997) as f64 - 400.0).collect();
        let schema = Schema::new(vec![
            Field::new("a", DataType::Float64, true),
            Field::new("y", DataType::Float64, true),
        ]);
        RecordBatch::try_new(
            Arc::new(schema),
            vec![
                Arc::new(Float64Array::from(a)),
                Arc::new(Float64Array::from(y)),
            ],
        )
        .unwrap()
    }

    fn part_of(cuts: &[u64]) -> SurveyPart {
        let columns = ResolvedColumns {
            features: vec!["a".into()],
            target: Some("y".into()),
        };
        let mut total: Option<SurveyPart> = None;
        for w in cuts.windows(2) {
            let mut p = SurveyPart::new(columns.clone(), 50, 9);
            let b = block_of_batch(
                &batch(w[0]..w[1]),
                &["a", "y"],
                true,
                MissingPolicy::Skip,
                Path::new("<test>"),
                0,
            )
            .unwrap();
            p.add(&b);
            // every part travels as bytes, as from a partition
            let p = SurveyPart::from_bytes(&p.to_bytes()).unwrap();
            match &mut total {
                None => total = Some(p),
                Some(t) => t.merge(p).unwrap(),
            }
        }
        total.unwrap()
    }

    /// Common practice (bottom-k sketches, Cohen & Kaplan 2007; determinism contract):
    /// with rows keyed by their values, the sample is the same whatever the split of the
    /// rows into parts, and the moments agree to rounding.
    #[test]
    fn the_sample_does_not_depend_on_the_split() {
        let one = part_of(&[0, 3_000]);
        let bytes = one.to_bytes();
        assert_eq!(SurveyPart::from_bytes(&bytes).unwrap().to_bytes(), bytes);
        let one = one.finish().unwrap();
        let many = part_of(&[0, 7, 1_200, 1_201, 2_999, 3_000])
            .finish()
            .unwrap();
        assert_eq!(one.rows_total, 3_000);
        assert_eq!(many.rows_total, 3_000);
        assert_eq!(one.sample_x, many.sample_x);
        assert_eq!(one.sample_y, many.sample_y);
        assert_eq!(one.sample_row_ids, many.sample_row_ids);
        for (p, q) in one.features.iter().zip(&many.features) {
            assert!((p.mean - q.mean).abs() <= 1e-12 * p.mean.abs());
            assert!((p.variance - q.variance).abs() <= 1e-10 * p.variance);
        }
    }

    #[test]
    fn damaged_bytes_are_refused() {
        let bytes = part_of(&[0, 100]).to_bytes();
        assert!(SurveyPart::from_bytes(&bytes[..bytes.len() - 3]).is_err());
        assert!(SurveyPart::from_bytes(b"KLSURV01").is_err());
    }
}
