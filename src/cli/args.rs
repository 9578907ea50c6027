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
    /// Simulated instruments.
    #[command(subcommand)]
    Sim(SimCommand),
}

/// `taucal sim …`.
#[derive(Debug, Subcommand)]
pub enum SimCommand {
    /// Serve the simulated bench's instruments as real ones (SCPI attenuator, DUT console).
    #[command(
        after_help = "Examples:\n  taucal sim serve\n  taucal sim serve --bench recipes/benches/sim-demo.toml --listen attenuator=tcp:127.0.0.1:5025 --listen dut=pty\n\nPrints `ROLE ADDRESS` for each role served, then runs until SIGINT or SIGTERM."
    )]
    Serve(SimServeArgs),
}

/// `taucal sim serve`.
#[derive(Debug, Args)]
pub struct SimServeArgs {
    #[command(flatten)]
    pub bench: BenchArg,
    /// Serve ROLE (attenuator, dut) at tcp:HOST:PORT, tcp:PORT (loopback) or pty (dut only).
    /// Default: attenuator=tcp:127.0.0.1:5025 and dut=tcp:127.0.0.1:5026.
    #[arg(long, value_name = "ROLE=WHERE")]
    pub listen: Vec<String>,
    /// Seed of the simulation (default: the bench's [sim] seed).
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    /// Keep wall-clock pace instead of virtual time.
    #[arg(long)]
    pub realtime: bool,
    /// Allow listening on addresses other than loopback.
    #[arg(long)]
    pub allow_remote: bool,
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
    /// Reach a bench role at another address (e.g. dut=serial:/dev/ttyUSB0?baud=115200).
    #[arg(long = "connect", value_name = "ROLE=ADDRESS")]
    pub connect: Vec<String>,
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
    /// Outlier rejection threshold in scaled MADs (default: the run's, from a manifest.toml
    /// beside the file, else 5.0).
    #[arg(long, value_name = "K")]
    pub reject_mad: Option<f64>,
}
