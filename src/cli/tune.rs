//! `kernlake tune`: survey the sources for a random sample, search gamma, C, epsilon and
//! D by validation on it, print the ranked candidates and a ready `kernlake fit` command
//! (or run that fit), and optionally write JSON and an SVG heat map.

use std::path::{Path, PathBuf};

use clap::Args;
use ndarray::Axis;

use crate::atomic::write_atomic;
use crate::data::{discover, resolve_columns, survey, SurveySettings, TableReader};
use crate::error::{Error, Result};
use crate::features::MapSpec;
use crate::fit::{FitOptions, Fitter};
use crate::kernel::KernelKind;
use crate::report::render_training;
use crate::solver::dcd::Loss;
use crate::tune::{heatmap_svg, render_tune, tune, TuneOptions, TuneReport, Validation};

use super::args::{KernelArg, MapArg, SourceArgs};
use super::progress::{rows_bar, EpochBars};

/// `kernlake tune`.
#[derive(Debug, Args)]
pub struct TuneArgs {
    #[command(flatten)]
    pub src: SourceArgs,
    /// The column to predict.
    #[arg(long, value_name = "COL")]
    pub target: String,
    /// Rows in the random sample the search validates on.
    #[arg(long, default_value_t = 20_000)]
    pub sample: usize,
    /// Folds of cross-validation.
    #[arg(long, default_value_t = 3)]
    pub folds: usize,
    /// Validate on one held-out share of the sample instead of folds.
    #[arg(long, value_name = "SHARE", allow_negative_numbers = true)]
    pub holdout: Option<f64>,
    /// Multipliers of the median-heuristic gamma, comma separated.
    #[arg(
        long,
        value_delimiter = ',',
        allow_negative_numbers = true,
        default_value = "0.25,0.5,1,2,4"
    )]
    pub gamma_factors: Vec<f64>,
    /// Multipliers of the Cherkassky & Ma C, comma separated.
    #[arg(
        long,
        value_delimiter = ',',
        allow_negative_numbers = true,
        default_value = "0.1,0.316,1,3.16,10"
    )]
    pub c_factors: Vec<f64>,
    /// Multipliers of the Cherkassky & Ma epsilon, comma separated.
    #[arg(
        long,
        value_delimiter = ',',
        allow_negative_numbers = true,
        default_value = "0.25,1,4"
    )]
    pub epsilon_factors: Vec<f64>,
    /// Rows of the sample on which the exact kernel machine is cross-validated (its cost
    /// grows like the cube of this).
    #[arg(long, default_value_t = 1_000)]
    pub exact_rows: usize,
    /// Candidates the search may evaluate; the grid grows past an edge holding the
    /// lowest error only within this budget.
    #[arg(long, default_value_t = 150)]
    pub max_fits: usize,
    /// Candidates of the second stage, cross-validated on every sample row around the
    /// exact stage's lowest (squared loss; 0 skips it).
    #[arg(long, default_value_t = 21)]
    pub refine_fits: usize,
    /// Rows of the sample the second stage validates on.
    #[arg(long, default_value_t = 10_000)]
    pub refine_rows: usize,
    /// D of the map the second stage scores on when a fold's training rows exceed it
    /// (else the exact machine; its cost grows like rows × D²).
    #[arg(long, default_value_t = 1024)]
    pub refine_dim: usize,
    /// Epoch limit of the linear-loss fits on the map when choosing D.
    #[arg(long, default_value_t = 50)]
    pub epochs: usize,
    /// Coordinate-descent sweeps per epoch (linear loss, when choosing D).
    #[arg(long, default_value_t = 10)]
    pub sweeps: usize,
    /// Duality-gap tolerance of the linear-loss fits when choosing D.
    #[arg(long, default_value_t = 1e-3)]
    pub tol: f64,
    /// The first D (mapped features) tried; D doubles from here.
    #[arg(long = "dim", short = 'D', default_value_t = 256)]
    pub dim: usize,
    /// Largest D tried when doubling.
    #[arg(long, default_value_t = 4096)]
    pub max_dim: usize,
    /// D agrees with the exact machine when its validation RMSE is at most this share
    /// above the exact machine's.
    #[arg(long, default_value_t = 0.01)]
    pub dim_tol: f64,
    /// Old spelling of --dim, refused.
    #[arg(long = "components", hide = true, value_name = "D")]
    pub old_components: Option<String>,
    /// Old spelling of --max-dim, refused.
    #[arg(long = "max-components", hide = true, value_name = "D")]
    pub old_max_components: Option<String>,
    /// Old spelling of --dim-tol, refused.
    #[arg(long = "components-tol", hide = true, value_name = "SHARE")]
    pub old_components_tol: Option<String>,
    /// Kernel family.
    #[arg(long, value_enum, default_value = "gaussian")]
    pub kernel: KernelArg,
    /// Feature map. When a random map (fourier, orthogonal) does not agree with the exact
    /// machine at any D up to --max-dim, Nyström maps are tried too (see --keep-map).
    #[arg(long, value_enum, default_value = "fourier")]
    pub map: MapArg,
    /// Keep --map even when it does not agree with the exact machine at --max-dim,
    /// instead of trying Nyström maps (which cost about D² operations a row to fit).
    #[arg(long)]
    pub keep_map: bool,
    /// Fourier features as cos + random phase instead of sin/cos pairs.
    #[arg(long)]
    pub phase: bool,
    /// Nyström landmarks as k-means centres instead of a uniform sample.
    #[arg(long)]
    pub kmeans: bool,
    /// Loss outside the tube: linear (l1) or squared (l2).
    #[arg(long, default_value = "l2", value_parser = ["l1", "l2"])]
    pub loss: String,
    /// Seed for every random choice.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// Threads (0 = all cores; at most the processors unless --oversubscribe).
    #[arg(long, default_value_t = 0)]
    pub threads: usize,
    /// Allow --threads above the number of processors.
    #[arg(long)]
    pub oversubscribe: bool,
    /// Candidates shown in the ranked table.
    #[arg(long, default_value_t = 15)]
    pub top: usize,
    /// Write the full search report as JSON here.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Write an SVG heat map of validation error over gamma × C here.
    #[arg(long, value_name = "FILE")]
    pub heatmap: Option<PathBuf>,
    /// Fit on all the data with the chosen values and write the model here.
    #[arg(long, value_name = "MODEL")]
    pub fit: Option<PathBuf>,
}

impl TuneArgs {
    fn kernel(&self) -> KernelKind {
        self.kernel.into()
    }

    fn map_spec(&self, components: usize) -> MapSpec {
        super::args::map_spec(self.map, components, self.phase, self.kmeans, self.seed)
    }

    /// The map the search chose: the options' map with the chosen family and D.
    fn chosen_spec(&self, r: &TuneReport) -> MapSpec {
        MapSpec {
            kind: r.chosen_map,
            ..self.map_spec(r.chosen_dim)
        }
    }

    fn loss(&self) -> Loss {
        if self.loss == "l1" {
            Loss::L1
        } else {
            Loss::L2
        }
    }

    /// Refuses the old spellings of the D flags, naming the new ones.
    fn check_names(&self) -> Result<()> {
        let old = [
            (&self.old_components, "--components", "-D/--dim"),
            (&self.old_max_components, "--max-components", "--max-dim"),
            (&self.old_components_tol, "--components-tol", "--dim-tol"),
        ];
        for (v, was, now) in old {
            if v.is_some() {
                return Err(Error::invalid(
                    was,
                    format!("this flag is now spelled {now}"),
                ));
            }
        }
        Ok(())
    }

    /// The search options these flags ask for (`rows` = rows the full fit will use).
    fn options(&self, rows: Option<u64>) -> TuneOptions {
        TuneOptions {
            kernel: self.kernel(),
            map: self.map_spec(self.dim),
            loss: self.loss(),
            gamma_factors: self.gamma_factors.clone(),
            c_factors: self.c_factors.clone(),
            epsilon_factors: self.epsilon_factors.clone(),
            validation: match self.holdout {
                Some(h) => Validation::Holdout(h),
                None => Validation::KFold(self.folds),
            },
            exact_rows: self.exact_rows,
            max_fits: self.max_fits,
            refine_fits: self.refine_fits,
            refine_rows: self.refine_rows,
            refine_dim: self.refine_dim,
            max_epochs: self.epochs,
            sweeps_per_epoch: self.sweeps,
            tol: self.tol,
            dim: self.dim,
            max_dim: self.max_dim,
            dim_tol: self.dim_tol,
            map_fallback: !self.keep_map,
            seed: self.seed,
            rows_total: rows,
        }
    }

    /// The fit's options with the chosen values (everything else the fit's defaults).
    fn fit_options(&self, r: &TuneReport) -> FitOptions {
        FitOptions {
            kernel: self.kernel(),
            gamma: Some(r.best.gamma),
            map: self.chosen_spec(r),
            c: Some(r.best.c),
            epsilon: Some(r.best.epsilon),
            loss: self.loss(),
            seed: self.seed,
            threads: self.threads,
            ..FitOptions::default()
        }
    }

    /// The arguments of `kernlake fit` (after the command name) with the chosen values.
    fn fit_args(&self, r: &TuneReport) -> Vec<String> {
        let mut v: Vec<String> = self.src.sources.clone();
        let mut flag = |k: &str, val: String| {
            v.push(k.to_string());
            v.push(val);
        };
        flag("--target", self.target.clone());
        if let Some(f) = &self.src.features {
            flag("--features", f.join(","));
        }
        if !self.src.exclude.is_empty() {
            flag("--exclude", self.src.exclude.join(","));
        }
        if self.src.delimiter != ',' {
            flag("--delimiter", self.src.delimiter.to_string());
        }
        flag("--kernel", format!("{:?}", self.kernel).to_lowercase());
        flag("--map", format!("{:?}", r.chosen_map).to_lowercase());
        flag("-D", r.chosen_dim.to_string());
        flag("--loss", self.loss.clone());
        flag("--gamma", format!("{:e}", r.best.gamma));
        flag("--c", format!("{:e}", r.best.c));
        flag("--epsilon", format!("{:e}", r.best.epsilon));
        flag("--seed", self.seed.to_string());
        if self.phase {
            v.push("--phase".into());
        }
        if self.kmeans {
            v.push("--kmeans".into());
        }
        v
    }
}

/// Quotes a word for a POSIX shell when it holds anything beyond plain characters.
fn shell_word(s: &str) -> String {
    if !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "-_./=:,*+".contains(c))
    {
        s.to_string()
    } else {
        format!("'{}'", s.replace('\'', "'\\''"))
    }
}

fn write_text(path: &Path, text: &[u8]) -> Result<()> {
    write_atomic(path, |f| {
        std::io::Write::write_all(f, text).map_err(|e| Error::io(path, e))
    })
}

/// Runs `kernlake tune`.
pub fn run(a: TuneArgs, quiet: bool) -> Result<i32> {
    // Settings are checked before any data is read.
    a.check_names()?;
    a.options(None).validate()?;
    crate::settings::check_threads(a.threads, a.oversubscribe)?;
    if a.sample < crate::settings::MIN_SAMPLE {
        return Err(Error::invalid(
            "sample",
            format!(
                "must be at least {} rows (the search validates on them), got {}",
                crate::settings::MIN_SAMPLE,
                a.sample
            ),
        ));
    }
    for path in [&a.json, &a.heatmap, &a.fit].into_iter().flatten() {
        super::args::check_output(path)?;
    }
    let csv = a.src.csv()?;
    let files = discover(&a.src.sources)?;
    let columns = resolve_columns(&files, &a.src.selection(Some(&a.target)), &csv)?;
    let known_rows: u64 = files.iter().filter_map(|f| f.rows).sum();
    let reader = TableReader::new(files, columns)
        .with_missing(a.src.missing())
        .with_csv(csv);
    let settings = SurveySettings {
        sample_rows: a.sample,
        seed: a.seed,
        threads: a.threads,
    };
    let bar = rows_bar(quiet, known_rows, "survey");
    let s = survey(&reader, &settings, &|rows| bar.set_position(rows))?;
    bar.finish_and_clear();
    let sample_y = s.sample_y.clone().ok_or_else(|| {
        Error::NoRows("no target column was chosen (give the target column's name)".into())
    })?;
    let keep: Vec<usize> = (0..s.features.len())
        .filter(|&j| !s.constant_features.contains(&s.features[j].name))
        .collect();
    if keep.is_empty() {
        return Err(Error::NoRows("every input column is constant".into()));
    }
    let sample_x = s.sample_x.select(Axis(1), &keep);
    if !quiet {
        eprintln!(
            "kernlake: {} rows, sample of {} rows, {} input column(s), target '{}'",
            s.rows_used,
            sample_x.nrows(),
            keep.len(),
            a.target
        );
    }
    let opts = a.options(Some(s.rows_used));
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(a.threads)
        .build()
        .map_err(|e| Error::invalid("threads", e.to_string()))?;
    let report = pool.install(|| tune(sample_x.view(), sample_y.view(), &opts))?;

    print!("{}", render_tune(&report, a.top));
    if let Some(path) = &a.json {
        let json = serde_json::to_vec_pretty(&report).map_err(|source| Error::Encode {
            what: "the tuning report",
            source,
        })?;
        write_text(path, &json)?;
    }
    if let Some(path) = &a.heatmap {
        write_text(path, heatmap_svg(&report).as_bytes())?;
    }
    let args = a.fit_args(&report);
    let words: Vec<String> = args.iter().map(|w| shell_word(w)).collect();
    println!(
        "\nto fit with these values:\n  kernlake fit {}",
        words.join(" ")
    );
    if let Some(out) = &a.fit {
        // The same fit as the printed command line, called with its options.
        let opts = a.fit_options(&report);
        let reader = reader.with_batch_rows(opts.block_rows);
        let survey_bar = rows_bar(quiet, known_rows, "survey");
        let epochs = EpochBars::new(quiet, known_rows);
        let model = Fitter::from_options(opts)
            .fit_files(&reader, &epochs, &|rows| survey_bar.set_position(rows))?;
        survey_bar.finish_and_clear();
        model.save(out)?;
        if !quiet {
            print!("{}", render_training(&model.report));
            println!("model written to {}", out.display());
        }
    }
    Ok(0)
}
