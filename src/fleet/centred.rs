//! Cell-centring: each unit's deviation from the fleet, with each cell's fleet median taken
//! off first, so a unit measured on fewer or other cells is compared fairly and the gain
//! states' own differences drop out.

use crate::fit::stats::{mad_scaled, median};
use crate::store::FleetCell;
use std::collections::BTreeMap;

/// A cell: center frequency and bandwidth in MHz, gain state.
pub type CellKey = (i64, i64, i64);

/// A cell's fleet centre and robust spread.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CellCentre {
    /// Median of the units' K, ps.
    pub median_ps: f64,
    /// Scaled median absolute deviation (an SD estimate), ps.
    pub mad_sd_ps: f64,
}

/// One unit's place in the fleet.
#[derive(Debug, Clone, PartialEq)]
pub struct UnitDeviation {
    /// The unit.
    pub serial: String,
    /// The station of its latest accepted run.
    pub station: String,
    /// Mean over its cells of K minus the cell's fleet median, ps.
    pub deviation_ps: f64,
    /// Cells it has.
    pub cells: usize,
    /// Its cell furthest from the fleet, in robust z (deviation over the cell's scaled MAD).
    pub worst_cell: CellKey,
    /// That cell's robust z.
    pub worst_z: f64,
}

/// The key of `c`.
pub fn key(c: &FleetCell) -> CellKey {
    (c.center_mhz, c.bw_mhz, c.gain_index)
}

/// Each cell's median and scaled MAD over the units.
pub fn centres(cells: &[FleetCell]) -> BTreeMap<CellKey, CellCentre> {
    let mut by_cell: BTreeMap<CellKey, Vec<f64>> = BTreeMap::new();
    for c in cells {
        by_cell.entry(key(c)).or_default().push(c.delay_ps);
    }
    by_cell
        .into_iter()
        .filter_map(|(k, mut v)| {
            let m = median(&mut v)?;
            let mad = mad_scaled(&mut v, m)?;
            Some((
                k,
                CellCentre {
                    median_ps: m,
                    mad_sd_ps: mad,
                },
            ))
        })
        .collect()
}

/// Every unit's deviation, by serial.
pub fn deviations(cells: &[FleetCell]) -> Vec<UnitDeviation> {
    let centre = centres(cells);
    let mut by_unit: BTreeMap<&str, UnitDeviation> = BTreeMap::new();
    for c in cells {
        let k = key(c);
        let Some(cc) = centre.get(&k) else { continue };
        let d = c.delay_ps - cc.median_ps;
        let z = if cc.mad_sd_ps > 0.0 {
            d / cc.mad_sd_ps
        } else {
            0.0
        };
        let u = by_unit
            .entry(c.serial.as_str())
            .or_insert_with(|| UnitDeviation {
                serial: c.serial.clone(),
                station: c.station.clone(),
                deviation_ps: 0.0,
                cells: 0,
                worst_cell: k,
                worst_z: 0.0,
            });
        // Running sum here; divided by the count below.
        u.deviation_ps += d;
        u.cells += 1;
        if z.abs() > u.worst_z.abs() {
            u.worst_z = z;
            u.worst_cell = k;
        }
    }
    by_unit
        .into_values()
        .map(|mut u| {
            u.deviation_ps /= u.cells as f64;
            u
        })
        .collect()
}
