//! Gain states for the rows of a device that reports none: each row labelled with the state
//! inferred for it ([`crate::fit::infer_states`]), so the table is fitted per state as usual.
//!
//! Rows are gathered into visits (stage, point, channel) in file order, each burst's rows
//! de-embedded together (the clock-rate correction needs the whole burst). States are inferred
//! per channel from the visits of the stages that fit the table; the rows of those visits take
//! their visit's state, except visits near a switch, whose rows are left unlabelled (the fitter
//! then does not use them) rather than guessed. Verification visits are labelled by level
//! against the inferred map; inside a switch's unsure span they are not labelled, so not
//! judged: their state could only be guessed from the very K being judged, and a burst sorted
//! by its K into the nearer state makes the table look better than it is.
//!
//! When any usable row reports a gain index the device is taken to report it, nothing is
//! inferred and no row is relabelled. Pure: rows in, labels out.

use crate::data::{Exchange, STATUS_OK};
use crate::fit::device_rtt::{timing, Timing};
use crate::fit::fitter::burst_delays;
use crate::fit::infer_states::{infer_states, Approach, Burst, InferredStates, Visit, VisitState};
use crate::fit::Deembed;
use std::collections::{BTreeMap, HashMap};

/// (center_mhz, bw_mhz).
pub type ChannelKey = (u32, u32);

/// (stage, point, center_mhz, bw_mhz): one visit.
type VisitKey = (String, u32, u32, u32);

/// What is gathered of one visit.
struct Gathered {
    atten_db: f64,
    approach: Approach,
    verifies: bool,
    /// The stage's number, in order of first appearance.
    group: u32,
    /// Burst number and its rows' K and frames.
    bursts: Vec<(u32, Burst)>,
}

/// Gathers rows' K per visit, in file order; [`finish`](StateCollector::finish) infers.
pub struct StateCollector {
    deembed: Deembed,
    verify_stages: Vec<String>,
    burst: Vec<Exchange>,
    visits: Vec<(VisitKey, Gathered)>,
    index: HashMap<VisitKey, usize>,
    /// The attenuation of the last visit per (stage, channel): how the next was approached.
    last_atten: HashMap<(String, ChannelKey), f64>,
    reported_gain: bool,
    /// Stages in order of first appearance.
    stages: Vec<String>,
}

impl StateCollector {
    /// A collector de-embedding as `deembed`; rows of `verify_stages` verify, the rest fit.
    pub fn new(deembed: Deembed, verify_stages: &[String]) -> Self {
        Self {
            deembed,
            verify_stages: verify_stages.to_vec(),
            burst: Vec::new(),
            visits: Vec::new(),
            index: HashMap::new(),
            last_atten: HashMap::new(),
            reported_gain: false,
            stages: Vec::new(),
        }
    }

    /// True once a usable row has reported a gain index: nothing is to be inferred.
    pub fn reported_gain(&self) -> bool {
        self.reported_gain
    }

    /// Takes one row, in file order.
    pub fn push(&mut self, x: &Exchange) {
        if x.status == STATUS_OK && x.dut_gain.is_some() && x.is_timed() {
            self.reported_gain = true;
        }
        let same = self
            .burst
            .first()
            .is_some_and(|b| b.stage == x.stage && b.point == x.point && b.burst == x.burst);
        if !same {
            self.close_burst();
        }
        self.burst.push(x.clone());
    }

    /// Files the buffered burst's K under its visit.
    fn close_burst(&mut self) {
        let Some(first) = self.burst.first() else {
            return;
        };
        let key: VisitKey = (
            first.stage.clone(),
            first.point,
            first.center_mhz,
            first.bw_mhz,
        );
        let (atten_db, burst_no) = (first.atten_db, first.burst);
        let frames: u32 = self
            .burst
            .iter()
            .filter(|x| x.status == STATUS_OK)
            .map(|x| x.frames.max(1))
            .sum();
        // K does not depend on the DUT's gain index; the delays are asked for rows that carry
        // one only because table rows need it, so the gainless rows get a stand-in.
        let rows: Vec<Exchange> = self
            .burst
            .drain(..)
            .map(|x| Exchange {
                dut_gain: Some(0),
                ..x
            })
            .collect();
        let counted = rows
            .iter()
            .filter(|x| {
                x.status == STATUS_OK
                    && matches!(timing(x, self.deembed.applied_k_ps), Timing::Counters(_))
            })
            .count();
        // A timestamped burst needs two exchanges for its own clock-rate ratio; a fallback of
        // none would shift its K by the turnaround times the offset, a nanosecond at 8 ppm.
        let ks: Vec<f64> = if counted == 1 {
            Vec::new()
        } else {
            burst_delays(&self.deembed, &rows, 1.0)
                .into_iter()
                .flatten()
                .collect()
        };
        let i = match self.index.get(&key) {
            Some(&i) => i,
            None => {
                let lane = (key.0.clone(), (key.2, key.3));
                let approach = match self.last_atten.insert(lane, atten_db) {
                    Some(before) if before < atten_db => Approach::Rising,
                    Some(before) if before > atten_db => Approach::Falling,
                    _ => Approach::Unknown,
                };
                let group = self.stage_number(&key.0);
                self.visits.push((
                    key.clone(),
                    Gathered {
                        atten_db,
                        approach,
                        verifies: self.verify_stages.contains(&key.0),
                        group,
                        bursts: Vec::new(),
                    },
                ));
                self.index.insert(key, self.visits.len() - 1);
                self.visits.len() - 1
            }
        };
        self.visits[i]
            .1
            .bursts
            .push((burst_no, Burst { k_ps: ks, frames }));
    }

    /// The number of `stage`, in order of first appearance.
    fn stage_number(&mut self, stage: &str) -> u32 {
        match self.stages.iter().position(|s| s == stage) {
            Some(i) => i as u32,
            None => {
                self.stages.push(stage.to_string());
                self.stages.len() as u32 - 1
            }
        }
    }

    /// Infers the states and labels the bursts; `None` when the device reported gain indices.
    pub fn finish(mut self) -> Option<StateLabels> {
        self.close_burst();
        if self.reported_gain {
            return None;
        }
        let mut channels: BTreeMap<ChannelKey, Vec<usize>> = BTreeMap::new();
        for (i, (key, _)) in self.visits.iter().enumerate() {
            channels.entry((key.2, key.3)).or_default().push(i);
        }
        let mut labels = StateLabels {
            by_burst: HashMap::new(),
            channels: BTreeMap::new(),
            near_switch_bursts: 0,
            unsure_verify_bursts: 0,
        };
        for (channel, members) in channels {
            let fitting: Vec<usize> = members
                .iter()
                .copied()
                .filter(|&i| !self.visits[i].1.verifies)
                .collect();
            let visits: Vec<Visit> = fitting
                .iter()
                .map(|&i| {
                    let g = &self.visits[i].1;
                    Visit {
                        atten_db: g.atten_db,
                        approach: g.approach,
                        group: g.group,
                        bursts: g.bursts.iter().map(|(_, b)| b.clone()).collect(),
                    }
                })
                .collect();
            let states = infer_states(&visits);
            for (&i, state) in fitting.iter().zip(&states.visits) {
                let (key, g) = &self.visits[i];
                for (burst, _) in &g.bursts {
                    let label = match *state {
                        VisitState::In(s) => Some(s),
                        VisitState::NearSwitch { .. } => {
                            labels.near_switch_bursts += 1;
                            None
                        }
                        VisitState::Empty => None,
                    };
                    labels.by_burst.insert(burst_key(key, *burst), label);
                }
            }
            for &i in members.iter().filter(|&&i| self.visits[i].1.verifies) {
                let (key, g) = &self.visits[i];
                for (burst, _) in &g.bursts {
                    let label = match states.state_at(g.atten_db) {
                        _ if states.states.is_empty() => None,
                        Ok(s) => Some(s),
                        Err(_) => {
                            labels.unsure_verify_bursts += 1;
                            None
                        }
                    };
                    labels.by_burst.insert(burst_key(key, *burst), label);
                }
            }
            labels.channels.insert(channel, states);
        }
        Some(labels)
    }
}

/// (stage, point, burst, center_mhz, bw_mhz): one burst.
type BurstKey = (String, u32, u32, u32, u32);

fn burst_key(visit: &VisitKey, burst: u32) -> BurstKey {
    (visit.0.clone(), visit.1, burst, visit.2, visit.3)
}

/// The inferred state of every burst, and the inferred states per channel.
#[derive(Debug, Clone, PartialEq)]
pub struct StateLabels {
    by_burst: HashMap<BurstKey, Option<u32>>,
    /// Per channel, the states inferred from the fitting stages.
    pub channels: BTreeMap<ChannelKey, InferredStates>,
    /// Bursts of fitting visits near a switch, left unlabelled.
    pub near_switch_bursts: u64,
    /// Bursts of verification visits inside a switch's unsure span, left unlabelled.
    pub unsure_verify_bursts: u64,
}

impl StateLabels {
    /// The inferred state of `x`'s burst, if it has one.
    pub fn label(&self, x: &Exchange) -> Option<u32> {
        let key = (x.stage.clone(), x.point, x.burst, x.center_mhz, x.bw_mhz);
        self.by_burst.get(&key).copied().flatten()
    }

    /// Sets `x`'s gain index to its inferred state where it reports none.
    pub fn apply(&self, x: &mut Exchange) {
        if x.dut_gain.is_none() {
            x.dut_gain = self.label(x);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::{PathFacts, PerGain};

    const CABLE_PS: f64 = 5000.0;
    const K_REF_PS: f64 = 2800.0;

    fn deembed() -> Deembed {
        let path = PathFacts {
            cable_delay_ps: CABLE_PS,
            fixed_loss_db: 8.0,
            atten_delay_ps_per_db: 0.0,
        };
        Deembed::new(&path, PerGain::Same(K_REF_PS))
    }

    /// A burst-averaged row whose K is `k_ps` (RTT = 2·cable + K_ref + K), with no gain.
    fn row(stage: &str, point: u32, burst: u32, atten_db: f64, k_ps: f64) -> Exchange {
        Exchange {
            stage: stage.into(),
            point,
            burst,
            atten_db,
            center_mhz: 5180,
            bw_mhz: 80,
            rtt_ps: Some(2.0 * CABLE_PS + K_REF_PS + k_ps),
            frames: 16,
            status: STATUS_OK.into(),
            ..Exchange::default()
        }
    }

    /// A sweep of two states switching at 40 dB (K 2400 / 2700 ps, ±8 ps wiggle; the visit at
    /// 41 dB mixes them), then a verification at 20, 40 and 60 dB with bursts of each state at
    /// 40 dB.
    fn rows() -> Vec<Exchange> {
        let mut out = Vec::new();
        for p in 0..20u32 {
            let a = 21.0 + 2.0 * f64::from(p);
            for b in 0..3u32 {
                let wiggle = [-8.0, 0.0, 8.0][((p + b) % 3) as usize];
                // At 41 dB one burst of three is still in the stronger-signal state.
                let k = if a < 40.0 || (a == 41.0 && b == 0) {
                    2400.0
                } else {
                    2700.0
                };
                out.push(row("sweep", p, b, a, k + wiggle));
            }
        }
        for (p, a, ks) in [
            (0, 20.0, [2405.0, 2395.0]),
            (1, 40.0, [2690.0, 2410.0]),
            (2, 60.0, [2395.0, 2710.0]),
        ] {
            for (b, k) in ks.into_iter().enumerate() {
                out.push(row("check", p, b as u32, a, k));
            }
        }
        out
    }

    fn labels(rows: &[Exchange]) -> Option<StateLabels> {
        let mut c = StateCollector::new(deembed(), &["check".to_string()]);
        for x in rows {
            c.push(x);
        }
        c.finish()
    }

    #[test]
    fn fitting_rows_take_their_visits_state_and_rows_near_the_switch_none() {
        let rows = rows();
        let l = labels(&rows).expect("no gain reported: inferred");
        let map = &l.channels[&(5180, 80)];
        assert_eq!(map.states.len(), 2);
        for x in rows.iter().filter(|x| x.stage == "sweep") {
            let got = l.label(x);
            if x.atten_db < 40.0 {
                assert_eq!(got, Some(0), "{x:?}");
            } else if x.atten_db > 42.0 {
                assert_eq!(got, Some(1), "{x:?}");
            } else {
                // 41 dB: its bursts mixed the states, so none of them is used.
                assert_eq!(got, None, "{x:?}");
            }
        }
        assert_eq!(l.near_switch_bursts, 3);
    }

    #[test]
    fn verification_rows_go_by_level_and_are_not_judged_inside_the_unsure_span() {
        let rows = rows();
        let l = labels(&rows).expect("inferred");
        let checks: Vec<Option<u32>> = rows
            .iter()
            .filter(|x| x.stage == "check")
            .map(|x| l.label(x))
            .collect();
        // 20 dB: state 0 by level. 40 dB, inside 39–41: not judged. 60 dB: state 1 by level
        // even for a burst whose K looks like state 0 — level decides, not K.
        assert_eq!(checks, [Some(0), Some(0), None, None, Some(1), Some(1)]);
        assert_eq!(l.unsure_verify_bursts, 2);
    }

    #[test]
    fn a_device_that_reports_gain_is_not_relabelled() {
        let mut rows = rows();
        rows[5].dut_gain = Some(1);
        assert!(labels(&rows).is_none());
        let mut x = rows[0].clone();
        let l = labels(&super::tests::rows()).expect("inferred");
        x.dut_gain = Some(7);
        l.apply(&mut x);
        assert_eq!(x.dut_gain, Some(7), "a reported index is kept");
        x.dut_gain = None;
        l.apply(&mut x);
        assert_eq!(x.dut_gain, Some(0));
    }
}
