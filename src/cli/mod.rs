//! The command line: one file per command; errors are rendered here, once.

pub mod args;
pub mod bench_arg;
pub mod check;
pub mod completions;
pub mod exit;
pub mod fit;
pub mod log;
pub mod progress;
pub mod report;
pub mod run;
pub mod table;

pub use exit::Exit;

use args::{Cli, Command};
use clap::Parser;

/// Parses the command line, runs the command, renders any error, and returns the exit status.
pub fn main() -> Exit {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() {
                Exit::BadInput
            } else {
                Exit::Ok
            };
        }
    };
    let verbosity = log::Verbosity::from_flags(cli.quiet, cli.verbose);
    log::init(verbosity);
    let result = match cli.command {
        Command::Run(a) => run::run(a, verbosity),
        Command::Check(a) => check::run(a),
        Command::Fit(a) => fit::run(a),
        Command::Report(a) => report::run(a),
        Command::Completions(a) => Ok(completions::run(a)),
    };
    match result {
        Ok(exit) => exit,
        Err(d) => {
            eprint!("{d}");
            Exit::BadInput
        }
    }
}
