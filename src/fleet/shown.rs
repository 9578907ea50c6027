//! The fleet's numbers as people read them: the columns and the fixed decimals that
//! `fleet stats` (with its outliers) and `fleet stations` print and the fleet pages show, written once so the
//! two can never disagree.

use super::cells::CellStats;
use super::outliers::Outlier;
use super::stations::StationOffset;

/// A number as printed: fixed decimals, empty when not known.
pub fn num(v: f64, decimals: usize) -> String {
    if v.is_finite() {
        format!("{v:.decimals$}")
    } else {
        String::new()
    }
}

/// The columns of a cell's statistics.
pub const STATS_HEADER: [&str; 13] = [
    "center_mhz",
    "bw_mhz",
    "gain_index",
    "units",
    "mean_ps",
    "sd_ps",
    "p05_ps",
    "p50_ps",
    "p95_ps",
    "tol_lo_ps",
    "tol_hi_ps",
    "noise_sd_ps",
    "unit_sd_ps",
];

/// One cell's statistics under [`STATS_HEADER`].
pub fn stats_row(s: &CellStats) -> Vec<String> {
    vec![
        s.cell.0.to_string(),
        s.cell.1.to_string(),
        s.cell.2.to_string(),
        s.units.to_string(),
        num(s.mean_ps, 1),
        num(s.sd_ps, 1),
        num(s.p05_ps, 1),
        num(s.p50_ps, 1),
        num(s.p95_ps, 1),
        num(s.tol_lo_ps, 1),
        num(s.tol_hi_ps, 1),
        num(s.noise_sd_ps, 1),
        num(s.unit_sd_ps, 1),
    ]
}

/// The columns of a station's offset.
pub const STATIONS_HEADER: [&str; 5] = ["station", "units", "offset_ps", "ci95_ps", "flagged"];

/// One station's offset under [`STATIONS_HEADER`]; `say_reference` writes the median
/// station's flag as `no (reference)` rather than `no`.
pub fn station_row(o: &StationOffset, say_reference: bool) -> Vec<String> {
    let flag = match (o.flagged, o.reference && say_reference) {
        (true, _) => "yes",
        (false, true) => "no (reference)",
        (false, false) => "no",
    };
    vec![
        o.station.clone(),
        o.units.to_string(),
        num(o.offset_ps, 1),
        num(o.ci95_ps, 1),
        flag.to_string(),
    ]
}

/// The columns of an outlier unit.
pub const OUTLIER_HEADER: [&str; 6] = [
    "serial",
    "station",
    "deviation_ps",
    "score_z",
    "worst_cell",
    "worst_cell_z",
];

/// One outlier unit under [`OUTLIER_HEADER`].
pub fn outlier_row(o: &Outlier) -> Vec<String> {
    let (c, b, g) = o.unit.worst_cell;
    vec![
        o.unit.serial.clone(),
        o.unit.station.clone(),
        num(o.unit.deviation_ps, 1),
        num(o.score, 1),
        format!("{c}/{b}/{g}"),
        num(o.unit.worst_z, 1),
    ]
}
