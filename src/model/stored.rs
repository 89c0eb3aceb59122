//! The model as a model file and back: metadata (input contract, kernel, map spec,
//! problem, report) beside named arrays, and on load, after the container's checksum, a
//! check of meaning (finite values, positive scales and gamma, distinct names, shapes).

use std::path::Path;

use serde::{Deserialize, Serialize};

use ndarray::{Array1, Array2};

use super::Model;
use crate::band::{Band, Spread};
use crate::coverage::Coverage;
use crate::data::ResolvedColumns;
use crate::error::{Error, Result};
use crate::features::{map_from_parts, MapParts, MapSpec};
use crate::kernel::Kernel;
use crate::modelfile::{brief, ModelFile};
use crate::report::TrainingReport;
use crate::scale::Standardizer;
use crate::solver::dcd::DcdSettings;

/// What kind of document a model file's metadata holds.
const MODEL_KIND: &str = "kernlake-model";

/// Metadata stored in the model file beside the arrays.
#[derive(Serialize, Deserialize)]
struct Meta {
    kind: String,
    written_by: String,
    columns: ResolvedColumns,
    kernel: Kernel,
    map_spec: MapSpec,
    map_kind: String,
    map_meta: serde_json::Value,
    /// Files written before this field had its name call it `solver`.
    #[serde(alias = "solver")]
    problem: DcdSettings,
    report: TrainingReport,
}

impl Model {
    /// The model as a model-file container (metadata plus named arrays).
    pub fn to_model_file(&self) -> Result<ModelFile> {
        let parts = self.map.to_parts();
        let meta = Meta {
            kind: MODEL_KIND.to_string(),
            written_by: format!("kernlake {}", env!("CARGO_PKG_VERSION")),
            columns: self.columns.clone(),
            kernel: self.kernel,
            map_spec: self.map_spec.clone(),
            map_kind: parts.kind.clone(),
            map_meta: parts.meta.clone(),
            problem: self.problem.clone(),
            report: self.report.clone(),
        };
        let meta = serde_json::to_value(&meta).map_err(|source| Error::Encode {
            what: "the model",
            source,
        })?;
        let row = |v: &[f64]| Array2::from_shape_vec((1, v.len()), v.to_vec()).expect("1×n");
        let mut arrays = vec![
            ("scaler.mean".to_string(), row(&self.scaler.mean)),
            ("scaler.scale".to_string(), row(&self.scaler.scale)),
            (
                "weights".to_string(),
                row(self.weights.as_slice().expect("contiguous")),
            ),
            ("intercept".to_string(), row(&[self.intercept])),
        ];
        if let Some(c) = &self.coverage {
            arrays.push(("coverage.landmarks".to_string(), c.landmarks.clone()));
            arrays.push(("coverage.threshold".to_string(), row(&[c.threshold])));
        }
        if let Some(b) = &self.band {
            let sp = &b.spread;
            arrays.push((
                "band.spread.weights".to_string(),
                row(sp.weights.as_slice().expect("contiguous")),
            ));
            // intercept, floor, rows fitted on, holdout rows calibrated on (counts are
            // exact in f64 below 2^53).
            arrays.push((
                "band.spread".to_string(),
                row(&[
                    sp.intercept,
                    sp.floor,
                    sp.rows as f64,
                    b.calibration_rows as f64,
                ]),
            ));
            arrays.push(("band.scores".to_string(), row(&b.scores)));
        }
        for (name, a) in parts.arrays {
            arrays.push((format!("map.{name}"), a));
        }
        Ok(ModelFile { meta, arrays })
    }

    /// Rebuilds a model from a model-file container; `path` names it in messages.
    pub fn from_model_file(file: &ModelFile, path: &Path) -> Result<Model> {
        let bad = |message: String| Error::ModelFile {
            path: path.to_path_buf(),
            message,
        };
        let meta: Meta = serde_json::from_value(file.meta.clone()).map_err(|e| {
            bad(format!(
                "its description is not a kernlake model ({})",
                brief(&e)
            ))
        })?;
        if meta.kind != MODEL_KIND {
            return Err(bad(format!(
                "holds a '{}', not a kernlake model",
                meta.kind
            )));
        }
        let vector = |name: &str| -> Result<Vec<f64>> {
            let a = file
                .array(name)
                .ok_or_else(|| bad(format!("lacks its '{name}' array")))?;
            Ok(a.iter().copied().collect())
        };
        let scaler = Standardizer {
            mean: vector("scaler.mean")?,
            scale: vector("scaler.scale")?,
        };
        let weights = Array1::from(vector("weights")?);
        let intercept = *vector("intercept")?
            .first()
            .ok_or_else(|| bad("has an empty intercept".into()))?;
        let parts = MapParts {
            kind: meta.map_kind.clone(),
            meta: meta.map_meta.clone(),
            arrays: file
                .arrays
                .iter()
                .filter_map(|(n, a)| n.strip_prefix("map.").map(|s| (s.to_string(), a.clone())))
                .collect(),
        };
        let map = map_from_parts(&parts)
            .map_err(|e| bad(format!("has an unusable feature map ({})", brief(&e))))?;
        let d = meta.columns.features.len();
        if scaler.mean.len() != d || scaler.scale.len() != d || map.input_dim() != d {
            return Err(bad(format!(
                "is inconsistent: {d} feature columns but a scaler or map of another width"
            )));
        }
        if weights.len() != map.output_dim() {
            return Err(bad(format!(
                "is inconsistent: {} weights for {} mapped features",
                weights.len(),
                map.output_dim()
            )));
        }
        let coverage = match (
            file.array("coverage.landmarks"),
            file.array("coverage.threshold"),
        ) {
            (Some(l), Some(t)) if l.ncols() == d && t.len() == 1 => Some(Coverage {
                landmarks: l.clone(),
                kernel: meta.kernel,
                threshold: t[[0, 0]],
            }),
            (None, None) => None,
            _ => return Err(bad("has malformed coverage landmarks".into())),
        };
        let band = match (
            file.array("band.spread.weights"),
            file.array("band.spread"),
            file.array("band.scores"),
        ) {
            (None, None, None) => None,
            (Some(w), Some(p), Some(sc)) if w.len() == weights.len() && p.len() == 4 => {
                let p: Vec<f64> = p.iter().copied().collect();
                Some(Band {
                    spread: Spread {
                        weights: Array1::from(w.iter().copied().collect::<Vec<f64>>()),
                        intercept: p[0],
                        floor: p[1],
                        rows: p[2] as u64,
                    },
                    scores: sc.iter().copied().collect(),
                    calibration_rows: p[3] as u64,
                })
            }
            _ => return Err(bad("has a malformed band".into())),
        };
        if let Some(b) = &band {
            check_band(b).map_err(|m| {
                bad(format!(
                    "passes its checksum but is not a usable model: {m}"
                ))
            })?;
        }
        check_meaning(file, &meta, &scaler, &weights, intercept, coverage.as_ref()).map_err(
            |m| {
                bad(format!(
                    "passes its checksum but is not a usable model: {m}"
                ))
            },
        )?;
        Ok(Model {
            coverage,
            band,
            columns: meta.columns,
            scaler,
            kernel: meta.kernel,
            map_spec: meta.map_spec,
            weights,
            intercept,
            problem: meta.problem,
            report: meta.report,
            map,
        })
    }
}

/// Checks that a decoded band means something: finite weights, a positive floor, sorted
/// non-negative scores, counts that fit together.
fn check_band(b: &Band) -> std::result::Result<(), String> {
    let sp = &b.spread;
    if sp.weights.iter().any(|v| !v.is_finite()) || !sp.intercept.is_finite() {
        return Err("its band's spread model holds a value that is not a finite number".into());
    }
    if !(sp.floor.is_finite() && sp.floor > 0.0) {
        return Err(format!(
            "its band's spread floor is {}, not a positive number",
            sp.floor
        ));
    }
    if b.scores.is_empty() || b.scores.len() as u64 > b.calibration_rows {
        return Err(format!(
            "its band keeps {} scores for {} holdout rows",
            b.scores.len(),
            b.calibration_rows
        ));
    }
    if b.scores.iter().any(|v| !(v.is_finite() && *v >= 0.0))
        || b.scores.windows(2).any(|w| w[0] > w[1])
    {
        return Err("its band's scores are not sorted non-negative numbers".into());
    }
    Ok(())
}

/// Checks what a checksum cannot: that a decoded model means something. Returns the
/// first problem as a clause naming the value concerned.
fn check_meaning(
    file: &ModelFile,
    meta: &Meta,
    scaler: &Standardizer,
    weights: &Array1<f64>,
    intercept: f64,
    coverage: Option<&Coverage>,
) -> std::result::Result<(), String> {
    let features = &meta.columns.features;
    if features.is_empty() {
        return Err("it lists no input column".into());
    }
    for (i, f) in features.iter().enumerate() {
        if f.is_empty() {
            return Err(format!("input {} has an empty name", i + 1));
        }
        if features[..i].contains(f) {
            return Err(format!("the input column '{f}' is listed twice"));
        }
        if meta.columns.target.as_ref() == Some(f) {
            return Err(format!("the target '{f}' is also an input"));
        }
    }
    fn finite<'a>(
        what: &str,
        mut v: impl Iterator<Item = &'a f64>,
    ) -> std::result::Result<(), String> {
        match v.position(|x| !x.is_finite()) {
            Some(i) => Err(format!("{what} {} is not a finite number", i + 1)),
            None => Ok(()),
        }
    }
    finite("weight", weights.iter())?;
    if !intercept.is_finite() {
        return Err(format!("its intercept is {intercept}"));
    }
    finite("input mean", scaler.mean.iter())?;
    if let Some(j) = scaler
        .scale
        .iter()
        .position(|s| !(s.is_finite() && *s > 0.0))
    {
        return Err(format!(
            "the scale of input '{}' is {}, not a positive finite number",
            features[j], scaler.scale[j]
        ));
    }
    let gamma = meta.kernel.gamma;
    if !(gamma.is_finite() && gamma > 0.0) {
        return Err(format!(
            "its kernel's gamma is {gamma}, not a positive number"
        ));
    }
    let (c, eps) = (meta.problem.c, meta.problem.epsilon);
    if !(c.is_finite() && c > 0.0 && eps.is_finite() && eps >= 0.0) {
        return Err(format!("its C ({c}) or epsilon ({eps}) is out of range"));
    }
    for (name, a) in file.arrays.iter().filter(|(n, _)| n.starts_with("map.")) {
        finite(&format!("value of array '{name}', number"), a.iter())?;
    }
    if let Some(cov) = coverage {
        if cov.landmarks.nrows() == 0 {
            return Err("its coverage has no landmarks".into());
        }
        finite("coverage landmark value", cov.landmarks.iter())?;
        if !(0.0..=1.0).contains(&cov.threshold) {
            return Err(format!(
                "its coverage threshold is {}, not a number in [0, 1]",
                cov.threshold
            ));
        }
    }
    Ok(())
}
