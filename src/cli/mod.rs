//! Command-line interface: argument parsing, wiring and progress display only. Every
//! piece of work is a library call.
//!
//! Layers: this module holds the command list and dispatch; `args` the flag groups that
//! several commands share; each command's module its own flags and run function;
//! `progress` the bars. Commands depend on `args` and `progress`, never on each other.

mod args;
mod audit;
mod demo;
mod fit;
mod inspect;
mod progress;
mod score;
mod tune;

use clap::{Parser, Subcommand};

pub use args::SAFETY;

use crate::error::Result;

const ABOUT: &str =
    "Fit non-linear epsilon-insensitive support vector regression on tables larger \
than memory (Parquet or CSV), through random Fourier, orthogonal or Nyström features.";

/// kernlake: non-linear epsilon-SVR for data lakes.
#[derive(Debug, Parser)]
#[command(name = "kernlake", version, about = ABOUT, after_help = SAFETY, args_override_self = true)]
pub struct Cli {
    /// No progress bars or notes; errors are still printed.
    #[arg(long, short, global = true)]
    pub quiet: bool,
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Train a model on Parquet/CSV sources, streaming them block by block.
    #[command(after_help = SAFETY)]
    Fit(Box<args::FitArgs>),
    /// Show a model's input columns, parameters and training report.
    Inspect(args::InspectArgs),
    /// Generate the cold-store demo data, fit on all months but the last, and report.
    #[command(after_help = SAFETY)]
    Demo(args::DemoArgs),
    /// Score Parquet files with a model: one output file per input, restartable.
    #[command(after_help = SAFETY)]
    Score(score::ScoreArgs),
    /// Compare the exact kernel machine with approximate ones (or a fitted model) on a
    /// sample: accuracy, agreement and kernel error against D.
    Audit(audit::AuditArgs),
    /// Choose gamma, C, epsilon and D by validation on a random sample.
    Tune(tune::TuneArgs),
}

/// Runs one parsed command; returns the process exit code on success.
pub fn run(cli: Cli) -> Result<i32> {
    match cli.command {
        Command::Fit(a) => fit::run(*a, cli.quiet),
        Command::Inspect(a) => inspect::run(a),
        Command::Demo(a) => demo::run(a, cli.quiet),
        Command::Score(a) => score::run(a, cli.quiet),
        Command::Audit(a) => audit::run(a, cli.quiet),
        Command::Tune(a) => tune::run(a, cli.quiet),
    }
}
