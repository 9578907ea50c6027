//! A receiver's automatic gain control: which gain state it picks for a measured input level.
//!
//! Gain index 0 is the lowest gain, chosen for the strongest signals; each threshold (strictly
//! descending) is the level at which the AGC steps to the next index. With a hysteresis band the
//! state is sticky: it leaves a state only when the level passes a threshold by more than half
//! the band, so the switch point sweeping down differs from the one sweeping up and, near a
//! threshold, one attenuation setting can show two states. The state is remembered across
//! exchanges and bursts, as a real receiver's is between frames.

/// Gain-state machine of one receiver.
#[derive(Debug, Clone, PartialEq)]
pub struct Agc {
    thresholds_dbm: Vec<f64>,
    half_band_db: f64,
    state: Option<u32>,
}

impl Agc {
    /// An AGC with `thresholds_dbm` (strictly descending, one fewer than the gain states) and a
    /// hysteresis band `hysteresis_db` wide, centred on each threshold. It has no state until the
    /// first measurement.
    pub fn new(thresholds_dbm: &[f64], hysteresis_db: f64) -> Self {
        Agc {
            thresholds_dbm: thresholds_dbm.to_vec(),
            half_band_db: hysteresis_db.max(0.0) / 2.0,
            state: None,
        }
    }

    /// Number of gain states.
    pub fn states(&self) -> u32 {
        u32::try_from(self.thresholds_dbm.len()).map_or(u32::MAX, |n| n.saturating_add(1))
    }

    /// The gain state after the last measurement, if any.
    pub fn state(&self) -> Option<u32> {
        self.state
    }

    /// Feeds one measured input level and returns the gain state chosen for it.
    pub fn update(&mut self, level_dbm: f64) -> u32 {
        let next = match self.state {
            // With no history there is nothing to be sticky about: take the state whose range
            // holds the level.
            None => self.memoryless(level_dbm),
            Some(mut s) => {
                while self
                    .threshold(s)
                    .is_some_and(|t| level_dbm <= t - self.half_band_db)
                {
                    s += 1;
                }
                while s > 0
                    && self
                        .threshold(s - 1)
                        .is_some_and(|t| level_dbm > t + self.half_band_db)
                {
                    s -= 1;
                }
                s
            }
        };
        self.state = Some(next);
        next
    }

    /// Threshold between state `s` and state `s + 1`.
    fn threshold(&self, s: u32) -> Option<f64> {
        self.thresholds_dbm.get(s as usize).copied()
    }

    fn memoryless(&self, level_dbm: f64) -> u32 {
        let at_or_above = self
            .thresholds_dbm
            .iter()
            .filter(|&&t| level_dbm <= t)
            .count();
        u32::try_from(at_or_above).unwrap_or(u32::MAX)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Design §4 example thresholds.
    const THRESHOLDS_DBM: [f64; 2] = [-30.0, -55.0];

    /// Levels from `from_dbm` to `to_dbm` in 0.1 dB steps, inclusive.
    fn sweep(from_dbm: f64, to_dbm: f64) -> Vec<f64> {
        let steps = ((to_dbm - from_dbm).abs() * 10.0).round() as i32;
        let dir = (to_dbm - from_dbm).signum();
        (0..=steps)
            .map(|i| from_dbm + dir * f64::from(i) / 10.0)
            .collect()
    }

    /// The levels at which the state changed during a sweep, with the state entered.
    fn switches(agc: &mut Agc, levels: &[f64]) -> Vec<(f64, u32)> {
        let mut out = Vec::new();
        let mut last = None;
        for &p in levels {
            let s = agc.update(p);
            if last.is_some_and(|l| l != s) {
                out.push((p, s));
            }
            last = Some(s);
        }
        out
    }

    #[test]
    fn without_hysteresis_the_state_follows_the_level() {
        // Design §4: index 0 above the first threshold, steps at each threshold.
        let mut agc = Agc::new(&THRESHOLDS_DBM, 0.0);
        assert_eq!(agc.state(), None);
        assert_eq!(agc.update(-10.0), 0);
        assert_eq!(agc.update(-29.9), 0);
        assert_eq!(agc.update(-30.0), 1);
        assert_eq!(agc.update(-54.9), 1);
        assert_eq!(agc.update(-55.0), 2);
        assert_eq!(agc.update(-90.0), 2);
        assert_eq!(agc.update(-10.0), 0);
        assert_eq!(agc.states(), 3);
    }

    #[test]
    fn without_hysteresis_down_and_up_sweeps_switch_at_the_same_levels() {
        let mut agc = Agc::new(&THRESHOLDS_DBM, 0.0);
        let down = switches(&mut agc, &sweep(-20.0, -70.0));
        let up = switches(&mut agc, &sweep(-70.0, -20.0));
        assert_eq!(down.len(), 2);
        assert_eq!(up.len(), 2);
        assert!((down[0].0 - -30.0).abs() < 1e-9 && down[0].1 == 1);
        assert!((down[1].0 - -55.0).abs() < 1e-9 && down[1].1 == 2);
        // Going up, the state leaves at the first level above the threshold: one 0.1 dB step.
        assert!((up[0].0 - -54.9).abs() < 1e-9 && up[0].1 == 1);
        assert!((up[1].0 - -29.9).abs() < 1e-9 && up[1].1 == 0);
    }

    #[test]
    fn hysteresis_separates_down_and_up_switch_points_by_the_band() {
        // Common practice: a sticky band around each switch point stops the AGC toggling on
        // level noise; the down and up switch points differ by the band's width.
        let band_db = 4.0;
        let mut agc = Agc::new(&THRESHOLDS_DBM, band_db);
        let down = switches(&mut agc, &sweep(-20.0, -70.0));
        let up = switches(&mut agc, &sweep(-70.0, -20.0));
        assert_eq!(down.len(), 2);
        assert_eq!(up.len(), 2);
        assert!((down[0].0 - -32.0).abs() < 1e-9, "{down:?}");
        assert!((down[1].0 - -57.0).abs() < 1e-9, "{down:?}");
        assert!((up[0].0 - -52.9).abs() < 1e-9, "{up:?}");
        assert!((up[1].0 - -27.9).abs() < 1e-9, "{up:?}");
        let gap_db = up[1].0 - down[0].0;
        assert!((gap_db - band_db).abs() <= 0.1 + 1e-9, "gap {gap_db}");
    }

    #[test]
    fn inside_the_band_the_state_depends_on_history() {
        // One level, two states: what the fitter must group by (design §2).
        let mut from_above = Agc::new(&THRESHOLDS_DBM, 4.0);
        from_above.update(-20.0);
        let mut from_below = Agc::new(&THRESHOLDS_DBM, 4.0);
        from_below.update(-40.0);
        assert_eq!(from_above.update(-30.5), 0);
        assert_eq!(from_below.update(-30.5), 1);
    }

    #[test]
    fn a_large_step_crosses_several_thresholds_at_once() {
        let mut agc = Agc::new(&THRESHOLDS_DBM, 4.0);
        assert_eq!(agc.update(-10.0), 0);
        assert_eq!(agc.update(-80.0), 2);
        assert_eq!(agc.update(-10.0), 0);
    }

    #[test]
    fn single_state_receiver_always_reports_zero() {
        let mut agc = Agc::new(&[], 3.0);
        assert_eq!(agc.states(), 1);
        assert_eq!(agc.update(20.0), 0);
        assert_eq!(agc.update(-120.0), 0);
    }
}
