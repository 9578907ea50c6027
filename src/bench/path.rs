//! The bench's own signal path: what the fitter removes and the simulator takes as truth.

use serde::Deserialize;

/// `[path]` of a bench file (design §4 contract keys plus the attenuator's delay slope).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PathFacts {
    /// One-way delay of cables and fixtures, excluding the attenuator.
    pub cable_delay_ps: f64,
    /// One-way loss of cables and fixtures, excluding the attenuator.
    pub fixed_loss_db: f64,
    /// Extra one-way delay the attenuator adds per dB of setting (0 when unknown or negligible).
    #[serde(default)]
    pub atten_delay_ps_per_db: f64,
}

impl PathFacts {
    /// One-way delay of the whole path with the attenuator at `atten_db`.
    pub fn one_way_delay_ps(&self, atten_db: f64) -> f64 {
        self.cable_delay_ps + self.atten_delay_ps_per_db * atten_db
    }
}
