//! Flags as typed by a person, and their resolution into validated library options.

use std::path::PathBuf;

use clap::{Args, ValueEnum};

use crate::data::{ColumnSelection, CsvOptions, MissingPolicy};
use crate::error::{Error, Result};
use crate::features::{FourierVariant, Landmarks, MapKind, MapSpec};
use crate::fit::FitOptions;
use crate::kernel::KernelKind;
use crate::settings::defaults;
use crate::solver::blocks::Method;
use crate::solver::dcd::Loss;

pub use crate::settings::SAFETY;

/// Kernel families on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum KernelArg {
    /// exp(-gamma |x-y|²)
    Gaussian,
    /// exp(-gamma |x-y|₁)
    Laplacian,
    /// Matérn ν = 1/2
    Matern12,
    /// Matérn ν = 3/2
    Matern32,
    /// Matérn ν = 5/2
    Matern52,
}

/// Feature maps on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum MapArg {
    /// Random Fourier features (Rahimi & Recht 2007).
    Fourier,
    /// Orthogonal random features, Gaussian kernel only (Yu et al. 2016).
    Orthogonal,
    /// Nyström landmarks from the sample (Williams & Seeger 2001).
    Nystrom,
}

/// Solvers on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum SolverArg {
    /// Newton passes for the squared loss, barrier passes for the linear loss.
    Auto,
    /// Block minimization with dual coordinate descent (Ho & Lin 2012; Yu et al. 2010).
    Dual,
    /// Primal Newton passes with a sampled Hessian (squared loss only).
    Newton,
    /// Primal log-barrier Newton passes, exact Hessian (linear loss only).
    Barrier,
}

impl From<SolverArg> for Method {
    fn from(s: SolverArg) -> Self {
        match s {
            SolverArg::Auto => Method::Auto,
            SolverArg::Dual => Method::Dual,
            SolverArg::Newton => Method::Newton,
            SolverArg::Barrier => Method::Barrier,
        }
    }
}

impl From<KernelArg> for KernelKind {
    fn from(k: KernelArg) -> Self {
        match k {
            KernelArg::Gaussian => KernelKind::Gaussian,
            KernelArg::Laplacian => KernelKind::Laplacian,
            KernelArg::Matern12 => KernelKind::Matern12,
            KernelArg::Matern32 => KernelKind::Matern32,
            KernelArg::Matern52 => KernelKind::Matern52,
        }
    }
}

impl From<MapArg> for MapKind {
    fn from(m: MapArg) -> Self {
        match m {
            MapArg::Fourier => MapKind::Fourier,
            MapArg::Orthogonal => MapKind::Orthogonal,
            MapArg::Nystrom => MapKind::Nystrom,
        }
    }
}

/// The map specification that the map flags describe.
pub fn map_spec(map: MapArg, components: usize, phase: bool, kmeans: bool, seed: u64) -> MapSpec {
    MapSpec {
        kind: map.into(),
        dim: components,
        variant: if phase {
            FourierVariant::CosPhase
        } else {
            FourierVariant::SinCos
        },
        landmarks: if kmeans {
            Landmarks::KMeans
        } else {
            Landmarks::Uniform
        },
        seed,
        ..MapSpec::default()
    }
}

/// Where the sources' columns come from, shared by every command that reads data.
#[derive(Debug, Args, Clone)]
pub struct SourceArgs {
    /// Parquet or CSV files, folders (searched recursively) or glob patterns.
    ///
    /// Object stores: `s3://bucket/prefix/` URLs work the same way (credentials and
    /// endpoint from AWS_ACCESS_KEY_ID, AWS_SECRET_ACCESS_KEY, AWS_REGION,
    /// AWS_ENDPOINT_URL, AWS_ALLOW_HTTP; AWS_SKIP_SIGNATURE=true for anonymous access).
    #[arg(required = true, value_name = "SOURCE")]
    pub sources: Vec<String>,
    /// Input columns, comma separated (default: every numeric column but the target).
    #[arg(long, value_delimiter = ',', value_name = "COLS")]
    pub features: Option<Vec<String>>,
    /// Columns to leave out of the default input set, comma separated.
    #[arg(long, value_delimiter = ',', value_name = "COLS")]
    pub exclude: Vec<String>,
    /// Field separator of CSV sources.
    #[arg(long, default_value = ",", value_name = "CHAR")]
    pub delimiter: char,
    /// What to do with a row holding a null, NaN or infinity in a chosen column.
    #[arg(long, value_enum, default_value = "skip")]
    pub missing: MissingArg,
}

/// Missing-value policies on the command line.
#[derive(Debug, Clone, Copy, ValueEnum)]
pub enum MissingArg {
    /// Leave the row out and count it per column.
    Skip,
    /// Stop at the first one, naming file, row and column.
    Fail,
}

/// `kernlake fit`.
#[derive(Debug, Args)]
pub struct FitArgs {
    #[command(flatten)]
    pub src: SourceArgs,
    /// The column to predict.
    #[arg(long, value_name = "COL")]
    pub target: String,
    /// Where to write the model (a path or an `s3://bucket/key` URL).
    #[arg(long, short = 'o', value_name = "FILE", default_value = "model.klm")]
    pub out: PathBuf,
    /// Also write the training report as JSON here.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    #[command(flatten)]
    pub model: ModelArgs,
}

/// Kernel, map and solver settings.
#[derive(Debug, Args, Clone)]
pub struct ModelArgs {
    /// Kernel family.
    #[arg(long, value_enum, default_value = "gaussian")]
    pub kernel: KernelArg,
    /// Kernel width (default: 1 / median squared distance of standardized sample rows).
    #[arg(long, allow_negative_numbers = true)]
    pub gamma: Option<f64>,
    /// Feature map.
    #[arg(long, value_enum, default_value = "fourier")]
    pub map: MapArg,
    /// The map's dimension D: mapped features (landmarks for Nyström).
    #[arg(long = "dim", short = 'D', default_value_t = defaults::DIM)]
    pub dim: usize,
    /// Old spelling of --dim, refused with a pointer.
    #[arg(long = "components", hide = true, value_parser = renamed("--components", "--dim"))]
    pub old_components: Option<usize>,
    /// Fourier features as cos + random phase instead of sin/cos pairs.
    #[arg(long)]
    pub phase: bool,
    /// Nyström landmarks as k-means centres instead of a uniform sample.
    #[arg(long)]
    pub kmeans: bool,
    /// Penalty C in target units (default: Cherkassky & Ma 2004).
    #[arg(long, allow_negative_numbers = true)]
    pub c: Option<f64>,
    /// Tube half-width in target units (default: Cherkassky & Ma 2004).
    #[arg(long, allow_negative_numbers = true)]
    pub epsilon: Option<f64>,
    /// Loss outside the tube: linear (l1) or squared (l2).
    #[arg(long, default_value = "l2", value_parser = ["l1", "l2"])]
    pub loss: String,
    /// Solver for the linear model in feature space.
    #[arg(long, value_enum, default_value = "auto")]
    pub solver: SolverArg,
    /// Newton solver: rows sampled each pass to form the Hessian, chosen by their
    /// estimated leverage after the first pass (default: 32 per feature, at least 16384).
    #[arg(long)]
    pub hessian_rows: Option<usize>,
    /// Largest number of passes over the data.
    #[arg(long, default_value_t = defaults::EPOCHS)]
    pub epochs: usize,
    /// Stop when the relative duality gap is at most this.
    #[arg(long, default_value_t = defaults::TOL, allow_negative_numbers = true)]
    pub tol: f64,
    /// Dual solver: coordinate-descent sweeps over each block before the next.
    #[arg(long, default_value_t = defaults::SWEEPS)]
    pub sweeps: usize,
    /// Seed for every random choice.
    #[arg(long, default_value_t = defaults::SEED)]
    pub seed: u64,
    /// Threads for reading, mapping and solving (0 = one per processor; at most the
    /// processors unless --oversubscribe).
    #[arg(long, default_value_t = defaults::THREADS)]
    pub threads: usize,
    /// Allow --threads above the number of processors.
    #[arg(long)]
    pub oversubscribe: bool,
    /// Memory for mapped blocks kept between epochs, e.g. 512MiB, 2GiB.
    #[arg(long, default_value = "1GiB", value_parser = parse_bytes)]
    pub memory: usize,
    /// Share of rows held out for validation.
    #[arg(long, default_value_t = defaults::HOLDOUT, allow_negative_numbers = true)]
    pub holdout: f64,
    /// Epochs without a holdout improvement before stopping (0 = never).
    #[arg(long, default_value_t = defaults::PATIENCE)]
    pub patience: usize,
    /// Rows per block.
    #[arg(long, default_value_t = defaults::BLOCK_ROWS)]
    pub block_rows: usize,
    /// Rows in the random sample (bandwidth, landmarks, noise estimate).
    #[arg(long, default_value_t = defaults::SAMPLE)]
    pub sample: usize,
}

/// A value parser for a flag that was renamed: always refuses, naming the new flag.
pub fn renamed(
    old: &'static str,
    new: &'static str,
) -> impl Fn(&str) -> std::result::Result<usize, String> + Clone + Send + Sync + 'static {
    move |_| Err(format!("{old} was renamed; use {new}"))
}

/// `kernlake inspect`.
#[derive(Debug, Args)]
pub struct InspectArgs {
    /// The model file.
    pub model: PathBuf,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

/// `kernlake demo`.
#[derive(Debug, Args)]
pub struct DemoArgs {
    /// Rows of demo data to generate.
    #[arg(long, default_value_t = 1_000_000)]
    pub rows: u64,
    /// Folder for the data, the model and the report (created).
    #[arg(long, default_value = "demo-out")]
    pub dir: PathBuf,
    /// Only generate the data, do not fit.
    #[arg(long)]
    pub data_only: bool,
    /// Seed for the data and the fit.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// The map's dimension D.
    #[arg(long = "dim", short = 'D', default_value_t = 512)]
    pub dim: usize,
    /// Largest number of passes over the data.
    #[arg(long, default_value_t = 30)]
    pub epochs: usize,
    /// Threads (0 = all cores).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
}

/// Parses sizes such as `1GiB`, `512MiB`, `800MB` or a plain byte count.
pub fn parse_bytes(s: &str) -> std::result::Result<usize, String> {
    let t = s.trim();
    let split = t
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(t.len());
    let (num, unit) = t.split_at(split);
    let v: f64 = num
        .parse()
        .map_err(|_| format!("'{s}' is not a size such as 512MiB or 2GiB"))?;
    let mult = match unit.trim().to_ascii_lowercase().as_str() {
        "" | "b" => 1.0,
        "k" | "kb" => 1e3,
        "kib" => 1024.0,
        "m" | "mb" => 1e6,
        "mib" => 1024.0 * 1024.0,
        "g" | "gb" => 1e9,
        "gib" => 1024.0 * 1024.0 * 1024.0,
        _ => return Err(format!("'{s}' has an unknown unit; use B, KiB, MiB or GiB")),
    };
    Ok((v * mult) as usize)
}

impl SourceArgs {
    /// The column selection these flags ask for.
    pub fn selection(&self, target: Option<&str>) -> ColumnSelection {
        ColumnSelection {
            target: target.map(str::to_string),
            features: self.features.clone(),
            exclude: self.exclude.clone(),
        }
    }

    /// CSV options.
    pub fn csv(&self) -> Result<CsvOptions> {
        if !self.delimiter.is_ascii() {
            return Err(Error::invalid(
                "delimiter",
                "must be a single ASCII character",
            ));
        }
        Ok(CsvOptions {
            delimiter: self.delimiter as u8,
        })
    }

    /// Missing-value policy.
    pub fn missing(&self) -> MissingPolicy {
        match self.missing {
            MissingArg::Skip => MissingPolicy::Skip,
            MissingArg::Fail => MissingPolicy::Fail,
        }
    }
}

impl ModelArgs {
    /// Resolves the flags into validated fit options (before any data is read).
    pub fn options(&self) -> Result<FitOptions> {
        let kernel: KernelKind = self.kernel.into();
        let map = map_spec(self.map, self.dim, self.phase, self.kmeans, self.seed);
        FitOptions {
            kernel,
            gamma: self.gamma,
            map,
            c: self.c,
            epsilon: self.epsilon,
            loss: if self.loss == "l1" {
                Loss::L1
            } else {
                Loss::L2
            },
            method: self.solver.into(),
            hessian_rows: self.hessian_rows,
            tol: self.tol,
            max_epochs: self.epochs,
            sweeps_per_block: self.sweeps,
            shrinking: true,
            seed: self.seed,
            threads: self.threads,
            oversubscribe: self.oversubscribe,
            block_rows: self.block_rows,
            memory_bytes: self.memory,
            holdout: self.holdout,
            patience: self.patience,
            sample_rows: self.sample,
        }
        .validated()
    }
}

/// Checks before any data is read that a local output path can be written (its folder
/// exists and takes files, and it is not a folder). An object-store URL is checked when
/// it is written: a bucket answers only to a request.
pub fn check_output(path: &std::path::Path) -> crate::error::Result<()> {
    if crate::store::is_remote(path) {
        return Ok(());
    }
    crate::atomic::check_writable(path)
}
