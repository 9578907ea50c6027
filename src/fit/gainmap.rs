//! The gain-state map: from exchanges taken while sweeping attenuation up and then down, each
//! DUT gain state's plateau and the AGC's switch points, hysteresis included.
//!
//! A switch point is where half of the exchanges report the higher gain index. It is found per
//! sweep direction by interpolating that share between neighbouring points, so it resolves finer
//! than the sweep step. With hysteresis the AGC switches later in each direction; the midpoint of
//! the two directions estimates the threshold, their difference the hysteresis.

use std::collections::{BTreeMap, BTreeSet};

/// Direction of a mapping pass.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Pass {
    /// Attenuation increasing: the signal weakens, the AGC steps to higher gain.
    Rising,
    /// Attenuation decreasing: the signal strengthens, the AGC steps back.
    Falling,
}

/// What one mapping point saw.
#[derive(Debug, Clone, PartialEq)]
pub struct MapPoint {
    /// Direction of the pass it belongs to.
    pub pass: Pass,
    /// Attenuator setting.
    pub atten_db: f64,
    /// Usable exchanges per reported DUT gain index.
    pub ok_by_gain: BTreeMap<u32, u64>,
}

/// Where the AGC moves between two neighbouring gain states.
#[derive(Debug, Clone, PartialEq)]
pub struct Switch {
    /// The lower gain index (stronger signals).
    pub below: u32,
    /// The higher gain index.
    pub above: u32,
    /// Attenuation at which half the exchanges report `above`, attenuation rising.
    pub rising_db: Option<f64>,
    /// The same, attenuation falling.
    pub falling_db: Option<f64>,
}

impl Switch {
    /// Best estimate of the switch attenuation: the midpoint of both directions where both exist.
    pub fn center_db(&self) -> Option<f64> {
        match (self.rising_db, self.falling_db) {
            (Some(r), Some(f)) => Some((r + f) / 2.0),
            (r, f) => r.or(f),
        }
    }

    /// Hysteresis width in dB, when both directions were mapped.
    pub fn hysteresis_db(&self) -> Option<f64> {
        Some(self.rising_db? - self.falling_db?)
    }
}

/// One gain state's plateau: the attenuations where it holds whichever way the sweep came.
#[derive(Debug, Clone, PartialEq)]
pub struct Plateau {
    /// Gain index.
    pub gain_index: u32,
    /// Lowest attenuation of the plateau.
    pub atten_min_db: f64,
    /// Highest attenuation of the plateau.
    pub atten_max_db: f64,
}

impl Plateau {
    /// `count` points spread over the plateau's middle, at least `margin_db` inside each end
    /// (its center when it is narrower than that), snapped to `step_db`.
    pub fn points_db(&self, count: u32, margin_db: f64, step_db: f64) -> Vec<f64> {
        let (lo, hi) = (self.atten_min_db + margin_db, self.atten_max_db - margin_db);
        let snap = |x: f64| (x / step_db).round() * step_db;
        let mut pts: Vec<f64> = if hi <= lo || count <= 1 {
            vec![snap((self.atten_min_db + self.atten_max_db) / 2.0)]
        } else {
            (0..count)
                .map(|i| snap(lo + (hi - lo) * f64::from(i) / f64::from(count - 1)))
                .collect()
        };
        pts.dedup_by(|a, b| (*a - *b).abs() < step_db / 2.0);
        pts
    }
}

/// The map of one channel.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct GainMap {
    /// Plateaus in gain-index order.
    pub plateaus: Vec<Plateau>,
    /// Switch points between neighbouring states, in gain-index order.
    pub switches: Vec<Switch>,
}

/// Builds the map from a rising and a falling pass (either may be absent).
pub fn analyse(points: &[MapPoint]) -> GainMap {
    let majority = |p: &MapPoint| {
        p.ok_by_gain
            .iter()
            .max_by_key(|(_, n)| **n)
            .map(|(g, _)| *g)
    };
    let states: BTreeSet<u32> = points.iter().filter_map(majority).collect();
    let states: Vec<u32> = states.into_iter().collect();
    let switches: Vec<Switch> = states
        .windows(2)
        .map(|w| Switch {
            below: w[0],
            above: w[1],
            rising_db: crossing(points, Pass::Rising, w[0]),
            falling_db: crossing(points, Pass::Falling, w[0]),
        })
        .collect();
    let mut plateaus = Vec::with_capacity(states.len());
    for (i, &g) in states.iter().enumerate() {
        let seen: Vec<f64> = points
            .iter()
            .filter(|p| majority(p) == Some(g))
            .map(|p| p.atten_db)
            .collect();
        let first = seen.iter().copied().fold(f64::INFINITY, f64::min);
        let last = seen.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let lo = match i.checked_sub(1).and_then(|j| switches.get(j)) {
            Some(s) => [s.rising_db, s.falling_db]
                .into_iter()
                .flatten()
                .fold(first, f64::max),
            None => first,
        };
        let hi = match switches.get(i) {
            Some(s) => [s.rising_db, s.falling_db]
                .into_iter()
                .flatten()
                .fold(last, f64::min),
            None => last,
        };
        if lo.is_finite() && hi.is_finite() && lo <= hi {
            plateaus.push(Plateau {
                gain_index: g,
                atten_min_db: lo,
                atten_max_db: hi,
            });
        }
    }
    GainMap { plateaus, switches }
}

/// Attenuation where the share of exchanges above gain `below` first reaches one half, in one
/// pass, interpolated linearly between neighbouring points.
fn crossing(points: &[MapPoint], pass: Pass, below: u32) -> Option<f64> {
    let mut pts: Vec<(f64, f64)> = points
        .iter()
        .filter(|p| p.pass == pass)
        .filter_map(|p| {
            let total: u64 = p.ok_by_gain.values().sum();
            let above: u64 = p.ok_by_gain.range(below + 1..).map(|(_, n)| n).sum();
            (total > 0).then(|| (p.atten_db, above as f64 / total as f64))
        })
        .collect();
    pts.sort_by(|a, b| a.0.total_cmp(&b.0));
    pts.windows(2).find_map(|w| {
        let ((a0, f0), (a1, f1)) = (w[0], w[1]);
        (f0 < 0.5 && f1 >= 0.5).then(|| a0 + (0.5 - f0) / (f1 - f0) * (a1 - a0))
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn point(pass: Pass, atten_db: f64, counts: &[(u32, u64)]) -> MapPoint {
        MapPoint {
            pass,
            atten_db,
            ok_by_gain: counts.iter().copied().collect(),
        }
    }

    /// An ideal AGC: thresholds at 30 and 50 dB of attenuation, each direction switching 1 dB
    /// past them (2 dB of hysteresis), seen at 2 dB steps with 10 exchanges per point.
    fn ideal() -> Vec<MapPoint> {
        let state = |a: f64, pass: Pass| {
            let shift = if pass == Pass::Rising { 1.0 } else { -1.0 };
            u32::from(a > 30.0 + shift) + u32::from(a > 50.0 + shift)
        };
        let mut pts = Vec::new();
        for pass in [Pass::Rising, Pass::Falling] {
            for i in 0..=30 {
                let a = 10.0 + 2.0 * f64::from(i) + 0.5;
                pts.push(point(pass, a, &[(state(a, pass), 10)]));
            }
        }
        pts
    }

    #[test]
    fn finds_plateaus_switches_and_hysteresis() {
        let map = analyse(&ideal());
        assert_eq!(map.switches.len(), 2);
        let s = &map.switches[0];
        // Rising: last state-0 point 30.5, first state-1 point 32.5: the share jumps 0 → 1, so
        // the half-way interpolation lands at their midpoint, 31.5 dB (true switch 31 dB).
        assert_eq!(s.rising_db, Some(31.5));
        assert_eq!(s.falling_db, Some(29.5));
        assert_eq!(s.center_db(), Some(30.5));
        assert_eq!(s.hysteresis_db(), Some(2.0));
        assert_eq!(map.plateaus.len(), 3);
        assert_eq!(map.plateaus[0].atten_min_db, 10.5);
        assert_eq!(map.plateaus[0].atten_max_db, 29.5);
        assert_eq!(map.plateaus[1].atten_min_db, 31.5);
        assert_eq!(map.plateaus[1].atten_max_db, 49.5);
        assert_eq!(map.plateaus[2].atten_max_db, 70.5);
    }

    #[test]
    fn a_mixed_point_interpolates_the_half_way_share() {
        let pts = vec![
            point(Pass::Rising, 40.0, &[(0, 10)]),
            point(Pass::Rising, 41.0, &[(0, 8), (1, 2)]),
            point(Pass::Rising, 42.0, &[(0, 2), (1, 8)]),
            point(Pass::Rising, 43.0, &[(1, 10)]),
        ];
        let map = analyse(&pts);
        // Share above state 0 is 0.2 at 41 dB and 0.8 at 42 dB: half way at 41.5 dB.
        assert_eq!(map.switches[0].rising_db, Some(41.5));
        assert_eq!(map.switches[0].falling_db, None);
        assert_eq!(map.switches[0].center_db(), Some(41.5));
    }

    #[test]
    fn calibration_points_sit_mid_plateau() {
        let p = Plateau {
            gain_index: 1,
            atten_min_db: 31.5,
            atten_max_db: 49.5,
        };
        assert_eq!(p.points_db(3, 3.0, 0.25), vec![34.5, 40.5, 46.5]);
        assert_eq!(p.points_db(1, 3.0, 0.25), vec![40.5]);
        let narrow = Plateau {
            gain_index: 1,
            atten_min_db: 40.0,
            atten_max_db: 41.0,
        };
        assert_eq!(narrow.points_db(3, 2.0, 0.25), vec![40.5]);
    }

    #[test]
    fn no_points_no_map() {
        assert_eq!(analyse(&[]), GainMap::default());
    }
}
