//! The `kernlake` command-line tool: parses, wires and reports; the work is done by the
//! library.

use clap::Parser;

fn main() {
    let cli = kernlake::cli::Cli::parse();
    match kernlake::cli::run(cli) {
        Ok(code) => std::process::exit(code),
        Err(e) => {
            eprintln!("kernlake: error: {e}");
            std::process::exit(2);
        }
    }
}
