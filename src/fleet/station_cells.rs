//! One cell seen station by station: each station's units in the cell, with the same
//! statistics as the whole fleet's ([`cell_stats`] on the station's share) and a 95 % interval
//! for the station's mean (Student's t on its units' spread), so a station that reads high in
//! one cell shows against the others.

use super::cells::{cell_stats, CellStats};
use super::centred::{key, CellKey};
use crate::fit::stats::t975;
use crate::store::FleetCell;
use std::collections::BTreeMap;

/// One station's share of a cell.
#[derive(Debug, Clone, PartialEq)]
pub struct StationCell {
    /// The station.
    pub station: String,
    /// Its units' statistics in the cell.
    pub stats: CellStats,
    /// 95 % half-width of its mean, ps: t(0.975, n − 1)·sd/√n (NaN below two units).
    pub mean_ci95_ps: f64,
}

/// Each station's share of `cell`, by station name.
pub fn station_cells(cells: &[FleetCell], cell: CellKey) -> Vec<StationCell> {
    let mut by_station: BTreeMap<&str, Vec<FleetCell>> = BTreeMap::new();
    for c in cells.iter().filter(|c| key(c) == cell) {
        by_station
            .entry(c.station.as_str())
            .or_default()
            .push(c.clone());
    }
    by_station
        .into_iter()
        .filter_map(|(station, share)| {
            let stats = cell_stats(&share).into_iter().next()?;
            let n = stats.units as f64;
            let mean_ci95_ps = t975(n - 1.0).map_or(f64::NAN, |t| t * stats.sd_ps / n.sqrt());
            Some(StationCell {
                station: station.to_string(),
                stats,
                mean_ci95_ps,
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cell(serial: &str, station: &str, g: i64, k: f64) -> FleetCell {
        FleetCell {
            serial: serial.into(),
            station: station.into(),
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index: g,
            delay_ps: k,
            ci95_ps: 20.0,
            exchanges: 100,
        }
    }

    #[test]
    fn each_station_gets_its_own_units_and_a_student_t_interval() {
        // Station a: 10, 20, 30 ps (mean 20, sd 10); t(0.975, 2) = 4.302653 (NIST/SEMATECH
        // e-Handbook Table 1.3.6.7.2), so the half-width is 4.302653·10/√3 = 24.8414 ps.
        let cells = [
            cell("1", "a", 0, 10.0),
            cell("2", "a", 0, 20.0),
            cell("3", "a", 0, 30.0),
            cell("4", "b", 0, 50.0),
            cell("5", "b", 1, 99.0),
        ];
        let out = station_cells(&cells, (5180, 80, 0));
        assert_eq!(out.len(), 2);
        assert_eq!(out[0].station, "a");
        assert_eq!(out[0].stats.units, 3);
        assert!((out[0].stats.mean_ps - 20.0).abs() < 1e-12);
        assert!((out[0].mean_ci95_ps - 24.8414).abs() < 1e-3, "{:?}", out[0]);
        assert_eq!(out[1].stats.units, 1, "the gain-1 cell is not this cell");
        assert!(out[1].mean_ci95_ps.is_nan());
    }
}
