//! The gain-state map: from exchanges taken while sweeping attenuation up and then down, each
//! DUT gain state's plateau and the AGC's switch points, hysteresis included.
//!
//! Two kinds of switch point are kept. Where this run *saw* the state change is where half of a
//! point's exchanges report the higher gain index, interpolated between neighbouring points per
//! sweep direction; it bounds the plateaus, since that is where the state held. Where the AGC
//! *switches* — its thresholds and their hysteresis, as a noiseless level would show them — is
//! fitted from every exchange's step from the state before it ([`crate::fit::switch_point`]): with
//! level noise the seen crossings move toward each other and read the hysteresis too narrow.

use crate::fit::level_spread::{pooled_noise_db, LevelSpread};
use crate::fit::switch_point::{fit_switch, SwitchFit, Trials};
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
    /// Usable exchanges that directly followed a usable one, per (state before, state reported):
    /// how often the AGC stepped, counted at the attenuation of the step.
    pub steps: BTreeMap<(u32, u32), u64>,
    /// The DUT's reported receive levels at this point.
    pub rssi: LevelSpread,
}

/// Counts one exchange's step into `steps`. `last` is the gain state the previous exchange
/// reported (`None` after an exchange that reported none, or at a stage's start: the step is
/// then unknown and not counted); it is updated to `gain`.
pub fn count_step(
    last: &mut Option<u32>,
    gain: Option<u32>,
    steps: &mut BTreeMap<(u32, u32), u64>,
) {
    if let (Some(from), Some(to)) = (*last, gain) {
        *steps.entry((from, to)).or_insert(0) += 1;
    }
    *last = gain;
}

/// Where the AGC moves between two neighbouring gain states.
#[derive(Debug, Clone, PartialEq)]
pub struct Switch {
    /// The lower gain index (stronger signals).
    pub below: u32,
    /// The higher gain index.
    pub above: u32,
    /// Attenuation at which half of this run's exchanges were seen to report `above`,
    /// attenuation rising (biased by level noise: see the module's notes).
    pub rising_db: Option<f64>,
    /// The same, attenuation falling.
    pub falling_db: Option<f64>,
    /// The AGC's switch points and hysteresis, fitted from the steps, with intervals.
    pub fit: Option<SwitchFit>,
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
    /// True when the DUT reported no gain index and the states were inferred from K's
    /// plateaus ([`crate::fit::infer_states`]); such a map has no fitted switch points.
    pub inferred: bool,
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
    let spreads: Vec<LevelSpread> = points.iter().map(|p| p.rssi).collect();
    let noise_db = pooled_noise_db(&spreads);
    let switches: Vec<Switch> = states
        .windows(2)
        .map(|w| Switch {
            below: w[0],
            above: w[1],
            rising_db: crossing(points, Pass::Rising, w[0]),
            falling_db: crossing(points, Pass::Falling, w[0]),
            fit: fit_between(points, w[0], w[1], noise_db),
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
    GainMap {
        plateaus,
        switches,
        inferred: false,
    }
}

/// Fits the switch points between `below` and `above` from every point's steps out of each.
fn fit_between(
    points: &[MapPoint],
    below: u32,
    above: u32,
    noise_db: Option<f64>,
) -> Option<SwitchFit> {
    let trials = |from: u32, leaves: &dyn Fn(u32) -> bool| -> Vec<Trials> {
        points
            .iter()
            .map(|p| {
                let out = p.steps.iter().filter(|((f, _), _)| *f == from);
                let (n, switched) = out.fold((0, 0), |(n, s), ((_, to), c)| {
                    (n + c, s + if leaves(*to) { *c } else { 0 })
                });
                Trials {
                    atten_db: p.atten_db,
                    n,
                    switched,
                }
            })
            .collect()
    };
    let up = trials(below, &|to| to > below);
    let down = trials(above, &|to| to < above);
    fit_switch(&up, &down, noise_db)
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
    use crate::fit::switch_point::Method;

    fn point(pass: Pass, atten_db: f64, counts: &[(u32, u64)]) -> MapPoint {
        MapPoint {
            pass,
            atten_db,
            ok_by_gain: counts.iter().copied().collect(),
            steps: BTreeMap::new(),
            rssi: LevelSpread::default(),
        }
    }

    /// Points from a sequence of (pass, attenuation, states reported there in order), steps
    /// counted across points as the runner counts them.
    fn points_from(seq: &[(Pass, f64, Vec<u32>)]) -> Vec<MapPoint> {
        let mut last = None;
        seq.iter()
            .map(|(pass, atten_db, states)| {
                let mut p = point(*pass, *atten_db, &[]);
                for &g in states {
                    *p.ok_by_gain.entry(g).or_insert(0) += 1;
                    count_step(&mut last, Some(g), &mut p.steps);
                }
                p
            })
            .collect()
    }

    /// An ideal AGC: thresholds at 30 and 50 dB of attenuation, each direction switching 1 dB
    /// past them (2 dB of hysteresis), seen at 2 dB steps with 10 exchanges per point.
    fn ideal() -> Vec<MapPoint> {
        let state = |a: f64, pass: Pass| {
            let shift = if pass == Pass::Rising { 1.0 } else { -1.0 };
            u32::from(a > 30.0 + shift) + u32::from(a > 50.0 + shift)
        };
        let mut seq = Vec::new();
        for pass in [Pass::Rising, Pass::Falling] {
            for i in 0..=30 {
                let i = if pass == Pass::Rising { i } else { 30 - i };
                let a = 10.0 + 2.0 * f64::from(i) + 0.5;
                seq.push((pass, a, vec![state(a, pass); 10]));
            }
        }
        points_from(&seq)
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
        // No noise: the steps separate perfectly, so each switch point is only bracketed by the
        // last exchange that stayed and the first that stepped, 2 dB apart.
        let fit = s.fit.expect("fitted");
        assert_eq!(fit.method, Method::Bracket);
        let up = fit.up_db.expect("up");
        let down = fit.down_db.expect("down");
        assert_eq!((up.value_db, up.ci95_db), (31.5, 1.0));
        assert_eq!((down.value_db, down.ci95_db), (29.5, 1.0));
        let h = fit.hysteresis_db.expect("hysteresis");
        assert_eq!((h.value_db, h.ci95_db), (2.0, 2.0));
        // The bracket reaches zero: 2 dB steps cannot show 2 dB of hysteresis for certain.
        assert_eq!(fit.resolved_hysteresis_db(), None);
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
        // Counts alone carry no steps: nothing to fit.
        assert_eq!(map.switches[0].fit, None);
    }

    #[test]
    fn steps_are_counted_only_between_reported_states() {
        let mut steps = BTreeMap::new();
        let mut last = None;
        for g in [Some(0), Some(0), Some(1), None, Some(1), Some(0)] {
            count_step(&mut last, g, &mut steps);
        }
        // 0→0, 0→1, then the lost exchange breaks the chain, then 1→0.
        let want: BTreeMap<(u32, u32), u64> = [((0, 0), 1), ((0, 1), 1), ((1, 0), 1)].into();
        assert_eq!(steps, want);
        assert_eq!(last, Some(0));
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
