//! `kernlake inspect`: a model's contract, parameters and training report.

use crate::error::{Error, Result};
use crate::inspect::render_model;
use crate::model::Model;

use super::args::InspectArgs;

/// Runs `kernlake inspect`.
pub fn run(a: InspectArgs) -> Result<i32> {
    let model = Model::load(&a.model)?;
    if a.json {
        let doc = serde_json::json!({
            "columns": model.columns,
            "kernel": model.kernel,
            "map": model.map_spec,
            "features": model.weights.len(),
            "problem": model.problem,
            "intercept": model.intercept,
            "report": model.report,
        });
        let text = serde_json::to_string_pretty(&doc).map_err(|source| Error::Encode {
            what: "the model",
            source,
        })?;
        println!("{text}");
    } else {
        print!("{}", render_model(&model));
    }
    Ok(0)
}
