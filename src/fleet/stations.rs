//! Station bias: each station's offset against the fleet, from its units' cell-centred
//! deviations, referred to the median station so one biased station cannot drag the others.
//!
//! A station's raw offset is the mean deviation of its units (standard error s/√n). The
//! reference is the median of the raw offsets (the middle station, or the mean of the middle
//! two). Stations hold different units, so their means are independent and the variance of
//! `raw − reference` is Σⱼ (δᵢⱼ − wⱼ)² seⱼ², wⱼ the reference's weights; its degrees of
//! freedom follow Welch–Satterthwaite (GUM G.4), and the 95 % interval uses Student's t.

use super::centred::UnitDeviation;
use crate::fit::stats::{mean, sample_sd, t975};
use std::collections::BTreeMap;

/// The default smallest offset worth flagging, ps.
pub const DEFAULT_THRESHOLD_PS: f64 = 20.0;

/// One station's line.
#[derive(Debug, Clone, PartialEq)]
pub struct StationOffset {
    /// The station.
    pub station: String,
    /// Units whose latest accepted run was on it.
    pub units: usize,
    /// Its offset against the median station, ps.
    pub offset_ps: f64,
    /// 95 % half-width of the offset, ps (NaN when too few units to tell).
    pub ci95_ps: f64,
    /// Whether the interval excludes zero and |offset| exceeds the threshold.
    pub flagged: bool,
    /// Whether it is (one of) the median station(s) the others are referred to.
    pub reference: bool,
}

/// Every station's offset, by name; flagged beyond `threshold_ps`.
pub fn station_offsets(units: &[UnitDeviation], threshold_ps: f64) -> Vec<StationOffset> {
    let mut by_station: BTreeMap<&str, Vec<f64>> = BTreeMap::new();
    for u in units {
        by_station
            .entry(u.station.as_str())
            .or_default()
            .push(u.deviation_ps);
    }
    // (name, n, raw mean, standard error of the mean)
    let raw: Vec<(&str, usize, f64, f64)> = by_station
        .iter()
        .map(|(s, d)| {
            let n = d.len();
            let se = sample_sd(d).map_or(f64::NAN, |sd| sd / (n as f64).sqrt());
            (*s, n, mean(d).unwrap_or(f64::NAN), se)
        })
        .collect();
    let weights = median_weights(&raw.iter().map(|r| r.2).collect::<Vec<_>>());
    let reference: f64 = raw.iter().zip(&weights).map(|(r, w)| w * r.2).sum();
    raw.iter()
        .enumerate()
        .map(|(i, &(station, n, m, _))| {
            // Each station's term in raw_i − reference, and its share of the variance.
            let terms: Vec<(f64, usize)> = raw
                .iter()
                .enumerate()
                .map(|(j, r)| {
                    let c = f64::from(u8::from(i == j)) - weights[j];
                    (c * c * r.3 * r.3, r.1)
                })
                .filter(|(v, _)| *v != 0.0)
                .collect();
            let var: f64 = terms.iter().map(|t| t.0).sum();
            let dof_den: f64 = terms.iter().map(|&(v, n)| v * v / (n as f64 - 1.0)).sum();
            let ci95 = if terms.is_empty() {
                0.0
            } else {
                t975(var * var / dof_den).map_or(f64::NAN, |t| t * var.sqrt())
            };
            let offset = m - reference;
            StationOffset {
                station: station.to_string(),
                units: n,
                offset_ps: offset,
                ci95_ps: ci95,
                flagged: offset.abs() > ci95 && offset.abs() > threshold_ps,
                reference: weights[i] > 0.0,
            }
        })
        .collect()
}

/// Weights that make the median of `v`: 1 on the middle value, or ½ on each of the middle two.
fn median_weights(v: &[f64]) -> Vec<f64> {
    let mut order: Vec<usize> = (0..v.len()).collect();
    order.sort_by(|&a, &b| v[a].total_cmp(&v[b]));
    let mut w = vec![0.0; v.len()];
    let n = v.len();
    if n == 0 {
        return w;
    }
    if n % 2 == 1 {
        w[order[n / 2]] = 1.0;
    } else {
        w[order[n / 2 - 1]] = 0.5;
        w[order[n / 2]] = 0.5;
    }
    w
}

#[cfg(test)]
mod tests {
    use super::*;

    fn unit(station: &str, d: f64) -> UnitDeviation {
        UnitDeviation {
            serial: format!("{station}-{d}"),
            station: station.into(),
            deviation_ps: d,
            cells: 1,
            worst_cell: (5180, 80, 0),
            worst_z: 0.0,
        }
    }

    #[test]
    fn one_biased_station_does_not_drag_the_others() {
        // Four stations at 0 ± 1 ps and one at +80: the median station is one of the four,
        // so they stay near zero and only the fifth is flagged, at +80.
        let mut units = Vec::new();
        for (s, base) in [("a", 0.0), ("b", 0.5), ("c", -0.5), ("d", 0.2), ("e", 80.0)] {
            for k in [-1.0, 0.0, 1.0] {
                units.push(unit(s, base + k));
            }
        }
        let out = station_offsets(&units, DEFAULT_THRESHOLD_PS);
        let flagged: Vec<&str> = out
            .iter()
            .filter(|o| o.flagged)
            .map(|o| o.station.as_str())
            .collect();
        assert_eq!(flagged, ["e"]);
        let e = out.iter().find(|o| o.station == "e").expect("e");
        assert!((e.offset_ps - 79.8).abs() < 1e-9, "{e:?}");
        assert_eq!(out.iter().filter(|o| o.reference).count(), 1);
    }

    #[test]
    fn an_even_count_refers_to_the_middle_two() {
        assert_eq!(median_weights(&[3.0, 1.0, 4.0, 2.0]), [0.5, 0.0, 0.0, 0.5]);
    }
}
