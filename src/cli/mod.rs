//! Command-line interface: argument parsing, wiring and progress display only. Every
//! piece of work is a library call.

mod args;
mod audit;
mod demo;
mod fit;
mod inspect;
mod progress;
mod score;
mod tune;

pub use args::{Cli, Command};

use crate::error::Result;

/// The caution printed in `--help` and the README.
pub const SAFETY: &str = "Predictions from a fitted model are an aid for monitoring and planning. \
They are no substitute for protective systems, alarms or interlocks; follow your site's \
procedures and defer to qualified engineers for any decision about equipment.";

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
