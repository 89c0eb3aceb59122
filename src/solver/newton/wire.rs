//! [`PassStats`] as bytes, so a pass's statistics can travel between processes (from a
//! cluster's executors to the driver): little-endian, every f64 by its bit pattern (so a
//! round trip is exact), a leading tag with the format's version and a trailing CRC-32
//! of everything before it.

use ndarray::{Array1, Array2};

use super::hessian::Lever;
use super::stats::{PassStats, Plan, Sample, Sums, Total};
use crate::error::{Error, Result};

/// The format's tag and version.
const MAGIC: &[u8; 8] = b"KLNPASS1";

impl PassStats {
    /// The statistics as bytes: O(D·K) for the pass's fixed data and sums (K = 8
    /// sketch columns), plus the sample: (D + 1)² values for a Gram matrix, or
    /// (inputs + 1) per sampled row with [`PassStats::with_input_sample`].
    pub fn to_bytes(&self) -> Vec<u8> {
        let mut out = Out(MAGIC.to_vec());
        let p = &self.plan;
        out.u64(p.dim as u64);
        out.f64(p.c);
        out.f64(p.epsilon);
        out.f64(p.share);
        out.u64(p.sample_seed);
        out.u64(p.inputs.map_or(u64::MAX, |v| v as u64));
        out.f64s(p.w.as_slice().expect("weights are contiguous"));
        out.opt(p.dir.as_ref().map(|d| d.to_vec()));
        out.f64s(&p.steps);
        out.f64s(&p.grid);
        out.opt(p.lever.as_ref().map(|l| {
            let mut v = vec![l.gain, l.x.ncols() as f64];
            v.extend(l.x.iter());
            v
        }));
        let s = &self.sums;
        out.u64(s.rows);
        out.f64s(&s.grad.iter().copied().collect::<Vec<_>>());
        for totals in [&s.loss, &s.y_beta, &s.beta_l1, &s.beta_sq, &s.grid_loss] {
            let flat: Vec<f64> = totals.iter().flat_map(|t| [t.sum, t.carry]).collect();
            out.f64s(&flat);
        }
        out.u64(s.active.len() as u64);
        s.active.iter().for_each(|&a| out.u64(a));
        match &self.sample {
            Sample::Gram(h) => {
                out.0.push(0);
                out.f64s(&h.iter().copied().collect::<Vec<_>>());
            }
            Sample::Inputs { x, weight } => {
                out.0.push(1);
                out.f64s(x);
                out.f64s(weight);
            }
        }
        let crc = crc32fast::hash(&out.0);
        out.0.extend(crc.to_le_bytes());
        out.0
    }

    /// Statistics from [`PassStats::to_bytes`], bit for bit.
    ///
    /// # Errors
    /// [`Error::InvalidParameter`] if the bytes are not statistics of this format (wrong
    /// tag, damaged, truncated or inconsistent).
    pub fn from_bytes(bytes: &[u8]) -> Result<PassStats> {
        let bad = |why: &str| Error::invalid("pass statistics", why.to_string());
        if bytes.len() < MAGIC.len() + 4 || &bytes[..MAGIC.len()] != MAGIC {
            return Err(bad(
                "the bytes are not Newton pass statistics of this version",
            ));
        }
        let (body, crc) = bytes.split_at(bytes.len() - 4);
        if crc32fast::hash(body).to_le_bytes() != crc {
            return Err(bad("the bytes are damaged (checksum mismatch)"));
        }
        let mut r = In(&body[MAGIC.len()..]);
        let dim = r.usize()?;
        if dim >= body.len() / 8 {
            return Err(bad("the feature count does not fit the bytes"));
        }
        let (c, epsilon, share) = (r.f64()?, r.f64()?, r.f64()?);
        let sample_seed = r.u64()?;
        let inputs = match r.u64()? {
            u64::MAX => None,
            v => Some(usize::try_from(v).map_err(|_| bad("input count out of range"))?),
        };
        let w = Array1::from(r.f64s()?);
        let dir = r.opt()?.map(Array1::from);
        let (steps, grid) = (r.f64s()?, r.f64s()?);
        let lever = match r.opt()? {
            None => None,
            Some(v) if v.len() >= 2 => {
                let k = v[1] as usize;
                let x = Array2::from_shape_vec((dim + 1, k), v[2..].to_vec())
                    .map_err(|_| bad("the leverage sketch has the wrong shape"))?;
                Some(Lever { x, gain: v[0] })
            }
            Some(_) => return Err(bad("the leverage sketch is truncated")),
        };
        let rows = r.u64()?;
        let grad = Array2::from_shape_vec((steps.len(), dim + 1), r.f64s()?)
            .map_err(|_| bad("the gradient sums have the wrong shape"))?;
        let mut totals = Vec::new();
        for want in [
            steps.len(),
            steps.len(),
            steps.len(),
            steps.len(),
            grid.len(),
        ] {
            let flat = r.f64s()?;
            if flat.len() != 2 * want {
                return Err(bad("a sum has the wrong length"));
            }
            totals.push(
                flat.chunks(2)
                    .map(|p| Total {
                        sum: p[0],
                        carry: p[1],
                    })
                    .collect::<Vec<_>>(),
            );
        }
        let active_len = r.usize()?;
        if active_len != steps.len() {
            return Err(bad("the counts have the wrong length"));
        }
        let active = (0..active_len)
            .map(|_| r.u64())
            .collect::<Result<Vec<_>>>()?;
        let sample = match r.byte()? {
            0 => Sample::Gram(
                Array2::from_shape_vec((dim + 1, dim + 1), r.f64s()?)
                    .map_err(|_| bad("the Gram matrix has the wrong shape"))?,
            ),
            1 => {
                let (x, weight) = (r.f64s()?, r.f64s()?);
                if inputs.is_none_or(|i| x.len() != weight.len() * i) {
                    return Err(bad("the sampled input rows have the wrong shape"));
                }
                Sample::Inputs { x, weight }
            }
            _ => return Err(bad("unknown form of the Hessian's sample")),
        };
        let well_formed = r.0.is_empty()
            && w.len() == dim + 1
            && dir.as_ref().is_none_or(|d| d.len() == dim + 1)
            && matches!(
                (&sample, inputs),
                (Sample::Gram(_), None) | (Sample::Inputs { .. }, Some(_))
            );
        if !well_formed {
            return Err(bad("the parts of the statistics do not fit together"));
        }
        let mut totals = totals.into_iter();
        let mut next = || totals.next().expect("five sums");
        Ok(PassStats {
            plan: Plan {
                dim,
                c,
                epsilon,
                w,
                dir,
                steps,
                grid,
                share,
                lever,
                sample_seed,
                inputs,
            },
            sums: Sums {
                grad,
                loss: next(),
                y_beta: next(),
                beta_l1: next(),
                beta_sq: next(),
                grid_loss: next(),
                active,
                rows,
            },
            sample,
        })
    }
}

/// Bytes being written.
struct Out(Vec<u8>);

impl Out {
    fn u64(&mut self, v: u64) {
        self.0.extend(v.to_le_bytes());
    }

    fn f64(&mut self, v: f64) {
        self.u64(v.to_bits());
    }

    /// A length, then the values.
    fn f64s(&mut self, v: &[f64]) {
        self.u64(v.len() as u64);
        v.iter().for_each(|&x| self.f64(x));
    }

    /// A flag byte, then the values when present.
    fn opt(&mut self, v: Option<Vec<f64>>) {
        self.0.push(u8::from(v.is_some()));
        if let Some(v) = v {
            self.f64s(&v);
        }
    }
}

/// Bytes being read.
struct In<'a>(&'a [u8]);

impl In<'_> {
    fn take(&mut self, n: usize) -> Result<&[u8]> {
        if self.0.len() < n {
            return Err(Error::invalid(
                "pass statistics",
                "the bytes end too early".to_string(),
            ));
        }
        let (head, rest) = self.0.split_at(n);
        self.0 = rest;
        Ok(head)
    }

    fn byte(&mut self) -> Result<u8> {
        Ok(self.take(1)?[0])
    }

    fn u64(&mut self) -> Result<u64> {
        Ok(u64::from_le_bytes(
            self.take(8)?.try_into().expect("8 bytes"),
        ))
    }

    fn usize(&mut self) -> Result<usize> {
        usize::try_from(self.u64()?)
            .map_err(|_| Error::invalid("pass statistics", "a size is out of range".to_string()))
    }

    fn f64(&mut self) -> Result<f64> {
        Ok(f64::from_bits(self.u64()?))
    }

    fn f64s(&mut self) -> Result<Vec<f64>> {
        let n = self.usize()?;
        if n > self.0.len() / 8 {
            return Err(Error::invalid(
                "pass statistics",
                "the bytes end too early".to_string(),
            ));
        }
        (0..n).map(|_| self.f64()).collect()
    }

    fn opt(&mut self) -> Result<Option<Vec<f64>>> {
        match self.byte()? {
            0 => Ok(None),
            1 => Ok(Some(self.f64s()?)),
            _ => Err(Error::invalid(
                "pass statistics",
                "an optional part has a bad flag".to_string(),
            )),
        }
    }
}
