//! The command line as typed: parsed by clap, no I/O.

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

/// Calibrate the group delay of Wi-Fi ranging devices per receive gain state.
#[derive(Debug, Parser)]
#[command(name = "taucal", version, about, propagate_version = true)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// Commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run a recipe on a bench and fit the calibration table.
    #[command(
        after_help = "Examples:\n  taucal run recipes/rx-gain-sweep.toml\n  taucal run recipes/rx-gain-sweep.toml --seed 7 --set bursts_per_point=8\n  taucal run my-recipe.toml --bench benches/line-4.toml --out runs/unit-0042"
    )]
    Run(RunArgs),
    /// Validate a recipe against a bench and print its plan; runs nothing.
    #[command(
        after_help = "Example:\n  taucal check recipes/rx-gain-sweep.toml --bench recipes/benches/sim-demo.toml"
    )]
    Check(CheckArgs),
    /// Fit a calibration table from an exchanges file.
    #[command(
        after_help = "Example:\n  taucal fit runs/20261202T101500Z-rx-gain-sweep/exchanges.csv --out /tmp/refit"
    )]
    Fit(FitArgs),
    /// Solve each unit's delay from pairwise sums (no golden reference needed).
    #[command(
        after_help = "PAIRS.csv has the columns unit_a,unit_b,sum_ps,se_ps (other columns are ignored).\nThe pair graph needs an odd cycle in every connected group: three units measured pairwise at least.\n\nExample:\n  taucal pairs line-4-pairs.csv > unit-delays.csv"
    )]
    Pairs(PairsArgs),
}

/// Bench selection shared by the commands.
#[derive(Debug, Args)]
pub struct BenchArg {
    /// Bench file; without it, the built-in simulated demo bench.
    #[arg(long, value_name = "FILE")]
    pub bench: Option<PathBuf>,
}

/// `taucal run`.
#[derive(Debug, Args)]
pub struct RunArgs {
    /// Recipe file.
    pub recipe: PathBuf,
    #[command(flatten)]
    pub bench: BenchArg,
    /// Run directory (default runs/<UTC time>-<recipe name>).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Seed of the simulated bench (overrides the bench file's).
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    /// Override a recipe variable.
    #[arg(long = "set", value_name = "NAME=VALUE")]
    pub set: Vec<String>,
    /// Keep wall-clock pace on a simulated bench instead of virtual time.
    #[arg(long)]
    pub realtime: bool,
}

/// `taucal check`.
#[derive(Debug, Args)]
pub struct CheckArgs {
    /// Recipe file.
    pub recipe: PathBuf,
    #[command(flatten)]
    pub bench: BenchArg,
    /// Override a recipe variable.
    #[arg(long = "set", value_name = "NAME=VALUE")]
    pub set: Vec<String>,
}

/// `taucal fit`.
#[derive(Debug, Args)]
pub struct FitArgs {
    /// Exchanges file (the contract columns of exchanges.csv).
    pub exchanges: PathBuf,
    #[command(flatten)]
    pub bench: BenchArg,
    /// Write caltable.csv into this directory instead of printing it.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Outlier rejection threshold in scaled MADs (the recipe's [fit] reject_mad).
    #[arg(long, value_name = "K", default_value_t = crate::recipe::plan::DEFAULT_REJECT_MAD)]
    pub reject_mad: f64,
}

/// `taucal pairs`.
#[derive(Debug, Args)]
pub struct PairsArgs {
    /// Pairs file: columns unit_a,unit_b,sum_ps,se_ps.
    pub pairs: PathBuf,
}
