//! Removing the bench from a measured round trip, so what is left is the DUT's own delay.
//!
//! The round trip crosses the path twice (cables, fixtures and the attenuator in its current
//! state) and includes the reference unit's TX + RX delay, which depends on the reference's own
//! gain state because both ends see the same attenuation:
//! `K_dut = RTT_corr − 2·τ_path(A) − K_ref(g_ref)` (design §2).

use crate::bench::{MeasuredPath, PathFacts, PerGain};
use std::sync::Arc;

/// The bench delays the fitter subtracts from every corrected RTT.
#[derive(Debug, Clone, PartialEq)]
pub struct Deembed {
    /// One-way delay of cables and fixtures, excluding the attenuator.
    pub cable_delay_ps: f64,
    /// Extra one-way delay of the attenuator per dB of setting.
    pub atten_delay_ps_per_db: f64,
    /// The reference unit's calibrated K, constant or per reference gain state.
    pub reference_delay: PerGain,
    /// The K a range-reporting DUT removed before reporting, added back to its ranges
    /// (`RTT = 2d/c + K_app`); `None` when unknown, and then ranges cannot be used.
    pub applied_k_ps: Option<f64>,
    /// A path measured with a VNA: per channel, the round trip τ21 + τ12 replaces
    /// 2·(cable + slope·A).
    pub measured: Option<Arc<MeasuredPath>>,
}

impl Deembed {
    /// De-embedding for a bench's `[path]` facts and its reference unit's calibrated delay.
    pub fn new(path: &PathFacts, reference_delay: PerGain) -> Self {
        Self {
            cable_delay_ps: path.cable_delay_ps,
            atten_delay_ps_per_db: path.atten_delay_ps_per_db,
            reference_delay,
            applied_k_ps: None,
            measured: None,
        }
    }

    /// The same de-embedding with the path's delays from a VNA measurement, per channel.
    pub fn with_measured(self, measured: Option<Arc<MeasuredPath>>) -> Self {
        Self { measured, ..self }
    }

    /// The same de-embedding for a DUT that removed `applied_k_ps` from the ranges it reports.
    pub fn with_applied_k(self, applied_k_ps: Option<f64>) -> Self {
        Self {
            applied_k_ps,
            ..self
        }
    }

    /// One-way path delay with the attenuator at `atten_db`, from the bench's numbers.
    pub fn one_way_path_ps(&self, atten_db: f64) -> f64 {
        self.cable_delay_ps + self.atten_delay_ps_per_db * atten_db
    }

    /// The path's round-trip delay on `channel` (center, bandwidth, MHz) with the attenuator at
    /// `atten_db`: τ21 + τ12 of a measured path (with the attenuator's files, or its slope
    /// both ways), else twice the one-way delay. `None` when the
    /// measured path does not cover the channel (`check` and the fit say so beforehand).
    pub fn round_trip_path_ps(&self, channel: (u32, u32), atten_db: f64) -> Option<f64> {
        match &self.measured {
            None => Some(2.0 * self.one_way_path_ps(atten_db)),
            // Without attenuator files the bench's slope still applies (it is 0 with them).
            Some(m) => m
                .channel(channel.0, channel.1)
                .ok()
                .map(|c| c.round_trip_ps(atten_db) + 2.0 * self.atten_delay_ps_per_db * atten_db),
        }
    }

    /// The DUT's K from a clock-corrected RTT on `channel`:
    /// `RTT_corr − τ_path,round trip(atten_db) − K_ref(ref_gain)`. `None` when the reference
    /// table has no value for `ref_gain` or the measured path none for the channel.
    pub fn dut_k_ps(
        &self,
        rtt_corr_ps: f64,
        channel: (u32, u32),
        atten_db: f64,
        ref_gain: Option<u32>,
    ) -> Option<f64> {
        let k_ref_ps = self.reference_delay.at(ref_gain)?;
        Some(rtt_corr_ps - self.round_trip_path_ps(channel, atten_db)? - k_ref_ps)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    const CH: (u32, u32) = (5180, 20);

    fn demo_path() -> PathFacts {
        // Design §4 example bench: cable 6100 ps one way, reference K 2800 ps.
        PathFacts {
            cable_delay_ps: 6100.0,
            fixed_loss_db: 8.0,
            atten_delay_ps_per_db: 0.5,
        }
    }

    #[test]
    fn constant_reference_accepts_any_gain() {
        let d = Deembed::new(&demo_path(), PerGain::Same(2800.0));
        // 2·(6100 + 0.5·40) + 2800 = 15 040 of bench delay; the rest is the DUT.
        let rtt = 15_040.0 + 2_400.0;
        assert_eq!(d.dut_k_ps(rtt, CH, 40.0, None), Some(2_400.0));
        assert_eq!(d.dut_k_ps(rtt, CH, 40.0, Some(9)), Some(2_400.0));
    }

    #[test]
    fn per_gain_reference_needs_a_known_gain() {
        let d = Deembed::new(&demo_path(), PerGain::Each(vec![2800.0, 2900.0]));
        assert_eq!(
            d.dut_k_ps(20_000.0, CH, 0.0, Some(1)),
            Some(20_000.0 - 12_200.0 - 2900.0)
        );
        assert_eq!(d.dut_k_ps(20_000.0, CH, 0.0, Some(2)), None);
        assert_eq!(d.dut_k_ps(20_000.0, CH, 0.0, None), None);
    }

    #[test]
    fn a_measured_path_gives_both_ways_and_the_slope_still_applies_without_attenuator_files() {
        use crate::bench::measured_path::test_line;
        let measured = MeasuredPath::new(test_line("path.touchstone", 1000.0, 1010.0), vec![]);
        let d = Deembed::new(&demo_path(), PerGain::Same(2800.0))
            .with_measured(Some(Arc::new(measured)));
        // τ21 + τ12 = 2010 ps, and 2·0.5 ps/dB·40 dB of attenuator.
        let k = d
            .dut_k_ps(10_000.0, (5200, 80), 40.0, None)
            .expect("covered");
        assert!(
            (k - (10_000.0 - 2010.0 - 40.0 - 2800.0)).abs() < 1e-6,
            "{k}"
        );
        assert_eq!(d.dut_k_ps(10_000.0, (5600, 80), 40.0, None), None);
    }

    #[test]
    fn agrees_with_path_facts() {
        let path = demo_path();
        let d = Deembed::new(&path, PerGain::Same(0.0));
        assert_eq!(d.one_way_path_ps(33.0), path.one_way_delay_ps(33.0));
    }

    proptest! {
        #[test]
        fn removes_exactly_what_it_added(
            k_dut in 0.0f64..10_000.0,
            cable in 0.0f64..50_000.0,
            slope in 0.0f64..5.0,
            atten in 0.0f64..100.0,
            k_ref in 0.0f64..10_000.0,
        ) {
            let d = Deembed {
                cable_delay_ps: cable,
                atten_delay_ps_per_db: slope,
                reference_delay: PerGain::Same(k_ref),
                applied_k_ps: None,
                measured: None,
            };
            let rtt = k_dut + 2.0 * (cable + slope * atten) + k_ref;
            let got = d.dut_k_ps(rtt, CH, atten, None);
            prop_assert!(got.is_some_and(|k| (k - k_dut).abs() < 1e-8));
        }
    }
}
