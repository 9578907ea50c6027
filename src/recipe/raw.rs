//! A recipe file as written: serde structs that keep values loose so the analysis pass can say
//! precisely what is wrong and where.

use serde::Deserialize;
use std::collections::BTreeMap;

/// The whole recipe file.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawRecipe {
    /// `[recipe]`: name and description.
    pub recipe: RawMeta,
    /// `[vars]`: named values that stages refer to as `"$name"`; `--set` overrides them.
    #[serde(default)]
    pub vars: BTreeMap<String, toml::Value>,
    /// `[fit]`: fitter options.
    #[serde(default)]
    pub fit: RawFit,
    /// `[accept]`: acceptance limits.
    #[serde(default)]
    pub accept: RawAccept,
    /// `[faults]`: what to do when an instrument fails.
    #[serde(default)]
    pub faults: RawFaults,
    /// `[[stage]]`, run in order.
    #[serde(default)]
    pub stage: Vec<RawStage>,
}

/// `[recipe]`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawMeta {
    /// Short name, used in the run directory's name.
    pub name: String,
    /// Free text.
    #[serde(default)]
    pub description: String,
    /// The bench used when the command line names none, relative to the recipe's folder
    /// (read before the rest, by [`crate::recipe::default_bench`]).
    pub bench: Option<String>,
}

/// `[fit]`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFit {
    /// Rejection threshold in scaled MADs.
    pub reject_mad: Option<toml::Value>,
    /// How many gain states the DUT has; states not measured are modelled.
    pub gain_states: Option<toml::Value>,
    /// A population model (`taucal fleet plan --out`), relative to the recipe's folder: cells
    /// the run does not measure are predicted from those it does.
    pub predict: Option<String>,
}

/// `[faults]`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFaults {
    /// Retries of a failed instrument command.
    pub retries: Option<toml::Value>,
    /// Wait before the first retry, doubled for each further one.
    pub backoff_ms: Option<toml::Value>,
    /// `stop` (default) or `skip`: what a point that still fails does to the run.
    pub on_point_failure: Option<toml::Value>,
}

/// `[accept]`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawAccept {
    /// Largest 95 % half-width allowed in any measured cell.
    pub max_ci95_ps: Option<toml::Value>,
    /// Fewest distinct DUT gain states the run must measure.
    pub min_gain_states: Option<toml::Value>,
    /// Largest verification range error allowed with the per-gain table, at any level.
    pub max_range_error_m: Option<toml::Value>,
    /// Refuse to run when the bench's reference certificate is past its due date (else warn).
    #[serde(default)]
    pub refuse_overdue_reference: bool,
}

/// One `[[stage]]`; which keys apply depends on `kind`.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawStage {
    /// Stage name, unique in the recipe.
    pub name: String,
    /// `sweep`, `cells`, `gainmap`, `verify`, `soak` or `script`.
    pub kind: String,
    /// Channel center frequency, MHz.
    pub center_mhz: Option<toml::Value>,
    /// Channel bandwidth, MHz.
    pub bw_mhz: Option<toml::Value>,
    /// Sweep: the attenuation points.
    pub atten_db: Option<toml::Value>,
    /// Sweep: bursts per point.
    pub bursts: Option<toml::Value>,
    /// Sweep: exchanges per burst.
    pub frames: Option<toml::Value>,
    /// Sweep: wait after each attenuation change, ms.
    pub settle_ms: Option<toml::Value>,
    /// Sweep: stop a point once its 95 % half-width reaches this (adaptive sampling).
    pub target_ci95_ps: Option<toml::Value>,
    /// Sweep with a target: most bursts per point.
    pub max_bursts: Option<toml::Value>,
    /// Verify: receive level whose gain state gives the single-state calibration.
    pub single_state_rx_dbm: Option<toml::Value>,
    /// Soak: chamber setpoint.
    pub setpoint_c: Option<toml::Value>,
    /// Soak: the DUT counts as settled within this of the setpoint.
    pub within_c: Option<toml::Value>,
    /// Soak: how long it must stay settled.
    pub stable_s: Option<toml::Value>,
    /// Soak: interval between temperature readings.
    pub poll_s: Option<toml::Value>,
    /// Soak: longest wait before the run stops.
    pub timeout_s: Option<toml::Value>,
    /// Script: inline Rhai source.
    pub script: Option<String>,
    /// Script: path of a Rhai file, relative to the recipe.
    pub file: Option<String>,
    /// Script: bench time the stage may take, s.
    pub time_limit_s: Option<toml::Value>,
    /// Script: wall time the script may compute outside bench calls, s.
    pub compute_limit_s: Option<toml::Value>,
    /// Cells: the coarse map's attenuations (swept rising, then falling).
    pub map_db: Option<toml::Value>,
    /// Cells: bursts per map point and direction.
    pub map_bursts: Option<toml::Value>,
    /// Cells: distance kept from each switch point, dB.
    pub margin_db: Option<toml::Value>,
}
