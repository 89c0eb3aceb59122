//! `kernlake audit`: draw a seeded sample with the survey pass, then compare the exact
//! kernel machine with approximate ones (or with a fitted model) on it.

use std::io::Write as _;
use std::path::{Path, PathBuf};

use clap::Args;

use crate::atomic::write_atomic;
use crate::audit::{
    audit_model, audit_with_progress, plot::render_svg, render_audit, render_model_audit,
    AuditOptions, Loss, ModelAuditOptions, MIN_ROWS,
};
use crate::data::{
    discover, resolve_columns, survey, ColumnSelection, Survey, SurveySettings, TableReader,
};
use crate::error::{Error, Result};
use crate::features::{FourierVariant, MapKind};
use crate::kernel::KernelKind;
use crate::model::Model;

use super::args::{parse_bytes, KernelArg, MapArg, SourceArgs};
use super::progress::{count_bar, rows_bar};

/// `kernlake audit`.
#[derive(Debug, Args)]
pub struct AuditArgs {
    #[command(flatten)]
    pub src: SourceArgs,
    /// The column to predict (with --model: defaults to the model's target).
    #[arg(long, value_name = "COL")]
    pub target: Option<String>,
    /// Audit this fitted model instead of fitting approximate machines.
    #[arg(long, value_name = "FILE")]
    pub model: Option<PathBuf>,
    /// Kernel family.
    #[arg(long, value_enum, default_value = "gaussian")]
    pub kernel: KernelArg,
    /// Loss beyond the tube for every machine: squared (l2, as `kernlake fit` by default)
    /// or linear (l1, the classic epsilon-SVR). With --model: the model's own loss.
    #[arg(long, value_parser = ["l1", "l2"])]
    pub loss: Option<String>,
    /// Kernel width (default: 1 / median squared distance of standardized sample rows).
    #[arg(long, allow_negative_numbers = true)]
    pub gamma: Option<f64>,
    /// Penalty C: in target units for the linear loss, unit-free for the squared loss
    /// (default: Cherkassky & Ma 2004, divided by the target's sd for the squared loss).
    #[arg(long, allow_negative_numbers = true)]
    pub c: Option<f64>,
    /// Tube half-width in target units (default: Cherkassky & Ma 2004).
    #[arg(long, allow_negative_numbers = true)]
    pub epsilon: Option<f64>,
    /// Feature maps to compare, comma separated (default: all that apply to the kernel).
    #[arg(long, value_enum, value_delimiter = ',')]
    pub maps: Vec<MapArg>,
    /// Feature dimensions D to try, comma separated.
    #[arg(
        long = "dims",
        short = 'D',
        value_delimiter = ',',
        default_value = "256,512,1024,2048,4096"
    )]
    pub dims: Vec<usize>,
    /// Former spelling of --dims, refused with a pointer to it.
    #[arg(long = "components", hide = true, value_name = "LIST")]
    pub old_components: Option<String>,
    /// Fourier features as cos + random phase instead of sin/cos pairs.
    #[arg(long)]
    pub phase: bool,
    /// Largest RMS difference from the exact machine, as a share of the target's
    /// standard deviation, for a D to be recommended.
    #[arg(long, default_value_t = 0.02, allow_negative_numbers = true)]
    pub agree: f64,
    /// Share of the sample used to fit; the rest is the check part.
    #[arg(long, default_value_t = 0.8, allow_negative_numbers = true)]
    pub split: f64,
    /// Memory for the exact solver's kernel rows, e.g. 512MiB, 2GiB.
    #[arg(long, default_value = "1GiB", value_parser = parse_bytes)]
    pub cache: usize,
    /// Rows in the random sample (at least 50).
    #[arg(long, default_value_t = 10_000)]
    pub sample: usize,
    /// Seed for the sample, the split and the maps.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Threads (0 = all cores); the approximate machines are fitted this many at a time
    /// (each holds its mapped sample in memory).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Allow --threads above the number of processors.
    #[arg(long)]
    pub oversubscribe: bool,
    /// Write the report as JSON to this file ('-' for standard output).
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Write an SVG plot of agreement and RMSE against D to this file.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
}

/// Runs `kernlake audit`.
pub fn run(a: AuditArgs, quiet: bool) -> Result<i32> {
    if a.old_components.is_some() {
        return Err(Error::invalid(
            "--components",
            "the flag is now -D/--dims (the list of feature dimensions to try)",
        ));
    }
    if a.sample < MIN_ROWS {
        return Err(Error::invalid(
            "--sample",
            format!(
                "an audit needs at least {MIN_ROWS} sample rows (most to fit, the rest to \
                 check), got {}",
                a.sample
            ),
        ));
    }
    if a.model.is_some() && a.loss.is_some() {
        return Err(Error::invalid(
            "--loss",
            "does not apply with --model: the exact machine uses the model's own loss",
        ));
    }
    for path in [&a.json, &a.plot].into_iter().flatten() {
        super::args::check_output(path)?;
    }
    crate::settings::check_threads(a.threads, a.oversubscribe)?;
    crate::audit::check_memory(&a.dims, a.sample, a.threads)?;
    let model = a.model.as_deref().map(Model::load).transpose()?;
    let target = match (&a.target, &model) {
        (Some(t), _) => t.clone(),
        (None, Some(m)) => m.columns.target.clone().ok_or_else(|| {
            Error::invalid(
                "--target",
                "the model names no target column; give --target",
            )
        })?,
        (None, None) => return Err(Error::invalid("--target", "give the column to predict")),
    };
    let csv = a.src.csv()?;
    let files = discover(&a.src.sources)?;
    let selection = match &model {
        Some(m) => ColumnSelection {
            target: Some(target.clone()),
            features: Some(m.columns.features.clone()),
            exclude: Vec::new(),
        },
        None => a.src.selection(Some(&target)),
    };
    let columns = resolve_columns(&files, &selection, &csv)?;
    let known_rows: u64 = files.iter().filter_map(|f| f.rows).sum();
    let reader = TableReader::new(files, columns)
        .with_missing(a.src.missing())
        .with_csv(csv);
    let bar = rows_bar(quiet, known_rows, "sample");
    let settings = SurveySettings {
        sample_rows: a.sample,
        seed: a.seed,
        threads: a.threads,
    };
    let s = survey(&reader, &settings, &|rows| bar.set_position(rows))?;
    bar.finish_and_clear();
    let short = ((s.rows_used as usize) < a.sample).then(|| {
        format!(
            "the data hold {} usable row(s), fewer than the {} asked for; auditing on all of them",
            s.rows_used, a.sample
        )
    });
    if let (Some(msg), false) = (&short, quiet) {
        eprintln!("kernlake: {msg}");
    }
    let (x, y) = sample_arrays(&s, model.is_none())?;
    let (text, json) = match &model {
        Some(m) => {
            let opts = ModelAuditOptions {
                split: a.split,
                cache_bytes: a.cache,
                seed: a.seed,
                threads: a.threads,
                oversubscribe: a.oversubscribe,
                ..ModelAuditOptions::default()
            };
            let mut r = audit_model(m, x.view(), y.view(), &opts)?;
            r.notes.extend(short);
            if a.plot.is_some() && !quiet {
                eprintln!(
                    "kernlake: --plot draws D lists; a model audit has one D, no plot written"
                );
            }
            (render_model_audit(&r), to_json(&r)?)
        }
        None => {
            let opts = AuditOptions {
                kernel: KernelKind::from(a.kernel),
                loss: if a.loss.as_deref() == Some("l1") {
                    Loss::L1
                } else {
                    Loss::L2
                },
                gamma: a.gamma,
                c: a.c,
                epsilon: a.epsilon,
                maps: a.maps.iter().copied().map(MapKind::from).collect(),
                dims: a.dims.clone(),
                variant: if a.phase {
                    FourierVariant::CosPhase
                } else {
                    FourierVariant::SinCos
                },
                agree: a.agree,
                split: a.split,
                cache_bytes: a.cache,
                seed: a.seed,
                threads: a.threads,
                oversubscribe: a.oversubscribe,
                ..AuditOptions::default()
            };
            let bar = count_bar(quiet, "fit", "machines");
            let mut r = audit_with_progress(x.view(), y.view(), &opts, &|done, total| {
                bar.set_length(total as u64);
                bar.set_position(done as u64);
            })?;
            bar.finish_and_clear();
            r.notes.extend(short);
            if let Some(path) = &a.plot {
                write_file(path, render_svg(&r).as_bytes())?;
            }
            (render_audit(&r), to_json(&r)?)
        }
    };
    let json_to_stdout = a.json.as_deref() == Some(Path::new("-"));
    match &a.json {
        Some(_) if json_to_stdout => println!("{json}"),
        Some(path) => write_file(path, json.as_bytes())?,
        None => {}
    }
    if !quiet && !json_to_stdout {
        print!("{text}");
    } else if !quiet {
        eprint!("{text}");
    }
    Ok(0)
}

/// The survey's sample as arrays, dropping constant input columns for a fresh audit
/// (a model audit keeps the model's columns).
fn sample_arrays(
    s: &Survey,
    drop_constant: bool,
) -> Result<(ndarray::Array2<f64>, ndarray::Array1<f64>)> {
    let y = s
        .sample_y
        .clone()
        .ok_or_else(|| Error::NoRows("no target column was read".into()))?;
    let keep: Vec<usize> = (0..s.features.len())
        .filter(|&j| !(drop_constant && s.constant_features.contains(&s.features[j].name)))
        .collect();
    if keep.is_empty() {
        return Err(Error::NoRows("every input column is constant".into()));
    }
    Ok((s.sample_x.select(ndarray::Axis(1), &keep), y))
}

fn to_json<T: serde::Serialize>(v: &T) -> Result<String> {
    serde_json::to_string_pretty(v).map_err(|source| Error::Encode {
        what: "the audit report",
        source,
    })
}

fn write_file(path: &Path, bytes: &[u8]) -> Result<()> {
    write_atomic(path, |f| f.write_all(bytes).map_err(|e| Error::io(path, e)))
}
