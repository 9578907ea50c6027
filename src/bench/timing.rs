//! How long a real bench's actions take: `[timing]` in a bench file. Used only to estimate a
//! plan's bench time before it runs (`taucal check`); the runner never waits on these numbers.
//! A simulated bench takes its timing from its `[sim]` truth instead, since that is what its
//! instruments spend.

use crate::diagnostic::KeyError;
use serde::Deserialize;

/// Durations of the bench's actions.
#[derive(Debug, Clone, Copy, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TimingFacts {
    /// Time from asking for a burst to its first exchange (FTM negotiation).
    #[serde(default = "default_burst_setup")]
    pub burst_setup_ms: f64,
    /// Interval between successive exchanges of a burst.
    #[serde(default = "default_frame_interval")]
    pub frame_interval_us: f64,
    /// Time the attenuator takes to change its setting.
    #[serde(default = "default_switch")]
    pub atten_switch_ms: f64,
}

impl Default for TimingFacts {
    fn default() -> Self {
        TimingFacts {
            burst_setup_ms: default_burst_setup(),
            frame_interval_us: default_frame_interval(),
            atten_switch_ms: default_switch(),
        }
    }
}

// The defaults are the simulator's (`src/sim/truth.rs`), so an untimed real bench and the demo
// bench estimate alike.
fn default_burst_setup() -> f64 {
    5.0
}
fn default_frame_interval() -> f64 {
    1000.0
}
fn default_switch() -> f64 {
    2.0
}

impl TimingFacts {
    /// Refuses negative or non-finite durations, naming the key.
    pub fn validate(&self) -> Result<(), KeyError> {
        for (key, v) in [
            ("timing.burst_setup_ms", self.burst_setup_ms),
            ("timing.frame_interval_us", self.frame_interval_us),
            ("timing.atten_switch_ms", self.atten_switch_ms),
        ] {
            if !(v.is_finite() && v >= 0.0) {
                return Err(KeyError::new(
                    key,
                    format!("{v} is negative or not finite"),
                    "give a duration ≥ 0",
                ));
            }
        }
        Ok(())
    }
}
