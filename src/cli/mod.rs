//! The command line: one file per command; errors are rendered here, once.

pub mod args;
pub mod bench_arg;
pub mod check;
pub mod completions;
pub mod csv_file;
pub mod exit;
pub mod export;
pub mod fit;
pub mod fleet;
pub mod fleet_serve;
pub mod log;
pub mod ota;
pub mod pairs;
pub mod path_delay;
pub mod progress;
pub mod report;
pub mod resume;
pub mod run;
pub mod run_date;
pub mod run_station;
pub mod sim_fleet;
pub mod sim_serve;
pub mod store;
pub mod store_ledger;
pub mod table;
pub mod watch;

pub use exit::Exit;

use args::{Cli, Command, SimCommand};
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
    let mut verbosity = log::Verbosity::from_flags(cli.quiet, cli.verbose);
    // A fleet is hundreds of runs: their stage-by-stage news would bury its warnings.
    if matches!(cli.command, Command::Sim(SimCommand::Fleet(_))) && !cli.verbose {
        verbosity = log::Verbosity::Quiet;
    }
    log::init(verbosity);
    let result = match cli.command {
        Command::Run(a) => run::run(a, verbosity),
        Command::Check(a) => check::run(a),
        Command::Resume(a) => resume::run(a, verbosity),
        Command::Fit(a) => fit::run(a),
        Command::Sim(SimCommand::Serve(a)) => sim_serve::run(a),
        Command::Sim(SimCommand::Fleet(a)) => sim_fleet::run(a),
        Command::Pairs(a) => pairs::run(a),
        Command::PathDelay(a) => path_delay::run(a),
        Command::Ota(a) => ota::run(a),
        Command::Export(a) => export::run(a),
        Command::Report(a) => report::run(a),
        Command::Watch(a) => watch::run(a),
        Command::Completions(a) => Ok(completions::run(a)),
        Command::Store(c) => store::run(c),
        Command::Fleet(c) => fleet::run(c),
    };
    match result {
        Ok(exit) => exit,
        Err(d) => {
            eprint!("{d}");
            Exit::BadInput
        }
    }
}
