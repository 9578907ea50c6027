//! A plan's bench time, estimated before anything runs, so a user knows how long an overnight
//! recipe takes before starting it (`taucal check`, and the progress display's ETA).
//!
//! Pure: plan and bench in, estimate out. It walks the stages the way the runner does — an
//! attenuator change costs the switch time only when the setting changes, every point waits its
//! settle time, a burst costs its setup plus one frame interval per exchange, a gain map sweeps
//! its points up and then down, and the run ends by putting the attenuator at its safe (highest)
//! setting. What is decided only at run time is counted at its declared minimum and marked:
//! adaptive stages at their pilot bursts, mid-plateau stages (and the points of a `cells` stage,
//! after its map) at the gain states the recipe requires (or the simulation's AGC reaches),
//! scripts not at all.

use crate::bench::Bench;
use crate::recipe::{Cells, Plan, Points, Stage, Sweep};

/// Durations of the bench's actions and where they come from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Timing {
    /// Time from asking for a burst to its first exchange.
    pub burst_setup_ms: f64,
    /// Interval between exchanges of a burst.
    pub frame_interval_us: f64,
    /// Attenuator switching time.
    pub atten_switch_ms: f64,
    /// Where the durations come from.
    pub source: TimingSource,
}

/// Where an estimate's durations come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TimingSource {
    /// The simulation's truth: what a simulated bench's instruments spend.
    Simulation,
    /// The bench file's `[timing]`.
    BenchFile,
    /// The defaults, on a real bench whose file has no `[timing]`.
    Defaults,
}

impl Timing {
    /// The bench's timing: the simulation's truth on a simulated bench (what its instruments
    /// spend), else the bench file's `[timing]` (defaults where it has none).
    pub fn of(bench: &Bench) -> Timing {
        match bench.sim.as_ref().filter(|_| bench.is_simulated()) {
            Some(sim) => Timing {
                burst_setup_ms: sim.ftm.burst_setup_ms,
                frame_interval_us: sim.ftm.frame_interval_us,
                atten_switch_ms: sim.attenuator.switch_ms,
                source: TimingSource::Simulation,
            },
            None => {
                let facts = bench.timing.unwrap_or_default();
                Timing {
                    burst_setup_ms: facts.burst_setup_ms,
                    frame_interval_us: facts.frame_interval_us,
                    atten_switch_ms: facts.atten_switch_ms,
                    source: if bench.timing.is_some() {
                        TimingSource::BenchFile
                    } else {
                        TimingSource::Defaults
                    },
                }
            }
        }
    }

    fn burst_ms(&self, frames: u32) -> f64 {
        self.burst_setup_ms + f64::from(frames) * self.frame_interval_us / 1000.0
    }
}

/// How far an estimate can be trusted.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Bound {
    /// Everything is known before the run.
    Estimate,
    /// Counted at declared minimums: the run takes at least this long.
    AtLeast,
    /// Decided by a script's logic; not counted.
    Unknown,
}

/// One stage's share.
#[derive(Debug, Clone, PartialEq)]
pub struct StageEstimate {
    /// Stage name.
    pub name: String,
    /// Attenuation points visited (a gain map's in both directions).
    pub points: u64,
    /// Bursts run.
    pub bursts: u64,
    /// Exchanges recorded.
    pub exchanges: u64,
    /// Bench time, seconds.
    pub bench_s: f64,
    /// Whether the numbers are exact, minimums, or unknown.
    pub bound: Bound,
    /// Why they are minimums or unknown.
    pub note: Option<String>,
}

/// The whole plan's estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    /// Per stage, in order.
    pub stages: Vec<StageEstimate>,
    /// Bench time of the stages plus the final safe-state switch, seconds.
    pub bench_s: f64,
    /// The weakest bound of any stage.
    pub bound: Bound,
    /// The timing used.
    pub timing: Timing,
}

impl Estimate {
    /// Total exchanges counted.
    pub fn exchanges(&self) -> u64 {
        self.stages.iter().map(|s| s.exchanges).sum()
    }

    /// Total points counted.
    pub fn points(&self) -> u64 {
        self.stages.iter().map(|s| s.points).sum()
    }
}

/// Tracks the attenuator's setting as the plan moves it, to count switch time only on changes.
struct Walk {
    timing: Timing,
    atten_db: Option<f64>,
}

impl Walk {
    /// Bench time of one point with `bursts` bursts, in ms.
    fn point_ms(&mut self, sweep: &Sweep, db: f64, bursts: u32) -> f64 {
        self.visit_ms(db, sweep.settle_ms, bursts, sweep.frames)
    }

    /// Bench time of a visit to `db`: switching (when the setting changes), settling, bursts.
    fn visit_ms(&mut self, db: f64, settle_ms: f64, bursts: u32, frames: u32) -> f64 {
        let switch = if self.atten_db == Some(db) {
            0.0
        } else {
            self.timing.atten_switch_ms
        };
        self.atten_db = Some(db);
        switch + settle_ms + f64::from(bursts) * self.timing.burst_ms(frames)
    }

    /// A `cells` stage: its map both ways (known), then one pilot per gain state it will find
    /// (each at a setting known only after the map).
    fn cells(&mut self, c: &Cells, states: u64, why: &str) -> StageEstimate {
        let map: Vec<f64> = c
            .map_db
            .iter()
            .chain(c.map_db.iter().rev())
            .copied()
            .collect();
        let map_ms: f64 = map
            .iter()
            .map(|db| self.visit_ms(*db, c.settle_ms, c.map_bursts, c.frames))
            .sum();
        self.atten_db = None;
        let pilot_ms = c.settle_ms
            + self.timing.atten_switch_ms
            + f64::from(c.bursts) * self.timing.burst_ms(c.frames);
        let map_bursts = map.len() as u64 * u64::from(c.map_bursts);
        let pilot_bursts = states * u64::from(c.bursts);
        StageEstimate {
            name: c.name.clone(),
            points: map.len() as u64 + states,
            bursts: map_bursts + pilot_bursts,
            exchanges: (map_bursts + pilot_bursts) * u64::from(c.frames),
            bench_s: (map_ms + states as f64 * pilot_ms) / 1000.0,
            bound: Bound::AtLeast,
            note: Some(format!(
                "cells: a map of {} points each way, then a point for each of {states} gain \
                 states ({why}), counted at {} pilot bursts, at most {} each",
                c.map_db.len(),
                c.bursts,
                c.adaptive.max_bursts
            )),
        }
    }

    fn points(&mut self, name: &str, sweep: &Sweep, points: &[f64]) -> StageEstimate {
        let bench_ms: f64 = points
            .iter()
            .map(|db| self.point_ms(sweep, *db, sweep.bursts))
            .sum();
        let n = points.len() as u64;
        let bursts = n * u64::from(sweep.bursts);
        let adaptive = sweep.adaptive.is_some();
        StageEstimate {
            name: name.to_string(),
            points: n,
            bursts,
            exchanges: bursts * u64::from(sweep.frames),
            bench_s: bench_ms / 1000.0,
            bound: if adaptive {
                Bound::AtLeast
            } else {
                Bound::Estimate
            },
            note: adaptive.then(|| {
                format!(
                    "adaptive: counted at {} bursts per point, at most {} each",
                    sweep.bursts,
                    sweep.adaptive.map_or(0, |a| a.max_bursts)
                )
            }),
        }
    }
}

/// Estimates `plan` on `bench`.
pub fn estimate(plan: &Plan, bench: &Bench) -> Estimate {
    let timing = Timing::of(bench);
    // The simulated attenuator powers up at maximum attenuation; a real one's setting is
    // unknown until set.
    let mut walk = Walk {
        timing,
        atten_db: (timing.source == TimingSource::Simulation)
            .then_some(bench.attenuator.range_db[1]),
    };
    let mut stages = Vec::with_capacity(plan.stages.len());
    for stage in &plan.stages {
        let est = match stage {
            Stage::Sweep(s) => match &s.points {
                Points::Fixed(p) => walk.points(&s.name, s, p),
                Points::MidPlateau {
                    map_stage,
                    per_state,
                    ..
                } => {
                    let (states, why) = states_for(plan, bench, mapped_by(plan, map_stage));
                    // Where the plateau points fall is known only after the map; any of them
                    // differs from the setting before, so each point switches.
                    walk.atten_db = None;
                    let n = u64::from(*per_state) * states;
                    let per_point = s.settle_ms
                        + timing.atten_switch_ms
                        + f64::from(s.bursts) * timing.burst_ms(s.frames);
                    let bursts = n * u64::from(s.bursts);
                    StageEstimate {
                        name: s.name.clone(),
                        points: n,
                        bursts,
                        exchanges: bursts * u64::from(s.frames),
                        bench_s: n as f64 * per_point / 1000.0,
                        bound: Bound::AtLeast,
                        note: Some(format!(
                            "mid-plateau: {per_state} points for each of {states} gain states ({why})"
                        )),
                    }
                }
            },
            Stage::GainMap(s) => {
                let p = match &s.points {
                    Points::Fixed(p) => p.iter().chain(p.iter().rev()).copied().collect(),
                    Points::MidPlateau { .. } => Vec::new(),
                };
                walk.points(&s.name, s, &p)
            }
            Stage::Verify(v) => match &v.sweep.points {
                Points::Fixed(p) => walk.points(&v.sweep.name, &v.sweep, p),
                Points::MidPlateau { .. } => walk.points(&v.sweep.name, &v.sweep, &[]),
            },
            Stage::Soak(s) => StageEstimate {
                name: s.name.clone(),
                points: 0,
                bursts: 0,
                exchanges: 0,
                bench_s: s.stable_s,
                bound: Bound::AtLeast,
                note: Some(format!(
                    "soak: {} s settled at least; reaching {} °C depends on the chamber",
                    s.stable_s, s.setpoint_c
                )),
            },
            Stage::Cells(c) => {
                let (states, why) = states_for(plan, bench, Some(c.map_db.clone()));
                walk.cells(c, states, &why)
            }
            Stage::Script(s) => {
                walk.atten_db = None;
                StageEstimate {
                    name: s.name.clone(),
                    points: 0,
                    bursts: 0,
                    exchanges: 0,
                    bench_s: 0.0,
                    bound: Bound::Unknown,
                    note: Some("script: its bursts depend on its logic; not counted".into()),
                }
            }
        };
        stages.push(est);
    }
    let safe_db = bench.attenuator.range_db[1];
    let safe_ms = if walk.atten_db == Some(safe_db) {
        0.0
    } else {
        timing.atten_switch_ms
    };
    let bench_s = stages.iter().map(|s| s.bench_s).sum::<f64>() + safe_ms / 1000.0;
    let bound = stages
        .iter()
        .map(|s| s.bound)
        .max()
        .unwrap_or(Bound::Estimate)
        .min(Bound::AtLeast);
    Estimate {
        stages,
        bench_s,
        bound,
        timing,
    }
}

/// The points the gain-map stage `map_stage` sweeps.
fn mapped_by(plan: &Plan, map_stage: &str) -> Option<Vec<f64>> {
    plan.stages.iter().find_map(|s| match s {
        Stage::GainMap(m) if m.name == map_stage => match &m.points {
            Points::Fixed(p) => Some(p.clone()),
            Points::MidPlateau { .. } => None,
        },
        _ => None,
    })
}

/// How many gain states a map over the attenuations `mapped` will find: the states the
/// simulation's AGC reaches over the mapped levels on a simulated bench, and at least the
/// recipe's `min_gain_states`; one when nothing is declared.
fn states_for(plan: &Plan, bench: &Bench, mapped: Option<Vec<f64>>) -> (u64, String) {
    let declared = plan.accept.min_gain_states.map(u64::from);
    let simulated = bench
        .sim
        .as_ref()
        .filter(|_| bench.is_simulated())
        .zip(mapped)
        .map(|(sim, points)| {
            let levels: Vec<f64> = points.iter().map(|a| bench.dut_rx_dbm(*a)).collect();
            let lo = levels.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = levels.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            1 + sim
                .dut
                .gain_thresholds_dbm
                .iter()
                .filter(|t| (lo..hi).contains(*t))
                .count() as u64
        });
    match (simulated, declared) {
        (Some(s), Some(d)) if d > s => (d, "accept.min_gain_states".into()),
        (Some(s), _) => (
            s,
            "the simulated AGC's thresholds over the mapped levels".into(),
        ),
        (None, Some(d)) => (d, "accept.min_gain_states".into()),
        (None, None) => (
            1,
            "no gain-state count declared; set accept.min_gain_states".into(),
        ),
    }
}

/// A duration as a person reads it: seconds below two minutes, else hours and minutes.
pub fn human_duration(s: f64) -> String {
    if s < 120.0 {
        return format!("{s:.1} s");
    }
    let minutes = (s / 60.0).round() as u64;
    match minutes / 60 {
        0 => format!("{minutes} min"),
        h => format!("{h} h {:02} min", minutes % 60),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_read_as_seconds_then_hours_and_minutes() {
        assert_eq!(human_duration(15.73), "15.7 s");
        assert_eq!(human_duration(600.0), "10 min");
        assert_eq!(
            human_duration(3.0 * 3600.0 + 5.0 * 60.0 + 20.0),
            "3 h 05 min"
        );
    }
}
