//! The command line as typed: parsed by clap, no I/O.

use clap::{Args, Parser, Subcommand, ValueEnum};
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
    /// Continue a run whose process died (power loss, SIGKILL) or that was stopped.
    #[command(
        after_help = "Completed points are kept; a half-done point is redone from its start. On a simulated bench\nthe resumed run records exactly what an uninterrupted run with the same seed would.\n\nExample:\n  taucal resume runs/20261202T101500Z-overnight-soak"
    )]
    Resume(ResumeArgs),
    /// Serve a live page of a run started elsewhere (or being resumed), following its files.
    #[command(
        after_help = "The page shows the run's stage, point, exchanges, bench time against the estimate, the table\nso far with intervals, the plots and the log, updated as bursts land; once the run has ended, its\nreport. Read-only. Runs until Ctrl-C.\n\nExamples:\n  taucal watch runs/20261202T101500Z-overnight-soak\n  taucal watch runs/20261202T101500Z-overnight-soak --listen 0.0.0.0:8080 --allow-remote"
    )]
    Watch(WatchArgs),
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
    /// Solve each unit's delay from pairwise sums (no golden reference needed).
    #[command(
        after_help = "PAIRS.csv has the columns unit_a,unit_b,sum_ps,se_ps (other columns are ignored).\nThe pair graph needs an odd cycle in every connected group: three units measured pairwise at least.\n\nExample:\n  taucal pairs line-4-pairs.csv > unit-delays.csv"
    )]
    Pairs(PairsArgs),
    /// A measured path's group delay per channel, from a VNA's Touchstone file.
    #[command(
        after_help = "Prints center_mhz,bw_mhz,s21_delay_ps,s12_delay_ps,ripple_u_ps,points: the group delay\n-dφ/dω averaged over each channel's band, both ways, and the in-band ripple as a standard\nuncertainty (rectangular). A one-port file gives S11's (a reflection: twice the one-way delay).\n\nExample:\n  taucal path-delay fixture.s2p --channel 5180/80 --channel 5500/160"
    )]
    PathDelay(PathDelayArgs),
    /// Calibrate the range offset of a device that reports ranges, from ranges at known distances.
    #[command(
        after_help = "Prints `offset <value> m` (median of measured − true at the --at distance), then a CSV table\nof the errors at every true distance before and after subtracting it. Rows whose measured or\ntrue value is empty or not a number are skipped and counted.\n\nExamples:\n  taucal ota ranges.csv --measured distance_mm --truth true_m --unit mm --at 5\n  taucal ota log.csv --measured range --truth truth --unit m --at 2.5 > errors.txt"
    )]
    Ota(OtaArgs),
    /// Export a run's calibration table for firmware or other tools.
    #[command(
        after_help = "Formats: c (C99 header, integer picoseconds keyed by center frequency, bandwidth and gain\nstate), json, toml, csv (the caltable.csv columns).\n\nExamples:\n  taucal export runs/20261202T101500Z-rx-gain-sweep --format c --out taucal_k_table.h\n  taucal export runs/20261202T101500Z-rx-gain-sweep --format json"
    )]
    Export(ExportArgs),
    /// Simulated instruments.
    #[command(subcommand)]
    Sim(SimCommand),
    /// The results store: every run indexed by unit (SQLite or PostgreSQL).
    #[command(subcommand)]
    Store(StoreCommand),
    /// Population science on the store: spread per cell, outlier units, station bias.
    #[command(subcommand)]
    Fleet(FleetCommand),
}

/// `taucal fleet …`.
#[derive(Debug, Subcommand)]
pub enum FleetCommand {
    /// Per cell over each unit's latest accepted run: spread, percentiles, tolerance interval.
    #[command(
        after_help = "Columns: center_mhz,bw_mhz,gain_index,units,mean_ps,sd_ps,p05_ps,p50_ps,p95_ps,tol_lo_ps,tol_hi_ps,\nthen noise_sd_ps,unit_sd_ps (the spread split into measurement noise and true unit spread).\nThe text form then lists outlier units by a robust score.\n\nExamples:\n  taucal fleet stats\n  taucal fleet stats --store postgres://line4@db.lab/cal --format csv"
    )]
    Stats(FleetStatsArgs),
    /// Each station's offset against the fleet, with a 95 % interval; flags biased stations.
    #[command(
        after_help = "Columns: station,units,offset_ps,ci95_ps,flagged. A station whose true path is e ps longer\nthan it declares shows an offset of about +2e ps (the round trip).\n\nExamples:\n  taucal fleet stations\n  taucal fleet stations --threshold-ps 30 --format csv"
    )]
    Stations(FleetStationsArgs),
    /// A reduced calibration: the cells to measure, and a model that predicts the rest.
    #[command(
        after_help = "From each unit's latest accepted table: the fleet's mean and Ledoit–Wolf covariance over\ncells, and the N cells (chosen greedily) that keep the worst prediction SD of the others\nsmallest. MODEL.toml is the predictor a recipe names in `[fit] predict`; --validate leaves\neach unit out in turn and reports how often the 95 % prediction intervals held its measured\nvalues, and the exchanges the plan spends against the full calibration.\n\nExamples:\n  taucal fleet plan --measure 1 --out model.toml --max-ci95-ps 50 --validate\n  taucal fleet plan --store postgres://line4@db.lab/cal --measure 4 --out line4-model.toml"
    )]
    Plan(FleetPlanArgs),
    /// Serve the fleet as web pages: units, a unit's runs and table, a cell's population,
    /// the stations' offsets.
    #[command(
        after_help = "Read-only pages computed as `fleet stats`, `fleet stations`, `store units` and `store table`\ncompute them, from the store at each request. Listens on loopback unless --allow-remote.\nPrints the address it serves, then runs until SIGINT or SIGTERM.\n\nExamples:\n  taucal fleet serve --store sqlite:runs/taucal.sqlite\n  taucal fleet serve --store postgres://line4@db.lab/cal --listen 0.0.0.0:8090 --allow-remote"
    )]
    Serve(FleetServeArgs),
}

/// `taucal fleet serve`.
#[derive(Debug, Args)]
pub struct FleetServeArgs {
    #[command(flatten)]
    pub store: StoreReadArg,
    /// Address to listen on (port 0: any free port, printed at start).
    #[arg(long, value_name = "ADDR", default_value = "127.0.0.1:8090")]
    pub listen: String,
    /// Allow an address other than loopback (the pages have no login: anyone who can reach
    /// the port reads the store's units and tables).
    #[arg(long)]
    pub allow_remote: bool,
    #[command(flatten)]
    pub threshold: StationThresholdArg,
}

/// `taucal fleet plan`.
#[derive(Debug, Args)]
pub struct FleetPlanArgs {
    #[command(flatten)]
    pub store: StoreReadArg,
    /// How many cells each unit will have measured.
    #[arg(long, value_name = "N")]
    pub measure: usize,
    /// Where to write the population model (TOML).
    #[arg(long, value_name = "MODEL.toml")]
    pub out: PathBuf,
    /// The recipe's acceptance limit on a cell's 95 % half-width: predicted intervals wider
    /// than it are reported.
    #[arg(long, value_name = "PS")]
    pub max_ci95_ps: Option<f64>,
    /// Leave each unit out in turn: coverage of the prediction intervals, exchanges spent.
    #[arg(long)]
    pub validate: bool,
    /// The full factory recipe (one mid-plateau point per gain state in each sweep stage), to
    /// cut down to the plan's cells with --recipe-out.
    #[arg(long, value_name = "RECIPE.toml", requires = "recipe_out")]
    pub recipe: Option<PathBuf>,
    /// Where to write the reduced recipe: the full one measuring only the plan's cells, with
    /// `[fit] predict` naming the model.
    #[arg(long, value_name = "RECIPE.toml", requires = "recipe")]
    pub recipe_out: Option<PathBuf>,
}

/// `taucal fleet stats`.
#[derive(Debug, Args)]
pub struct FleetStatsArgs {
    #[command(flatten)]
    pub store: StoreReadArg,
    /// Output format.
    #[arg(long, value_enum, default_value = "text")]
    pub format: ListFormat,
}

/// `taucal fleet stations`.
#[derive(Debug, Args)]
pub struct FleetStationsArgs {
    #[command(flatten)]
    pub store: StoreReadArg,
    /// Output format.
    #[arg(long, value_enum, default_value = "text")]
    pub format: ListFormat,
    #[command(flatten)]
    pub threshold: StationThresholdArg,
}

/// `taucal sim …`.
#[derive(Debug, Subcommand)]
pub enum SimCommand {
    /// Serve the simulated bench's instruments as real ones (SCPI attenuator, DUT console).
    #[command(
        after_help = "Examples:\n  taucal sim serve\n  taucal sim serve --bench recipes/benches/sim-demo.toml --listen attenuator=tcp:127.0.0.1:5025 --listen dut=pty\n  taucal sim serve --listen attenuator=hislip:127.0.0.1:4880\n  taucal sim serve --listen attenuator=vxi11:127.0.0.1 --portmapper-port 0\n\nPrints `ROLE ADDRESS` for each role served, then runs until SIGINT or SIGTERM."
    )]
    Serve(SimServeArgs),
    /// Calibrate a simulated fleet: N units drawn from the bench's [sim.population], each a real
    /// run in virtual time, recorded into the store.
    #[command(
        after_help = "Units get serials of their own and go to the stations in turn; a station named in the bench's\n[sim.stations] has that true path error. The same --seed gives the same fleet.\n\nExamples:\n  taucal sim fleet recipes/factory-golden.toml --bench recipes/benches/sim-fleet-line.toml --units 200\n  taucal sim fleet recipes/factory-golden.toml --bench recipes/benches/sim-fleet-line.toml --units 1000 --stations a,b,c --store sqlite:/tmp/fleet.sqlite --truth-out truth.csv"
    )]
    Fleet(SimFleetArgs),
}

/// `taucal sim fleet`.
#[derive(Debug, Args)]
pub struct SimFleetArgs {
    /// Recipe file.
    pub recipe: PathBuf,
    #[command(flatten)]
    pub bench: BenchArg,
    /// How many units.
    #[arg(long, value_name = "N")]
    pub units: u32,
    /// Stations, comma-separated (default: the bench's [sim.stations], else its station).
    #[arg(long, value_name = "A,B,C", value_delimiter = ',')]
    pub stations: Vec<String>,
    /// Seed of the fleet (default: the bench's [sim] seed).
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    #[command(flatten)]
    pub store: StoreReadArg,
    /// Write each unit's true K per cell here (CSV).
    #[arg(long, value_name = "FILE")]
    pub truth_out: Option<PathBuf>,
    /// Folder for the units' run directories (default runs/fleet-<seed>).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
}

/// `taucal sim serve`.
#[derive(Debug, Args)]
pub struct SimServeArgs {
    #[command(flatten)]
    pub bench: BenchArg,
    /// Serve ROLE (attenuator, dut) at tcp:HOST:PORT, tcp:PORT (loopback) or pty (dut only);
    /// the attenuator also over VXI-11 (vxi11:HOST[:PORTMAPPER_PORT]) or HiSLIP
    /// (hislip:HOST[:PORT]), or at a VISA resource string (TCPIP::HOST::PORT::SOCKET,
    /// TCPIP::HOST::inst0::INSTR, TCPIP::HOST::hislip0[,PORT]::INSTR). On a slotted bench, ROLE may be a slot's DUT role (as its [[slot]] names it) to serve
    /// that slot's unit. Default: attenuator=tcp:127.0.0.1:5025 and dut=tcp:127.0.0.1:5026.
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
    /// The VXI-11 portmapper's port where a vxi11 listener names none (111, the standard
    /// one, needs privileges; 0 lets the system choose).
    #[arg(long, value_name = "PORT", default_value_t = 111)]
    pub portmapper_port: u16,
    /// Clients served at once on each socket; more are closed as they connect (1: an
    /// instrument that takes a single connection, as many real ones do).
    #[arg(long, value_name = "N", default_value_t = crate::sim::serve::MAX_CLIENTS as u16,
          value_parser = clap::value_parser!(u16).range(1..=64))]
    pub max_clients: u16,
    /// Serve ROLE (attenuator, dut) on stdin/stdout until stdin ends, for a run that reaches it
    /// at `exec:taucal sim serve --stdio ROLE …`; other roles are served only where `--listen`
    /// says, and every message goes to stderr.
    #[arg(long, value_name = "ROLE")]
    pub stdio: Option<String>,
}

/// Bench selection shared by the commands.
#[derive(Debug, Args)]
pub struct BenchArg {
    /// Bench file; without it, the bench the recipe names (`[recipe] bench`), else the built-in
    /// simulated demo bench.
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
    /// The unit's serial number (default: the serial the DUT reports, else a simulated DUT's).
    #[arg(long, value_name = "SERIAL")]
    pub unit: Option<String>,
    /// The station's name (default: the bench's [bench] station, else the host name).
    #[arg(long, value_name = "NAME")]
    pub station: Option<String>,
    #[command(flatten)]
    pub store: StoreArg,
    /// Serve a live page of the run at HOST:PORT while it runs (e.g. 127.0.0.1:8080): its
    /// progress, table so far and plots, updated as bursts land; at the end, its report.
    #[arg(long, value_name = "HOST:PORT")]
    pub watch: Option<String>,
    /// Let --watch listen on an address other machines can reach (the page is read-only, but
    /// anyone who reaches it sees the run).
    #[arg(long, requires = "watch")]
    pub allow_remote: bool,
}

/// `taucal resume`.
#[derive(Debug, Args)]
pub struct ResumeArgs {
    /// The run directory.
    pub run_dir: PathBuf,
    #[command(flatten)]
    pub store: StoreArg,
    /// Serve a live page of the run at HOST:PORT while it runs (e.g. 127.0.0.1:8080): its
    /// progress, table so far and plots, updated as bursts land; at the end, its report.
    #[arg(long, value_name = "HOST:PORT")]
    pub watch: Option<String>,
    /// Let --watch listen on an address other machines can reach (the page is read-only, but
    /// anyone who reaches it sees the run).
    #[arg(long, requires = "watch")]
    pub allow_remote: bool,
}

/// The results store a command writes to or reads from.
#[derive(Debug, Args)]
pub struct StoreArg {
    /// Results store: sqlite:PATH, postgres://USER@HOST/DB, or none (default: $TAUCAL_STORE, else
    /// the bench's [store] url, else sqlite: taucal.sqlite beside the run directory).
    #[arg(long = "store", value_name = "URL")]
    pub url: Option<String>,
}

/// `taucal store …`.
#[derive(Debug, Subcommand)]
pub enum StoreCommand {
    /// Add run directories to a store (a run imported twice is one run).
    #[command(
        after_help = "Without --store: $TAUCAL_STORE, else taucal.sqlite beside each run directory.\n\nExamples:\n  taucal store import runs/*/\n  taucal store import runs/20261202T101500Z-rx-gain-sweep --store postgres://line4@db.lab/cal\n  taucal store import runs/20261203T080000Z-factory-quick   (a station's run: each slot's run)"
    )]
    Import(StoreImportArgs),
    /// Copy to another store every run it lacks or holds in an older state.
    #[command(
        after_help = "Idempotent and safe to interrupt: runs go over in batches, each one transaction.\n\nExample:\n  taucal store sync --store sqlite:runs/taucal.sqlite --to postgres://line4@db.lab/cal"
    )]
    Sync(StoreSyncArgs),
    /// List the units a store holds: serial, model, runs, latest run, whether one was accepted.
    #[command(
        after_help = "Examples:\n  taucal store units\n  taucal store units --store postgres://line4@db.lab/cal --format csv"
    )]
    Units(StoreUnitsArgs),
    /// Print a unit's latest accepted calibration table, for firmware provisioning.
    #[command(
        after_help = "Examples:\n  taucal store table SN-0412 --format c > sn0412_k_table.h\n  taucal store table SN-0412 --store postgres://line4@db.lab/cal --format json"
    )]
    Table(StoreTableArgs),
}

/// The smallest station offset worth flagging: `fleet stations` and the stations page
/// flag alike.
#[derive(Debug, Args)]
pub struct StationThresholdArg {
    /// Smallest station offset worth flagging, ps.
    #[arg(
        long,
        value_name = "PS",
        default_value_t = 20.0,
        allow_negative_numbers = true
    )]
    pub threshold_ps: f64,
}

/// Where store commands read when no URL is given.
#[derive(Debug, Args)]
pub struct StoreReadArg {
    /// Results store (default: $TAUCAL_STORE, else sqlite:runs/taucal.sqlite).
    #[arg(long = "store", value_name = "URL")]
    pub url: Option<String>,
}

/// `taucal store import`.
#[derive(Debug, Args)]
pub struct StoreImportArgs {
    /// Run directories.
    #[arg(required = true, value_name = "RUN_DIR")]
    pub run_dirs: Vec<PathBuf>,
    #[command(flatten)]
    pub store: StoreArg,
}

/// `taucal store sync`.
#[derive(Debug, Args)]
pub struct StoreSyncArgs {
    #[command(flatten)]
    pub store: StoreReadArg,
    /// The destination store.
    #[arg(long, value_name = "URL")]
    pub to: String,
}

/// A listing's format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ListFormat {
    /// Aligned columns.
    Text,
    /// CSV with a header.
    Csv,
}

/// `taucal store units`.
#[derive(Debug, Args)]
pub struct StoreUnitsArgs {
    #[command(flatten)]
    pub store: StoreReadArg,
    /// Output format.
    #[arg(long, value_enum, default_value = "text")]
    pub format: ListFormat,
}

/// `taucal store table`.
#[derive(Debug, Args)]
pub struct StoreTableArgs {
    /// The unit's serial number.
    pub serial: String,
    #[command(flatten)]
    pub store: StoreReadArg,
    /// Output format.
    #[arg(long, value_enum, default_value = "csv")]
    pub format: FormatArg,
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
    /// Bench file (default: the bench the run's manifest beside the file names, if unchanged;
    /// for a file outside a run directory, the built-in simulated demo bench).
    #[arg(long, value_name = "FILE")]
    pub bench: Option<PathBuf>,
    /// Write caltable.csv into this directory instead of printing it.
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Outlier rejection threshold in scaled MADs (default: the run's, from a manifest.toml
    /// beside the file, else 5.0).
    #[arg(long, value_name = "K")]
    pub reject_mad: Option<f64>,
    /// A stage whose exchanges verify the table rather than fit it; repeat for more (default:
    /// the verification stages the manifest beside the file names, else none).
    #[arg(long, value_name = "STAGE")]
    pub verify_stage: Vec<String>,
    /// The K (ps) a range-reporting device removed from its ranges (default: the one the
    /// manifest beside the file recorded, else the bench's `[dut] applied_k_ps`).
    #[arg(long, value_name = "PS")]
    pub applied_k_ps: Option<f64>,
}

/// `taucal pairs`.
#[derive(Debug, Args)]
pub struct PairsArgs {
    /// Pairs file: columns unit_a,unit_b,sum_ps,se_ps.
    pub pairs: PathBuf,
}

/// `taucal path-delay`.
#[derive(Debug, Args)]
pub struct PathDelayArgs {
    /// Touchstone file of the path as a two-port (.s2p; version 1.x or 2.0).
    pub file: PathBuf,
    /// A channel as CENTER_MHZ/BW_MHZ; repeat for more.
    #[arg(long = "channel", value_name = "CENTER/BW", required = true)]
    pub channels: Vec<String>,
}

/// A length unit on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum UnitArg {
    /// Millimetres.
    Mm,
    /// Centimetres.
    Cm,
    /// Metres.
    M,
}

/// `taucal ota`.
#[derive(Debug, Args)]
pub struct OtaArgs {
    /// Ranges file: CSV with a header; other columns are ignored.
    pub ranges: PathBuf,
    /// Column holding the measured range.
    #[arg(long, value_name = "COLUMN")]
    pub measured: String,
    /// Column holding the true distance.
    #[arg(long, value_name = "COLUMN")]
    pub truth: String,
    /// Unit of the measured ranges (and of the true distances unless --truth-unit says).
    #[arg(long, value_enum)]
    pub unit: UnitArg,
    /// True distance to calibrate at, in metres.
    #[arg(long, value_name = "DISTANCE_M", allow_negative_numbers = true)]
    pub at: f64,
    /// Unit of the true distances (default: as --unit, unless they are plainly off by 100 or 1000).
    #[arg(long, value_enum)]
    pub truth_unit: Option<UnitArg>,
    /// True distances this close (m) are one distance; --at must be this close to one.
    #[arg(long, value_name = "M", default_value_t = crate::fit::ota::DEFAULT_TOLERANCE_M)]
    pub tolerance_m: f64,
}

/// An export format on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum FormatArg {
    /// C99 header.
    C,
    /// JSON document.
    Json,
    /// TOML document.
    Toml,
    /// CSV, the caltable.csv columns.
    Csv,
}

/// `taucal export`.
#[derive(Debug, Args)]
pub struct ExportArgs {
    /// Run directory (holds caltable.csv and manifest.toml).
    pub run_dir: PathBuf,
    /// Output format.
    #[arg(long, value_enum)]
    pub format: FormatArg,
    /// Write to this file instead of stdout.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

/// `taucal watch`.
#[derive(Debug, Args)]
pub struct WatchArgs {
    /// The run directory.
    #[arg(value_name = "RUN_DIR")]
    pub run_dir: PathBuf,
    /// Where to serve the page.
    #[arg(long, value_name = "HOST:PORT", default_value = "127.0.0.1:8080")]
    pub listen: String,
    /// Let --listen be an address other machines can reach (the page is read-only, but anyone
    /// who reaches it sees the run).
    #[arg(long)]
    pub allow_remote: bool,
    /// The bench the run uses (default: the bench file its manifest names, if unchanged).
    #[arg(long, value_name = "FILE")]
    pub bench: Option<PathBuf>,
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
