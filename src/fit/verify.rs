//! Verification: a calibration applied to fresh exchanges, as range error against receive level.
//!
//! Each level's error is the median over its exchanges (robust to late detections) of
//! `c/2 · (K_exchange − K_applied)`, for two calibrations: a single K (the gain state in force at
//! a reference level, the usual one-point calibration) and the per-gain-state table.

use super::rtt::SPEED_OF_LIGHT_M_PER_S;
use super::stats::median;
use std::collections::BTreeMap;

/// One verification exchange, already de-embedded.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Checked {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Attenuator setting.
    pub atten_db: f64,
    /// Reported DUT gain index.
    pub gain_index: u32,
    /// The exchange's DUT delay.
    pub k_ps: f64,
}

/// One row of `verify.csv`.
#[derive(Debug, Clone, PartialEq)]
pub struct VerifyRow {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Attenuator setting.
    pub atten_db: f64,
    /// Nominal DUT receive level.
    pub rx_power_dbm: f64,
    /// Free-space distance with the same path loss (ITU-R P.525, isotropic antennas).
    pub equiv_distance_m: f64,
    /// Exchanges judged at this level.
    pub n: u64,
    /// Median range error with the single-state calibration.
    pub range_error_single_m: f64,
    /// Median range error with the per-gain table.
    pub range_error_table_m: f64,
}

/// Range (m) per picosecond of RTT: c/2.
const M_PER_PS_RTT: f64 = SPEED_OF_LIGHT_M_PER_S / 2.0 * 1e-12;

/// Free-space path loss in dB at `distance_m` and `freq_mhz` (ITU-R P.525: 20·log10(4πd/λ)).
pub fn free_space_loss_db(distance_m: f64, freq_mhz: f64) -> f64 {
    let wavelength_m = SPEED_OF_LIGHT_M_PER_S / (freq_mhz * 1e6);
    20.0 * (4.0 * std::f64::consts::PI * distance_m / wavelength_m).log10()
}

/// The distance at which free space loses `loss_db` at `freq_mhz` (inverse of
/// [`free_space_loss_db`]).
pub fn equivalent_distance_m(loss_db: f64, freq_mhz: f64) -> f64 {
    let wavelength_m = SPEED_OF_LIGHT_M_PER_S / (freq_mhz * 1e6);
    wavelength_m / (4.0 * std::f64::consts::PI) * 10f64.powf(loss_db / 20.0)
}

/// Per-level verification. `table` maps (center, bw, gain) to the applied K; `single` maps
/// (center, bw) to the single-state K; `level` gives (rx power dBm, path loss dB) for an
/// attenuation. Exchanges whose gain state has no table row are skipped; the count of skipped
/// exchanges is returned too.
pub fn verify(
    checked: &[Checked],
    table: &BTreeMap<(u32, u32, u32), f64>,
    single: &BTreeMap<(u32, u32), f64>,
    level: impl Fn(f64) -> (f64, f64),
) -> (Vec<VerifyRow>, u64) {
    // Per level: its attenuation and the errors (m) with each calibration.
    type Errors = (f64, Vec<f64>, Vec<f64>);
    let mut by_level: BTreeMap<(u32, u32, i64), Errors> = BTreeMap::new();
    let mut skipped = 0;
    for c in checked {
        let (Some(k_table), Some(k_single)) = (
            table.get(&(c.center_mhz, c.bw_mhz, c.gain_index)),
            single.get(&(c.center_mhz, c.bw_mhz)),
        ) else {
            skipped += 1;
            continue;
        };
        // Millidecibel keys: attenuator settings are on a coarser grid than that.
        let key = (c.center_mhz, c.bw_mhz, (c.atten_db * 1000.0).round() as i64);
        let e = by_level
            .entry(key)
            .or_insert((c.atten_db, Vec::new(), Vec::new()));
        e.1.push((c.k_ps - k_single) * M_PER_PS_RTT);
        e.2.push((c.k_ps - k_table) * M_PER_PS_RTT);
    }
    let rows = by_level
        .into_iter()
        .filter_map(
            |((center_mhz, bw_mhz, _), (atten_db, mut single_m, mut table_m))| {
                let (rx_power_dbm, loss_db) = level(atten_db);
                Some(VerifyRow {
                    center_mhz,
                    bw_mhz,
                    atten_db,
                    rx_power_dbm,
                    equiv_distance_m: equivalent_distance_m(loss_db, f64::from(center_mhz)),
                    n: table_m.len() as u64,
                    range_error_single_m: median(&mut single_m)?,
                    range_error_table_m: median(&mut table_m)?,
                })
            },
        )
        .collect();
    (rows, skipped)
}

/// The gain state of the single-state calibration: the one most exchanges reported at the
/// verified attenuation nearest `atten_db` on the channel.
pub fn single_state_gain(
    checked: &[Checked],
    center_mhz: u32,
    bw_mhz: u32,
    atten_db: f64,
) -> Option<u32> {
    let on_channel = || {
        checked
            .iter()
            .filter(|c| c.center_mhz == center_mhz && c.bw_mhz == bw_mhz)
    };
    let nearest = on_channel()
        .map(|c| c.atten_db)
        .min_by(|a, b| (a - atten_db).abs().total_cmp(&(b - atten_db).abs()))?;
    let mut counts: BTreeMap<u32, u64> = BTreeMap::new();
    for c in on_channel().filter(|c| c.atten_db == nearest) {
        *counts.entry(c.gain_index).or_insert(0) += 1;
    }
    counts.into_iter().max_by_key(|(_, n)| *n).map(|(g, _)| g)
}

/// `verify.csv`'s header.
pub const VERIFY_HEADER: &str =
    "center_mhz,bw_mhz,atten_db,rx_power_dbm,equiv_distance_m,n,range_error_single_m,range_error_table_m";

/// `verify.csv` text.
pub fn verify_csv(rows: &[VerifyRow]) -> String {
    let mut out = format!("{VERIFY_HEADER}\n");
    for r in rows {
        out.push_str(&format!(
            "{},{},{},{:.2},{:.3},{},{:.4},{:.4}\n",
            r.center_mhz,
            r.bw_mhz,
            r.atten_db,
            r.rx_power_dbm,
            r.equiv_distance_m,
            r.n,
            r.range_error_single_m,
            r.range_error_table_m
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn free_space_loss_matches_itu_r_p525_worked_values() {
        // tests/data/SOURCES.md §3 (ITU-R P.525, exact constant 32.4477832 dB; values computed):
        // 2437 MHz: 40.1849 dB at 1 m, 60.1849 at 10 m; 5180 MHz: 46.7344 at 1 m, 56.2768 at 3 m;
        // 5500 MHz: 47.2550 at 1 m; 1 GHz over 1 km: 92.4478 dB.
        for (d, f, l) in [
            (1.0, 2437.0, 40.1849),
            (10.0, 2437.0, 60.1849),
            (1.0, 5180.0, 46.7344),
            (3.0, 5180.0, 56.2768),
            (1.0, 5500.0, 47.2550),
            (1000.0, 1000.0, 92.4478),
        ] {
            assert!(
                (free_space_loss_db(d, f) - l).abs() < 5e-5,
                "{d} m at {f} MHz"
            );
            assert!(
                (equivalent_distance_m(l, f) - d).abs() / d < 2e-5,
                "{l} dB at {f} MHz"
            );
        }
    }

    #[test]
    fn errors_are_medians_in_metres_per_level() {
        let table: BTreeMap<_, _> = [((5180, 80, 0), 2400.0), ((5180, 80, 1), 2650.0)].into();
        let single: BTreeMap<_, _> = [((5180, 80), 2400.0)].into();
        let mk = |atten_db, gain_index, k_ps| Checked {
            center_mhz: 5180,
            bw_mhz: 80,
            atten_db,
            gain_index,
            k_ps,
        };
        let checked = [
            mk(20.0, 0, 2410.0),
            mk(20.0, 0, 2390.0),
            mk(20.0, 0, 2400.0),
            mk(50.0, 1, 2650.0),
            mk(50.0, 1, 2660.0),
            mk(50.0, 2, 3000.0),
        ];
        let (rows, skipped) = verify(&checked, &table, &single, |a| (7.0 - a, 8.0 + a));
        assert_eq!(skipped, 1, "gain 2 has no table row");
        assert_eq!(rows.len(), 2);
        assert_eq!(rows[0].n, 3);
        assert!(rows[0].range_error_table_m.abs() < 1e-12);
        // Level 50 dB: medians 2655 ps against 2650 (table) and 2400 (single); c/2 per ps
        // (tests/data/SOURCES.md §8: 0.149896229 mm per ps of RTT).
        assert!((rows[1].range_error_table_m - 5.0 * 0.149_896_229e-3).abs() < 1e-9);
        assert!((rows[1].range_error_single_m - 255.0 * 0.149_896_229e-3).abs() < 1e-9);
        assert!((rows[1].rx_power_dbm + 43.0).abs() < 1e-12);
        assert_eq!(single_state_gain(&checked, 5180, 80, 47.0), Some(1));
        assert_eq!(single_state_gain(&checked, 5180, 80, 21.0), Some(0));
        assert_eq!(single_state_gain(&checked, 2437, 20, 21.0), None);
    }
}
