//! Per-cell statistics across units: mean, SD, percentiles, the 95 %/95 % normal tolerance
//! interval, and the SD split into measurement noise and true unit spread.

use super::centred::{key, CellKey};
use super::tolerance::exact_factor;
use crate::fit::stats::{mean, sample_sd};
use crate::store::FleetCell;
use std::collections::{BTreeMap, HashMap};

/// Proportion of units the tolerance interval covers.
pub const TOL_PROPORTION: f64 = 0.95;
/// Confidence of the tolerance interval.
pub const TOL_CONFIDENCE: f64 = 0.95;
/// The normal quantile that turns a 95 % half-width back into a standard uncertainty.
const Z95: f64 = 1.959_964;

/// One cell over the fleet. Values that need more units than the cell has are NaN.
#[derive(Debug, Clone, PartialEq)]
pub struct CellStats {
    /// The cell.
    pub cell: CellKey,
    /// Units with this cell.
    pub units: usize,
    /// Mean K, ps.
    pub mean_ps: f64,
    /// Sample SD of K across units, ps.
    pub sd_ps: f64,
    /// 5th percentile, ps.
    pub p05_ps: f64,
    /// Median, ps.
    pub p50_ps: f64,
    /// 95th percentile, ps.
    pub p95_ps: f64,
    /// Tolerance interval's lower end, ps.
    pub tol_lo_ps: f64,
    /// Tolerance interval's upper end, ps.
    pub tol_hi_ps: f64,
    /// Measurement noise: RMS of the units' standard uncertainties (ci95 / 1.96), ps.
    pub noise_sd_ps: f64,
    /// True unit spread: √(sd² − noise²), zero when the noise explains all of the SD, ps.
    pub unit_sd_ps: f64,
}

/// Percentile `q` (0..1) of sorted `v`, interpolated between order statistics (Hyndman & Fan
/// 1996, definition 7, the default of R and NumPy).
pub fn percentile(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// Statistics of every cell, by cell.
pub fn cell_stats(cells: &[FleetCell]) -> Vec<CellStats> {
    let mut by_cell: BTreeMap<CellKey, (Vec<f64>, Vec<f64>)> = BTreeMap::new();
    for c in cells {
        let e = by_cell.entry(key(c)).or_default();
        e.0.push(c.delay_ps);
        e.1.push(c.ci95_ps);
    }
    // Cells usually share their unit count: each factor is an integral, computed once.
    let mut factors: HashMap<usize, f64> = HashMap::new();
    by_cell
        .into_iter()
        .map(|(cell, (mut k, ci))| {
            k.sort_by(f64::total_cmp);
            let n = k.len();
            let m = mean(&k).unwrap_or(f64::NAN);
            let sd = sample_sd(&k).unwrap_or(f64::NAN);
            let factor = *factors.entry(n).or_insert_with(|| {
                exact_factor(n, TOL_PROPORTION, TOL_CONFIDENCE).unwrap_or(f64::NAN)
            });
            let noise_var = ci.iter().map(|c| (c / Z95).powi(2)).sum::<f64>() / n as f64;
            CellStats {
                cell,
                units: n,
                mean_ps: m,
                sd_ps: sd,
                p05_ps: percentile(&k, 0.05),
                p50_ps: percentile(&k, 0.50),
                p95_ps: percentile(&k, 0.95),
                tol_lo_ps: m - factor * sd,
                tol_hi_ps: m + factor * sd,
                noise_sd_ps: noise_var.sqrt(),
                unit_sd_ps: (sd * sd - noise_var).max(0.0).sqrt(),
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn percentiles_follow_definition_7() {
        // Hyndman & Fan (1996) definition 7 on 1..=5: the 5th percentile is 1 + 0.2 = 1.2
        // (as R's quantile(1:5, 0.05) and NumPy's default give).
        let v = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert!((percentile(&v, 0.05) - 1.2).abs() < 1e-12);
        assert_eq!(percentile(&v, 0.5), 3.0);
        assert!((percentile(&v, 0.95) - 4.8).abs() < 1e-12);
    }

    #[test]
    fn noise_is_taken_out_of_the_spread() {
        // Two units 60 ps apart (SD 42.43 ps), each measured to ±19.6 ps (u = 10 ps): the
        // unit spread is √(1800 − 100) = 41.23 ps.
        let cell = |serial: &str, k: f64| FleetCell {
            serial: serial.into(),
            station: "a".into(),
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index: 0,
            delay_ps: k,
            ci95_ps: 19.59964,
            exchanges: 160,
        };
        let s = cell_stats(&[cell("A", 2000.0), cell("B", 2060.0)]);
        assert_eq!(s.len(), 1);
        assert!((s[0].noise_sd_ps - 10.0).abs() < 1e-4);
        assert!((s[0].unit_sd_ps - 1700f64.sqrt()).abs() < 1e-3, "{s:?}");
        assert!(s[0].tol_lo_ps < 2000.0 && s[0].tol_hi_ps > 2060.0);
    }
}
