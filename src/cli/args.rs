//! The command line as typed: parsed by clap, no I/O.

use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

/// Calibrate the group delay of Wi-Fi ranging devices per receive gain state.
#[derive(Debug, Parser)]
#[command(
    name = "taucal",
    version,
    about,
    propagate_version = true,
    after_help = "Examples:\n  taucal check recipes/rx-gain-sweep.toml      # the plan and its bench time\n  taucal run recipes/rx-gain-sweep.toml        # run it on the simulated demo bench\n  taucal report runs/20261202T101500Z-rx-gain-sweep\n  taucal completions bash > /etc/bash_completion.d/taucal"
)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
    /// Only warnings and errors on stderr; no progress display.
    #[arg(long, short, global = true, conflicts_with = "verbose")]
    pub quiet: bool,
    /// Debug detail on stderr too (the run directory's logs always have it).
    #[arg(long, short, global = true)]
    pub verbose: bool,
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
        after_help = "Prints the stages, points, exchanges and the estimated bench time (a lower bound where\nadaptive, mid-plateau or script stages decide at run time).\n\nExamples:\n  taucal check recipes/rx-gain-sweep.toml\n  taucal check recipes/rx-gain-sweep.toml --bench recipes/benches/sim-demo.toml --set map_step_db=0.5"
    )]
    Check(CheckArgs),
    /// Fit a calibration table from an exchanges file.
    #[command(
        after_help = "Examples:\n  taucal fit runs/20261202T101500Z-rx-gain-sweep/exchanges.csv --out /tmp/refit\n  taucal fit exchanges.csv --bench recipes/benches/sim-demo.toml --reject-mad 4"
    )]
    Fit(FitArgs),
    /// Write a run directory's report.html again from its files.
    #[command(
        after_help = "Examples:\n  taucal report runs/20261202T101500Z-rx-gain-sweep\n  taucal report /tmp/demo --bench recipes/benches/sim-demo.toml"
    )]
    Report(ReportArgs),
    /// Print a shell completion script.
    #[command(
        after_help = "Examples:\n  taucal completions bash > ~/.local/share/bash-completion/completions/taucal\n  taucal completions zsh > ~/.zfunc/_taucal\n  taucal completions fish > ~/.config/fish/completions/taucal.fish"
    )]
    Completions(CompletionsArgs),
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
    /// Outlier rejection threshold in scaled MADs (default: the run's, from a manifest.toml
    /// beside the file, else 5.0).
    #[arg(long, value_name = "K")]
    pub reject_mad: Option<f64>,
}

/// `taucal report`.
#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The run directory.
    #[arg(value_name = "RUN_DIR")]
    pub run_dir: PathBuf,
    /// The bench the run used (default: the bench file its manifest names, if unchanged).
    #[arg(long, value_name = "FILE")]
    pub bench: Option<PathBuf>,
}

/// `taucal completions`.
#[derive(Debug, Args)]
pub struct CompletionsArgs {
    /// The shell.
    #[arg(value_name = "SHELL")]
    pub shell: clap_complete::Shell,
}
