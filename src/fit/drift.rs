//! Temperature drift of K: exchanges binned by reported temperature per cell, each bin's mean
//! K and standard error, then a weighted straight line of K against temperature per cell.
//!
//! Streaming: a bin keeps running sums (Welford), never its samples. Bins are 1 °C wide — finer
//! than a soak's stability band, coarse enough that a soak's exchanges share a bin.

use super::model::{drift_per_state, Observation};
use std::collections::BTreeMap;

/// (center_mhz, bw_mhz, gain_index).
type CellKey = (u32, u32, u32);

/// Width of a temperature bin.
const BIN_C: f64 = 1.0;

/// Running mean and spread (Welford) of K and temperature in one bin.
#[derive(Debug, Clone, Copy, Default)]
struct Bin {
    n: u64,
    mean_k: f64,
    m2_k: f64,
    mean_t: f64,
}

/// Temperature bins of every cell.
#[derive(Debug, Default)]
pub struct TempBins {
    bins: BTreeMap<(CellKey, i64), Bin>,
}

/// One cell's drift.
#[derive(Debug, Clone, PartialEq)]
pub struct DriftRow {
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// DUT gain index.
    pub gain_index: u32,
    /// Slope of K against DUT temperature.
    pub drift_ps_per_c: f64,
    /// Its standard error.
    pub se_ps_per_c: f64,
    /// Coolest bin's mean temperature.
    pub temp_min_c: f64,
    /// Warmest bin's mean temperature.
    pub temp_max_c: f64,
    /// Temperature bins used.
    pub n_temps: usize,
}

impl TempBins {
    /// Adds one exchange's delay at temperature `temp_c`.
    pub fn add(&mut self, cell: CellKey, temp_c: f64, k_ps: f64) {
        let key = (cell, (temp_c / BIN_C).round() as i64);
        let b = self.bins.entry(key).or_default();
        b.n += 1;
        let n = b.n as f64;
        let dk = k_ps - b.mean_k;
        b.mean_k += dk / n;
        b.m2_k += dk * (k_ps - b.mean_k);
        b.mean_t += (temp_c - b.mean_t) / n;
    }

    /// Adds the bins of `other`, which must hold other cells than these.
    pub fn merge(&mut self, other: TempBins) {
        self.bins.extend(other.bins);
    }

    /// The drift of every cell seen at three or more temperatures.
    pub fn drift(&self) -> Vec<DriftRow> {
        let mut by_channel: BTreeMap<(u32, u32), Vec<Observation>> = BTreeMap::new();
        for (((center, bw, gain), _), b) in &self.bins {
            if b.n < 2 {
                continue;
            }
            let sd = (b.m2_k / (b.n - 1) as f64).sqrt();
            by_channel
                .entry((*center, *bw))
                .or_default()
                .push(Observation {
                    gain_index: *gain,
                    temp_c: Some(b.mean_t),
                    delay_ps: b.mean_k,
                    se_ps: (sd / (b.n as f64).sqrt()).max(1e-3),
                });
        }
        let mut rows = Vec::new();
        for ((center_mhz, bw_mhz), obs) in by_channel {
            for d in drift_per_state(&obs) {
                let temps: Vec<f64> = obs
                    .iter()
                    .filter(|o| o.gain_index == d.gain_index)
                    .filter_map(|o| o.temp_c)
                    .collect();
                rows.push(DriftRow {
                    center_mhz,
                    bw_mhz,
                    gain_index: d.gain_index,
                    drift_ps_per_c: d.drift_ps_per_c,
                    se_ps_per_c: d.se_ps_per_c,
                    temp_min_c: temps.iter().copied().fold(f64::INFINITY, f64::min),
                    temp_max_c: temps.iter().copied().fold(f64::NEG_INFINITY, f64::max),
                    n_temps: d.n,
                });
            }
        }
        rows
    }
}

/// `drift.csv` text.
pub fn drift_csv(rows: &[DriftRow]) -> String {
    let mut out = String::from(
        "center_mhz,bw_mhz,gain_index,drift_ps_per_c,se_ps_per_c,temp_min_c,temp_max_c,n_temps\n",
    );
    for r in rows {
        out.push_str(&format!(
            "{},{},{},{:.3},{:.3},{:.2},{:.2},{}\n",
            r.center_mhz,
            r.bw_mhz,
            r.gain_index,
            r.drift_ps_per_c,
            r.se_ps_per_c,
            r.temp_min_c,
            r.temp_max_c,
            r.n_temps
        ));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn recovers_a_linear_drift_per_state() {
        // K = 2400 + 1.5·(T − 25) for state 0 and 2650 − 0.8·(T − 25) for state 1, three
        // temperatures, a symmetric ±10 ps pattern around each mean.
        let mut bins = TempBins::default();
        for t in [15.0, 25.0, 40.0] {
            for (gain, k0, slope) in [(0, 2400.0, 1.5), (1, 2650.0, -0.8)] {
                for d in [-10.0, 10.0, -5.0, 5.0] {
                    bins.add((5180, 80, gain), t + d / 100.0, k0 + slope * (t - 25.0) + d);
                }
            }
        }
        let rows = bins.drift();
        assert_eq!(rows.len(), 2);
        assert!((rows[0].drift_ps_per_c - 1.5).abs() < 0.05, "{:?}", rows[0]);
        assert!((rows[1].drift_ps_per_c + 0.8).abs() < 0.05, "{:?}", rows[1]);
        assert_eq!(rows[0].n_temps, 3);
        assert!((rows[0].temp_min_c - 15.0).abs() < 0.1 && (rows[0].temp_max_c - 40.0).abs() < 0.1);
    }

    #[test]
    fn one_temperature_gives_no_drift() {
        let mut bins = TempBins::default();
        for d in [1.0, 2.0, 3.0] {
            bins.add((5180, 80, 0), 25.0, 2400.0 + d);
        }
        assert!(bins.drift().is_empty());
    }
}
