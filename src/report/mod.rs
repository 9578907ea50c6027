//! The run report: `report.html`, one self-contained page per run directory that an engineer
//! reads before trusting the table — K per gain state with its interval, range error against
//! receive level, each cell's spread, the gain map, drift over bench time, temperature, the
//! verdict and the provenance.
//!
//! A loader ([`load`]) reads the run directory into a plain [`ReportData`]; everything after that
//! is pure (plots in `*_plot.rs`, the page in [`html`]), so the same directory always gives the
//! same bytes. The page loads nothing from outside: styles and SVG plots are inline, there is no
//! script, and every string from the run is escaped.

pub mod html;
pub mod load;

mod budget_table;
mod drift_plot;
mod gainmap_plot;
mod k_plot;
mod legend;
mod range_plot;
mod spread_plot;
mod svg;

use crate::bench::Bench;
use crate::data::Manifest;
use crate::fit::TableRow;
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use thiserror::Error;

/// Why a report could not be made.
#[derive(Debug, Error)]
pub enum ReportError {
    /// A file the report needs is not in the run directory.
    #[error("{dir} has no {file}: it is not a run directory, or the run ended before writing it")]
    Missing {
        /// The run directory.
        dir: String,
        /// The missing file's name.
        file: &'static str,
    },
    /// A file is there but cannot be read.
    #[error("cannot read {path}: {message}")]
    Read {
        /// The file.
        path: String,
        /// What went wrong.
        message: String,
    },
    /// A plot could not be drawn.
    #[error("cannot draw the {plot} plot: {message}")]
    Plot {
        /// Which plot.
        plot: &'static str,
        /// What went wrong.
        message: String,
    },
    /// The report could not be written.
    #[error("cannot write {path}: {source}")]
    Write {
        /// The file.
        path: String,
        /// Cause.
        source: std::io::Error,
    },
}

/// One row of `budget.csv`: a cell's component.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct BudgetLine {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Gain state.
    pub gain_index: u32,
    /// Component name.
    pub component: String,
    /// GUM evaluation type, `A` or `B`.
    #[serde(rename = "type")]
    pub evaluation: String,
    /// Assumed distribution.
    pub distribution: String,
    /// Sensitivity coefficient.
    pub sensitivity: f64,
    /// Standard uncertainty, ps.
    pub u_ps: f64,
    /// |c·u|, ps.
    pub contribution_ps: f64,
    /// Degrees of freedom (`inf` reads as infinite).
    pub dof: f64,
}

/// One row of `gainmap.csv`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct GainMapRow {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Gain state.
    pub gain_index: u32,
    /// Plateau's lowest attenuation.
    pub atten_min_db: f64,
    /// Plateau's highest attenuation.
    pub atten_max_db: f64,
    /// DUT receive level at the plateau's weak end.
    pub rx_power_min_dbm: f64,
    /// DUT receive level at the plateau's strong end.
    pub rx_power_max_dbm: f64,
    /// The gain state the fitted switch columns lead to (absent in files written before they
    /// were appended, and on the last state).
    #[serde(default)]
    pub next_gain_index: Option<u32>,
    /// Fitted hysteresis of that switch, stated only when resolved (its interval above zero).
    #[serde(default)]
    pub hysteresis_db: Option<f64>,
    /// Its 95 % half-width.
    #[serde(default)]
    pub hysteresis_ci95_db: Option<f64>,
    /// `reported` by the DUT or `inferred` from K (absent in files written before the column
    /// was appended: reported).
    #[serde(default)]
    pub states: Option<String>,
}

/// One row of `verify.csv`.
#[derive(Debug, Clone, PartialEq, Deserialize)]
pub struct VerifyPoint {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Attenuator setting.
    pub atten_db: f64,
    /// DUT receive level.
    pub rx_power_dbm: f64,
    /// Equivalent free-space distance (ITU-R P.525).
    pub equiv_distance_m: f64,
    /// Exchanges judged.
    pub n: u64,
    /// Median range error, single-state calibration.
    pub range_error_single_m: f64,
    /// Median range error, per-gain table.
    pub range_error_table_m: f64,
}

/// Every exchange's K in one table cell (verification exchanges excluded).
#[derive(Debug, Clone, PartialEq)]
pub struct CellSpread {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Gain state.
    pub gain_index: u32,
    /// De-embedded K of each exchange, in record order.
    pub k_ps: Vec<f64>,
}

/// One burst's median K in one gain state, at the bench time it was taken.
#[derive(Debug, Clone, PartialEq)]
pub struct BurstPoint {
    /// Bench time of the burst, from where [`ReportData::bench_time`] says.
    pub time_s: f64,
    /// Gain state.
    pub gain_index: u32,
    /// Median K of the burst's exchanges in that state.
    pub median_k_ps: f64,
    /// Temperature reported with the burst.
    pub temp_c: Option<f64>,
    /// True for verification bursts.
    pub verify: bool,
}

/// Usable exchanges per gain state at one attenuation.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelGains {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// DUT receive level.
    pub rx_dbm: f64,
    /// Exchanges per gain state.
    pub counts: BTreeMap<u32, u64>,
}

/// Everything the report shows, read from a run directory.
#[derive(Debug, Clone)]
pub struct ReportData {
    /// The run's manifest.
    pub manifest: Manifest,
    /// The calibration table.
    pub table: Vec<TableRow>,
    /// Each cell's uncertainty budget, component by component.
    pub budget: Vec<BudgetLine>,
    /// Gain-state plateaus.
    pub gainmap: Vec<GainMapRow>,
    /// Verification rows.
    pub verify: Vec<VerifyPoint>,
    /// Per-cell spreads.
    pub cells: Vec<CellSpread>,
    /// Per-burst medians over bench time.
    pub bursts: Vec<BurstPoint>,
    /// Where the bursts' bench time comes from.
    pub bench_time: drift_plot::BenchTime,
    /// Gain states seen per level.
    pub levels: Vec<LevelGains>,
    /// Optional files the run directory lacks.
    pub absent: Vec<&'static str>,
}

/// Reads `dir` and writes its `report.html`; returns the file's path.
pub fn write(dir: &Path, bench: &Bench) -> Result<PathBuf, ReportError> {
    let data = load::load(dir, bench)?;
    let page = html::render(&data)?;
    let path = dir.join(crate::data::run_dir::files::REPORT);
    crate::data::manifest::write_atomic(&path, page.as_bytes()).map_err(|source| {
        ReportError::Write {
            path: path.display().to_string(),
            source,
        }
    })?;
    Ok(path)
}
